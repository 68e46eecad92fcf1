"""The grey frames of a clip within short time windows, for reading the ball's surface.

Decoded in order from the start of the clip (never seeking, see :mod:`balltraj.vision.clip`), in one
pass for all the windows asked for: frames outside every window dropped, reading stopped after the last.
"""
from __future__ import annotations

import numpy as np

from .clip import read_frames


def read_window(path, start_s: float, end_s: float, *, capture_fps: float | None = None,
                indices=None) -> tuple[list[np.ndarray], np.ndarray, np.ndarray]:
    """Grey frames with start_s <= t <= end_s.

    Parameters
    ----------
    path : path-like
        The clip.
    start_s, end_s : float [s]
        The window, on the clip's clock (seconds from its first decoded frame, as the tracker times them).
    capture_fps : float, optional [frames/s]
        True capture rate of a slow-motion file stored time-stretched.
    indices : iterable of int, optional
        Keep only these frame indices (e.g. the frames where the ball was tracked).

    Returns
    -------
    frames : list of ndarray, each shape (H, W) uint8
    times : ndarray, shape (N,) [s]
    index : ndarray, shape (N,) int
        Frame index of each frame in the clip.
    """
    want = None if indices is None else {int(k) for k in indices}
    frames, times, index = [], [], []
    for k, t, frame in read_frames(path, start_s=max(0.0, start_s), end_s=end_s, capture_fps=capture_fps,
                                   grey=True):
        if want is not None and k not in want:
            continue
        frames.append(np.ascontiguousarray(frame))
        times.append(t)
        index.append(k)
        if want is not None and len(index) == len(want):
            break
    return frames, np.asarray(times, float), np.asarray(index, int)


def read_windows(path, windows, *, capture_fps: float | None = None) -> list[tuple[list[np.ndarray], np.ndarray,
                                                                                     np.ndarray]]:
    """Grey frames of several windows, decoded in one pass.

    Parameters
    ----------
    path : path-like
        The clip.
    windows : sequence of (start_s, end_s) [s]
        The windows on the clip's clock (they may overlap).
    capture_fps : float, optional [frames/s]
        True capture rate of a slow-motion file stored time-stretched.

    Returns
    -------
    list of (frames, times, index)
        One entry per window, as :func:`read_window` returns them (a frame in two windows is shared).
    """
    windows = [(max(0.0, float(a)), float(b)) for a, b in windows]
    out = [([], [], []) for _ in windows]
    if not windows:
        return []
    first, last = min(a for a, _ in windows), max(b for _, b in windows)
    for k, t, frame in read_frames(path, start_s=first, end_s=last, capture_fps=capture_fps, grey=True):
        inside = [i for i, (a, b) in enumerate(windows) if a <= t <= b]
        if inside:
            f = np.ascontiguousarray(frame)
            for i in inside:
                out[i][0].append(f)
                out[i][1].append(t)
                out[i][2].append(k)
    return [(f, np.asarray(t, float), np.asarray(k, int)) for f, t, k in out]
