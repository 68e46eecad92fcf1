"""Clip -> timed pixel observations of each flight (detection + tracking), optional overlay."""

from __future__ import annotations

from contextlib import contextmanager
from dataclasses import dataclass

import cv2
import numpy as np

from ..camera.model import Camera
from ..errors import InputError
from .clip import clip_info, read_frames
from .detect import Detector, radius_gate_map
from .track import TrackedFlight, Tracker


@dataclass(frozen=True)
class TrackResult:
    flights: list[TrackedFlight]
    n_frames: int
    fps_measured: float
    width: int
    height: int
    warnings: list[str]


@contextmanager
def _opencv_single_threaded():
    """Decoding keeps one core busy and detection the other; OpenCV's own worker pool, waking up for
    every small image operation, only adds contention (about 10 % of the wall time measured with
    tests/benchmarks/bench_track.py). Its setting is process-wide, so it is restored afterwards."""
    threads = cv2.getNumThreads()
    cv2.setNumThreads(1)
    try:
        yield
    finally:
        cv2.setNumThreads(threads)


@_opencv_single_threaded()
def track_clip(path, camera: Camera | None = None, ball_radius_m: float | None = None, *,
               capture_fps: float | None = None, start_s: float = 0.0, end_s: float | None = None,
               progress=None, overlay_path=None) -> TrackResult:
    info = clip_info(path)
    if camera is not None and tuple(camera.image_size) != (info.width, info.height):
        raise InputError(f"the camera file is for {camera.image_size[0]}x{camera.image_size[1]} frames but the "
                         f"clip's frames are {info.width}x{info.height}", path=str(path),
                         hint="calibrate the camera at the clip's resolution and orientation")
    gate = radius_gate_map(camera, ball_radius_m, (info.width, info.height))
    det = Detector(info.width, info.height, gate=gate)
    trk = Tracker(info.width, info.height, focal_px=None if camera is None else camera.focal_px,
                  ball_radius_m=ball_radius_m, camera=camera)
    times, n = [], 0
    writer = None
    if overlay_path is not None:
        fps = info.nominal_fps if info.nominal_fps > 0 else 30.0
        writer = cv2.VideoWriter(str(overlay_path), cv2.VideoWriter_fourcc(*"mp4v"), fps, (info.width, info.height))
    overlay = writer is not None
    prep = (lambda f: (f, det.prepare(f))) if overlay else det.prepare  # the decoding thread does this
    for k, t, item in read_frames(path, start_s=start_s, end_s=end_s, capture_fps=capture_fps,
                                  grey=not overlay, prepare=prep):
        if overlay:
            frame, prepared = item
        else:
            frame, prepared = None, item
        cands = det.process(frame, prepared)
        trk.update(k, t, cands)
        times.append(t)
        n += 1
        if writer is not None:
            for c in cands:
                cv2.circle(frame, (int(round(c.u)), int(round(c.v))), int(max(3, c.radius_px + 3)), (0, 200, 255), 1)
            for tr in trk.active:
                if tr.confirmed:
                    pts = np.round(tr.uv()).astype(np.int32)
                    cv2.polylines(frame, [pts.reshape(-1, 1, 2)], False, (255, 80, 0), 2)
            writer.write(frame)
        if progress is not None and n % 16 == 0:
            progress(n, info.frame_count)
    if writer is not None:
        writer.release()
    flights = trk.finish()
    warnings = []
    fps_m = 0.0
    if len(times) > 2:
        dt = np.median(np.diff(times))
        fps_m = 1.0 / dt if dt > 0 else 0.0
        if fps_m < 90 and capture_fps is None:
            warnings.append(f"the clip runs at {fps_m:.0f} frames/s; 120 or 240 frames/s tracks fast balls far better"
                            " (for slow-motion files stored time-stretched, give --capture-fps)")
    return TrackResult(flights, n, fps_m, info.width, info.height, warnings)


def no_ball_error(path, res: TrackResult) -> InputError:
    """The error for a clip in which no flight was found, with filming hints."""
    return InputError(f"no ball flight was found in {res.n_frames} frames ({res.fps_measured:.0f} frames/s)",
                      path=str(path), hint=NO_BALL_HINT)


NO_BALL_HINT = ("film at 120-240 frames/s with a short shutter (1/1000 s or faster), keep the camera still on a "
                "tripod, and frame the whole flight with the ball clearly against the background")
