"""Reading clips frame by frame with their container timestamps.

Frames are read in order (never by seeking: seeking lands on wrong frames in variable-frame-rate
files) and timed by ``CAP_PROP_POS_MSEC`` read after each ``read()`` (exact for VFR phone video with
current OpenCV; frame index / nominal fps is not). OpenCV reports the first frame at 0 even when
the stream starts later, so times are seconds from the first decoded frame. Decoding runs in a
background thread so that detection on one frame overlaps decoding of the next.

Phone clips carry a rotation flag that OpenCV applies by default; camera files must describe the
frames as decoded.
"""

from __future__ import annotations

import queue
import threading
from dataclasses import dataclass
from pathlib import Path
from typing import Iterator

import cv2
import numpy as np

from ..errors import InputError


@dataclass(frozen=True)
class ClipInfo:
    path: str
    width: int
    height: int
    nominal_fps: float
    frame_count: int  # as the container says (may be wrong or 0)
    duration_s: float


def open_clip(path) -> tuple[cv2.VideoCapture, ClipInfo]:
    p = Path(path)
    if not p.exists():
        raise InputError("no such clip", path=str(path))
    if p.is_dir():
        raise InputError("this is a folder, not a clip", path=str(path))
    if p.stat().st_size == 0:
        raise InputError("the clip is empty (0 bytes)", path=str(path))
    with open(p, "rb") as f:
        head = f.read(64)
    if head and all(32 <= b < 127 or b in (9, 10, 13) for b in head):
        raise InputError("this is a text file, not a video", path=str(path))
    cap = cv2.VideoCapture(str(p), cv2.CAP_FFMPEG)
    if not cap.isOpened():
        raise InputError("cannot open the clip (not a video, or a codec this OpenCV cannot read)", path=str(path),
                         hint="convert it to MP4 (H.264) or give the original capture file")
    w = int(cap.get(cv2.CAP_PROP_FRAME_WIDTH))
    h = int(cap.get(cv2.CAP_PROP_FRAME_HEIGHT))
    fps = float(cap.get(cv2.CAP_PROP_FPS) or 0.0)
    n = int(cap.get(cv2.CAP_PROP_FRAME_COUNT) or 0)
    if w <= 0 or h <= 0:
        cap.release()
        raise InputError("the clip has no video frames", path=str(path))
    return cap, ClipInfo(str(p), w, h, fps, max(n, 0), n / fps if fps > 0 and n > 0 else 0.0)


def clip_info(path) -> ClipInfo:
    cap, info = open_clip(path)
    cap.release()
    return info


def _luma_capture(path, info: ClipInfo):
    """A capture that hands out the decoder's luma plane directly (no colour conversion at all:
    the cheapest way to a grey frame), or None where this codec or build does not do that."""
    try:
        cv2.utils.logging.setLogLevel(cv2.utils.logging.LOG_LEVEL_ERROR)
    except AttributeError:  # pragma: no cover - older OpenCV without the logging module
        pass
    cap = cv2.VideoCapture(str(path), cv2.CAP_FFMPEG)
    if not cap.isOpened() or not cap.set(cv2.CAP_PROP_CONVERT_RGB, 0):
        cap.release()
        return None
    ok, frame = cap.read()
    cap.release()
    if not ok or frame is None or frame.ndim != 2 or frame.shape != (info.height, info.width) or frame.dtype != np.uint8:
        return None
    # the plane is the luma only where the decoder's samples are 8-bit: from a 10-bit clip (the HDR video
    # of many phones) OpenCV hands out the plane's bytes, two to a sample, in a frame of the right shape.
    # So the first frame must look like the colour-converted one
    ref = cv2.VideoCapture(str(path), cv2.CAP_FFMPEG)
    ok, colour = ref.read()
    ref.release()
    if not ok or colour is None or not is_luma_of(frame, colour):
        return None
    cap = cv2.VideoCapture(str(path), cv2.CAP_FFMPEG)
    cap.set(cv2.CAP_PROP_CONVERT_RGB, 0)
    return cap


def is_luma_of(plane: np.ndarray, colour: np.ndarray, tol: float = 8.0) -> bool:
    """Whether an 8-bit plane is the luma of a BGR frame, in video range (16-235) or full range: the
    median difference from the frame's grey, mapped either way, is within ``tol`` grey levels.

    >>> g = np.tile(np.arange(256, dtype=np.uint8), (4, 1))
    >>> bgr = cv2.cvtColor(g, cv2.COLOR_GRAY2BGR)
    >>> is_luma_of((16 + g * (219 / 255)).round().astype(np.uint8), bgr), is_luma_of(255 - g, bgr)
    (True, False)
    """
    grey = cv2.cvtColor(colour, cv2.COLOR_BGR2GRAY).astype(np.float32)
    p = plane.astype(np.float32)
    return min(float(np.median(np.abs(p - (16 + grey * (219 / 255))))), float(np.median(np.abs(p - grey)))) <= tol


def read_frames(path, *, start_s: float = 0.0, end_s: float | None = None, capture_fps: float | None = None,
                prefetch: int = 8, grey: bool = False, prepare=None) -> Iterator[tuple[int, float, np.ndarray]]:
    """Yield (index, time_s, frame) in order, decoding in a background thread.

    Frames are BGR, or with ``grey`` single-channel: the decoder's luma plane where the codec allows
    (8-bit samples), else converted in the decoding thread to the same scale (video range, 16-235).
    ``capture_fps`` re-times a slow-motion file stored time-stretched: time = index / capture_fps.
    Frames before ``start_s`` are decoded and dropped (no seeking); reading stops after ``end_s``.
    ``prepare(frame)``, if given, runs in the decoding thread and its result is yielded instead of
    the frame (per-frame work that releases the interpreter lock overlaps with the caller's work).
    """
    cap, info = open_clip(path)
    convert = False
    if grey:
        luma = _luma_capture(path, info)
        if luma is not None:
            cap.release()
            cap = luma
        else:
            convert = True
    q: queue.Queue = queue.Queue(maxsize=prefetch)
    stop = threading.Event()

    def worker():
        k = 0
        t_first = None
        try:
            ok, frame = cap.read()
            while ok and not stop.is_set():
                ms = cap.get(cv2.CAP_PROP_POS_MSEC)
                if t_first is None:
                    t_first = ms
                t = k / capture_fps if capture_fps else (ms - t_first) / 1000.0
                if convert:  # on the luma's scale (video range, 16-235), as the decoder's plane would be
                    frame = cv2.convertScaleAbs(cv2.cvtColor(frame, cv2.COLOR_BGR2GRAY), alpha=219 / 255, beta=16)
                q.put((k, t, frame if prepare is None else prepare(frame)))
                k += 1
                ok, frame = cap.read()
        finally:
            q.put(None)

    th = threading.Thread(target=worker, daemon=True)
    th.start()
    n = 0
    t_last = None
    try:
        item = q.get()
        while item is not None and (end_s is None or item[1] <= end_s):
            k, t, frame = item
            t_last = t
            if t >= start_s:
                n += 1
                yield k, t, frame
            item = q.get()
    finally:
        stop.set()
        while th.is_alive():
            try:
                q.get(timeout=0.05)
            except queue.Empty:
                pass
        cap.release()
    if n == 0 and t_last is not None and t_last < start_s:
        raise InputError(f"the clip ends at {t_last:.2f} s, before the start asked for ({start_s:g} s)", path=str(path),
                         hint="give a --start within the clip")
    if n == 0:
        raise InputError("no frames could be decoded" + (f" in {start_s:g}..{end_s:g} s" if end_s else ""),
                         path=str(path), hint="the clip may be truncated or corrupt; try the original file")


def truncation_warning(info: ClipInfo, decoded: int) -> str | None:
    """A warning when the container announces clearly more frames than could be decoded (a file cut short
    in copying or recording): flights then end where the frames do. ``decoded``: frames read from the
    start of the clip to its end. Container counts may be estimates from the duration, so a few frames
    (2 and 3 %) short pass."""
    if info.frame_count > 0 and decoded < 0.97 * info.frame_count - 2:
        return (f"the file announces {info.frame_count} frames but only {decoded} could be decoded: it may be "
                "truncated (cut short in copying or recording), and flights end where its frames do")
    return None


def decode_only(path) -> tuple[int, float]:
    """Decode every frame and do nothing else (the reference for tracking speed): (frames, seconds)."""
    import time

    cap, _ = open_clip(path)
    t0 = time.perf_counter()
    n = 0
    ok, _ = cap.read()
    while ok:
        n += 1
        ok, _ = cap.read()
    cap.release()
    return n, time.perf_counter() - t0
