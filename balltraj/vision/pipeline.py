"""Clip -> timed pixel observations of each flight (detection + tracking), optional overlay."""

from __future__ import annotations

from contextlib import contextmanager
from dataclasses import dataclass, field, replace

import cv2
import numpy as np

from ..camera.model import Camera
from ..errors import InputError
from .checks import _extent_px, _net_speed
from .ball_size import RadiusRefinement, apply_refinement, refine_flight_radii
from .clip import clip_info, read_frames, truncation_warning
from .detect import Detector, radius_gate_map
from .extend import extend_flights
from .frames import FrameGuard, full_resolution
from .hold import FrameHold
from .overlay import write_overlay
from .track import TrackedFlight, Tracker
from .trackpoints import stayed_put


@dataclass(frozen=True)
class TrackResult:
    flights: list[TrackedFlight]
    n_frames: int
    fps_measured: float
    width: int
    height: int
    warnings: list[str]
    radii: list[RadiusRefinement] = field(default_factory=list)  # per flight, when the radii were refined


EXTEND_HOLD_BYTES = 512 * 2 ** 20  # grey frames kept while tracking for the extension (hold.py; no second decoding)


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
               progress=None, overlay_path=None, on_exposure=None, refine_radius: bool = True, extend: bool = True) -> TrackResult:
    """Find and link the ball in a clip.

    Every frame is read as the decoder's luma plane (the same pixels whether or not an overlay is
    written). Repeated frames (frame-rate conversion) are skipped, so each exposure gives at most one
    observation, timed by the first frame that shows it; a scene cut ends every track and resets the
    background; the view's motion between exposures is estimated and the background moved with it.

    ``overlay_path``: also write a video with each flight in its own colour, its number and time,
    and rejected candidates drawn faintly (a second decoding pass). ``on_exposure(frame_index,
    time_s, candidates)``, if given, is called for every exposure. ``refine_radius`` (with a camera):
    each flight's apparent radii are measured again from the ball's edge (``ball_size.py``, one more
    decoding pass over the flights' frames, reported through ``progress`` as a second run through the
    clip's frames); ``TrackResult.radii`` says which were. ``extend``: each flight is carried on
    where the tracker lost the ball and through the exposures it coasted over (``extend.py``; on the
    grey frames kept while tracking near confirmed tracks, up to EXTEND_HOLD_BYTES (``hold.py``); the clip
    is not decoded again, and the search stops where a frame was not kept; with EXTEND_HOLD_BYTES 0
    nothing is kept and the frames needed are decoded again).
    """
    info = clip_info(path)
    if camera is not None and tuple(camera.image_size) != (info.width, info.height):
        raise InputError(f"the camera file is for {camera.image_size[0]}x{camera.image_size[1]} frames but the "
                         f"clip's frames are {info.width}x{info.height}", path=str(path),
                         hint="calibrate the camera at the clip's resolution and orientation")
    gate = radius_gate_map(camera, ball_radius_m, (info.width, info.height))
    det = Detector(info.width, info.height, gate=gate)
    trk = Tracker(info.width, info.height, focal_px=None if camera is None else camera.focal_px,
                  ball_radius_m=ball_radius_m, camera=camera)
    guard = FrameGuard()

    def prepare(frame):
        # in the decoding thread, frame by frame in order: the grey and half-size images, and what
        # the frame is (repeat, cut, view motion) -- work that overlaps the detection of earlier frames
        gray, small = det.prepare(frame)
        kind = guard.check(small)
        return gray, small, kind, guard.total_motion.copy(), guard.max_moved_px

    times, frame_of, log = [], [], []
    views, segment = [], []  # per exposure: the view's motion (scene -> image, full resolution), cuts before it
    held = FrameHold(EXTEND_HOLD_BYTES if extend else 0, info.width * info.height)  # for the extension
    moved_px = 0.0
    n = n_repeat = 0
    cuts: list[float] = []
    shown: list[float] = []  # container times of the exposures since the last cut
    own_t: list[float] = []  # every exposure's container time
    seg_repeats: list[list[int]] = [[]]  # per scene: the frames (counted from its first) taken for repeats
    seg_frames = [0]
    repeats_here = 0
    last_k = -1
    for k, t, (gray, small, kind, motion, moved_px) in read_frames(
            path, start_s=start_s, end_s=end_s, capture_fps=capture_fps, grey=True, prepare=prepare):
        n += 1
        last_k = k
        if kind.kind == "cut":
            seg_repeats.append([])
            seg_frames.append(0)
        seg_frames[-1] += 1
        if kind.kind == "repeat":
            n_repeat += 1
            repeats_here += 1
            seg_repeats[-1].append(seg_frames[-1] - 1)
            continue
        if kind.kind == "cut":
            trk.end_all("scene cut")
            det.reset()
            cuts.append(t)
            shown, repeats_here = [], 0
        shown.append(t)
        own_t.append(t)
        if repeats_here and capture_fps is None:
            t = exposure_time(shown)
        det.set_view(motion if moved_px > 0 else None)
        cands = det.process(None, (gray, small), trk.expected(t) if det.streaks == "tracked" else None)
        if kind.quiet and _converted(seg_repeats[-1], seg_frames[-1]) and (  # (every doubtful frame is quiet)
                on_cadence(seg_repeats[-1], seg_frames[-1] - 1) or kind.doubtful and stayed_put(trk.active, t, cands)):
            # a re-coded repeat that the frame guard could not tell from an exposure, in a scene whose
            # repeats so far are a frame-rate conversion's: it comes where the conversion's fixed
            # cadence puts the next repeat, or the moving tracks found their candidates where they were
            shown.pop()
            own_t.pop()
            n_repeat += 1
            repeats_here += 1
            seg_repeats[-1].append(seg_frames[-1] - 1)
            continue
        if moved_px > 0 and cands:
            cands = _in_scene(cands, motion)
        trk.update(len(frame_of), t, cands)
        views.append(full_resolution(motion))
        segment.append(len(cuts))
        held.add(len(frame_of), gray, live=any(tr.confirmed for tr in trk.active))
        frame_of.append(k)
        times.append(t)
        if overlay_path is not None:
            log.append((k, cands))
        if on_exposure is not None:
            on_exposure(k, t, cands)
        if progress is not None and n % 16 == 0:
            progress(n, info.frame_count)
    # the exposure times: re-timed by their count only in a scene whose repeats are a frame-rate
    # conversion's; elsewhere (frames of a still view that barely differ) the container's own times
    converted = [_converted(r, m) for r, m in zip(seg_repeats, seg_frames)]
    if capture_fps is None and not all(converted):
        times = [t if converted[sg] else t_own for t, t_own, sg in zip(times, own_t, segment)]
    ts = np.asarray(times)
    flights = [replace(f, frame=np.asarray(frame_of)[f.frame], t=ts[f.frame]) for f in trk.finish()]
    if extend and flights:  # carried on where the tracker lost the ball (extend.py, a pass over those frames)
        flights, _ = extend_flights(path, flights, frame_of, times, start_s=start_s, end_s=end_s,
                                    capture_fps=capture_fps, motions=views if moved_px > 0 else None,
                                    segment=segment, frame_size=(info.width, info.height), held=held.frames(),
                                    decode_missing=held.most == 0)
    held.clear()
    radii = []
    if refine_radius and camera is not None and flights:  # hook: the radius from the ball's edge (ball_size.py)
        radii = refine_flight_radii(path, flights, camera, start_s=start_s, end_s=end_s, capture_fps=capture_fps,
                                    view_moved=moved_px > 0.5, progress=progress, total_frames=info.frame_count)
        flights = apply_refinement(flights, radii)
    if overlay_path is not None:
        write_overlay(path, overlay_path, flights, log, fps=info.nominal_fps, start_s=start_s, end_s=end_s,
                      capture_fps=capture_fps)
    warnings = []
    fps_m = 0.0
    if len(times) > 2:
        dt = np.median(np.diff(times))
        fps_m = 1.0 / dt if dt > 0 else 0.0
    if n_repeat and not any(converted):
        warnings.append(f"{n_repeat} of {n} frames barely differ from the one before (nothing moved between them"
                        + ("" if moved_px > 2.0 else ": a still view") + "): each was used once, at the clip's own frame times")
    elif n_repeat:
        warnings.append(f"{n_repeat} of {n} frames repeat the previous image (frame-rate conversion): "
                        f"{fps_m:.0f} distinct images a second were used, one observation each")
    cut_short = truncation_warning(info, last_k + 1) if end_s is None else None
    if cut_short:
        warnings.append(cut_short)
    if cuts:
        warnings.append("scene cut at " + ", ".join(f"{c:.2f} s" for c in cuts) + ": tracks end there")
    if camera is not None and moved_px > 2.0:
        warnings.append(f"the view moved by up to {moved_px:.0f} px during the clip (hand-held or a pan): "
                        "the camera file describes a fixed view and no longer applies; use a tripod, or calibrate "
                        "from the clip itself")
    falls = [_apparent_fall(f, ball_radius_m) for f in flights] if flights else trk.fall_hints
    slow = slow_motion_hint(fps_m, capture_fps, [a for a in falls if a is not None])
    if not flights and not slow and capture_fps is None:
        slow = slow_track_hint(trk, fps_m)
    if not flights and not slow and trk.rejected:  # what kept the most promising track from being a flight
        n_pts, why = max(trk.rejected)
        warnings.append(f"the longest smooth track ({n_pts} frames) was not taken for the ball: {why}")
    if slow:
        warnings.append(slow)
    elif 0 < fps_m < 90 and capture_fps is None:
        warnings.append(f"the clip runs at {fps_m:.0f} frames/s; 120 or 240 frames/s tracks fast balls far better"
                        " (for slow-motion files stored time-stretched, give --capture-fps)")
    return TrackResult(flights, n, fps_m, info.width, info.height, warnings, radii)


def _in_scene(cands, motion):
    """Candidates with their scene position: the view's motion since the first exposure (half
    resolution, from the frame guard) undone at full resolution."""
    inv = np.linalg.inv(full_resolution(motion))[:2]
    out = []
    for c in cands:
        us, vs = inv @ [c.u, c.v, 1.0]
        out.append(replace(c, u_scene=float(us), v_scene=float(vs)))
    return out


MAX_CONVERSION_RUN = 12  # most frames in a row without a repeat in a frame-rate-converted scene


def _converted(repeats: list[int], n_frames: int) -> bool:
    """Are a scene's repeated frames a frame-rate conversion's? The conversions of the trade (24 or 25
    -> 30, 23.976 -> 29.97, 50 -> 60, 12 -> 29.97 frames/s) repeat a frame at least every 6th frame all
    through the clip (common practice); frames of a still view that barely differ come in stretches.
    So: at least two repeats, and nowhere more than MAX_CONVERSION_RUN frames (twice that spacing: one
    repeat missed) without one, from the scene's first frame to its last.

    >>> _converted(list(range(5, 300, 6)), 300)  # 25 -> 30 frames/s: every sixth frame repeats
    True
    >>> _converted([0, 1, 2, 3, 20, 21], 173)  # a still view before the throw at 240 frames/s
    False
    """
    if len(repeats) < 2:
        return False
    edges = [-1] + list(repeats) + [n_frames]
    return max(b - a - 1 for a, b in zip(edges[:-1], edges[1:])) <= MAX_CONVERSION_RUN


def on_cadence(repeats: list[int], frame: int) -> bool:
    """Is ``frame`` where a fixed conversion cadence puts the next repeat? The repeats so far (at
    least three, the last four looked at) all the same number of frames apart, and ``frame`` that many
    after the last (23.976 -> 29.97 and 24 -> 30 frames/s repeat every 5th frame, 25 -> 30 every 6th,
    50 -> 60 every 6th, common practice; 12 -> 29.97 shown unevenly has no fixed cadence).

    >>> on_cadence([1, 6, 11], 16), on_cadence([1, 6, 11], 15), on_cadence([1, 4, 11], 18), on_cadence([1, 6], 11)
    (True, False, False, False)
    """
    if len(repeats) < 3:
        return False
    gaps = np.diff(repeats[-4:])
    return bool(np.all(gaps == gaps[-1]) and frame == repeats[-1] + gaps[-1])


def exposure_time(shown: list[float], window: int = 60) -> float:
    """Time [s] of the latest exposure of frame-rate-converted footage (repeated frames): the
    container time of the first frame that shows an exposure lags it by up to a frame interval, at
    random (25 -> 30 frames/s shows 5 exposures in 6 frames, 1 or 2 frames each), which bends the
    path in time by up to a frame's motion. The exposures themselves were taken at an even rate, so
    their times are a straight line in their count: fitted (least squares) to the container times
    of the last ``window`` exposures and read at the latest (from the third exposure on: the
    container times alone err by up to a frame interval, a line through three of them by less)."""
    n = len(shown)
    if n < 3:
        return shown[-1]
    ts = np.asarray(shown[-window:])
    j = np.arange(len(ts), dtype=float)
    slope, icpt = np.polyfit(j, ts, 1)
    return float(icpt + slope * j[-1])


def _apparent_fall(f, ball_radius_m) -> float | None:
    """Downward acceleration [m/s^2] of a flight along the image's up-down axis, scaled by the ball's size."""
    if not ball_radius_m or len(f.t) < 8:
        return None
    a_px = 2.0 * np.polyfit(f.t - f.t.mean(), f.uv[:, 1], 2)[0]
    return float(a_px * ball_radius_m / max(float(np.median(f.radius_px)), 0.3))


def slow_motion_hint(fps: float, capture_fps, fall_hints) -> str | None:
    """A message when the ball falls far slower than gravity allows: the file is probably slow
    motion stored time-stretched (a ball in free flight falls at about 9.8 m/s^2, give or take its
    lift and drag; time stretched by s makes it g / s^2)."""
    if capture_fps is not None or not fall_hints:
        return None
    a = float(np.median(fall_hints))
    if not 0.02 < a < 1.0:  # a tenth of g or less: stretched 3x or more (small errors of scale do not get here)
        return None
    s = float(np.sqrt(9.81 / a))
    guess = fps * s
    common = min((120, 240, 480, 960), key=lambda c: abs(np.log(c / max(guess, 1.0))))
    return (f"the ball seems to fall at {a:.2f} m/s^2 instead of about 9.8: this looks like slow motion stored "
            f"time-stretched (about {s:.0f}x); give the capture rate with --capture-fps (e.g. --capture-fps {common})")


def slow_track_hint(trk: Tracker, fps: float) -> str | None:
    """A message when no flight was found but a track that looks like a ball in flight (smooth, of a
    ball's size and blur, crossing a twentieth of the view) was left out only for crossing the view more
    slowly than a ball: the file may be slow motion stored time-stretched. With the ball's size its
    apparent fall suggests the capture rate (time stretched by s makes a fall of g look like g / s^2)."""
    diag = float(np.hypot(trk.w, trk.h))
    ball = [tr for tr in trk.slow_tracks if _extent_px(tr.uv()) >= 0.05 * diag and _net_speed(tr) > 0.05 * trk.min_speed]
    if not ball:
        return None
    tr = max(ball, key=lambda x: len(x.points))
    a = trk.apparent_fall(tr)
    guess = ""
    if a is not None and 0.05 < a < 9.81 / 1.5:
        common = min((60, 120, 240, 480, 960), key=lambda c: abs(np.log(c / (fps * np.sqrt(9.81 / a)))))
        guess = f" (its fall, {a:.1f} m/s^2 instead of about 9.8, suggests --capture-fps {common})"
    return (f"a track that looks like a ball in flight ({len(tr.points)} frames) crossed the view at "
            f"{_net_speed(tr):.0f} px/s, slower than a ball in flight ({trk.min_speed:.0f} px/s here): if this is "
            f"slow motion stored time-stretched, give the capture rate with --capture-fps{guess}")


def no_ball_error(path, res: TrackResult) -> InputError:
    """The error for a clip in which no flight was found, with what tracking noticed and filming hints."""
    return InputError(f"no ball flight was found in {res.n_frames} frames ({res.fps_measured:.0f} frames/s)",
                      path=str(path), hint="; ".join(list(res.warnings) + [NO_BALL_HINT]))


NO_BALL_HINT = ("film at 120-240 frames/s with a short shutter (1/1000 s or faster), keep the camera still on a "
                "tripod, and frame the whole flight with the ball clearly against the background")
