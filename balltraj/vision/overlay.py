"""A video of what tracking saw: each flight in its own colour with its number and time, the
candidates that were not the ball drawn faintly. Drawn on the same luma frames tracking used."""

from __future__ import annotations

import cv2
import numpy as np

from .clip import read_frames

# distinct colours (BGR) for flights 1, 2, ...
PALETTE = [(0, 200, 255), (255, 120, 0), (80, 220, 60), (220, 60, 220), (60, 60, 255), (255, 220, 60),
           (160, 255, 160), (0, 120, 255)]
FAINT = (150, 150, 150)


def write_overlay(path, out_path, flights, log, *, fps: float, start_s: float = 0.0, end_s=None,
                  capture_fps=None) -> None:
    """Write ``out_path`` (mp4v) from ``path``.

    Parameters
    ----------
    flights : list of TrackedFlight
        Their ``frame`` indices are the clip's frame indices.
    log : list of (frame_index, candidates)
        Every candidate detected in each exposure.
    fps : float
        Frame rate written into the overlay file [frames/s] (30 when unknown).
    """
    by_frame = {k: c for k, c in log}
    on_flight = {}
    for f in flights:
        for i, k in enumerate(f.frame):
            on_flight[int(k)] = on_flight.get(int(k), []) + [(f, i)]
    writer = None
    try:
        for k, t, grey in read_frames(path, start_s=start_s, end_s=end_s, capture_fps=capture_fps, grey=True):
            frame = cv2.cvtColor(grey, cv2.COLOR_GRAY2BGR)
            if writer is None:
                h, w = grey.shape
                writer = cv2.VideoWriter(str(out_path), cv2.VideoWriter_fourcc(*"mp4v"), fps if fps > 0 else 30.0,
                                         (w, h))
            ball_here = {(round(float(f.uv[i, 0]), 3), round(float(f.uv[i, 1]), 3)) for f, i in on_flight.get(k, [])}
            for c in by_frame.get(k, []):
                if (round(c.u, 3), round(c.v, 3)) not in ball_here:
                    cv2.circle(frame, (int(round(c.u)), int(round(c.v))), int(max(3, c.radius_px + 2)), FAINT, 1)
            for f in flights:
                past = f.t <= t + 1e-9
                if not past.any() or t > f.t[-1] + 0.5:
                    continue
                col = PALETTE[(f.flight - 1) % len(PALETTE)]
                pts = np.round(f.uv[past]).astype(np.int32).reshape(-1, 1, 2)
                cv2.polylines(frame, [pts], False, col, 2)
                j = int(np.flatnonzero(past)[-1])
                u, v = int(round(f.uv[j, 0])), int(round(f.uv[j, 1]))
                cv2.circle(frame, (u, v), int(max(4, f.radius_px[j] + 3)), col, 2)
                cv2.putText(frame, f"flight {f.flight}  {f.t[j]:.3f} s", (u + 8, max(12, v - 8)),
                            cv2.FONT_HERSHEY_SIMPLEX, 0.45, col, 1, cv2.LINE_AA)
            writer.write(frame)
    finally:
        if writer is not None:
            writer.release()
