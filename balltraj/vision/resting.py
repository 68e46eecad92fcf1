"""A ball at rest before the flight: where it sits (sub-pixel), how big it looks, and the flight
that leaves it.

The frames before launch are compared with the frames just after it: the ball that rested at
the spot and left it is the difference between the two (median images, so passing noise and
movers drop out). Within a search window around the start of the first tracked flight
(extrapolated back in time), the difference blob must be round, of the radius the camera model
predicts for a ball lying on the ground at that pixel, still (its centroid steady over the
frames before launch), and on the flight's path extended backward.

Measurements (the same soft matte as the flight detector, :mod:`.detect`, so that the radius bias
measured here is the detector's): weights w = max(|I - A| - T/2, 0) against the after-launch
image A; the weighted centroid finds the ball and tests that it is still, the second moments give
the radius (a disc of radius r has variance r^2/4 per axis, times 1.08 for the matte's tapered edge,
as the detector). The centre that anchors the depth is the silhouette's (the edge fit of
:mod:`.edge_fit` on the median image before launch against the one after): the centroid of a shaded
ball's difference lies towards its lit half.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import cv2
import numpy as np

from ..camera.anchors import Anchor, GroundPoint, bounce_pixel, choose_anchor, ground_point
from ..camera.model import Camera
from ..errors import BallTrajError
from .clip import read_frames

MIN_BEFORE_FRAMES = 5


@dataclass(frozen=True)
class RestingBall:
    """The ball at rest before a flight.

    Attributes
    ----------
    uv : ndarray, shape (2,) [px]
        Sub-pixel centre (median over the frames at rest).
    uv_sigma_px : float [px]
        One-sigma error of the centre (frame-to-frame scatter / sqrt(frames), floored at 0.3 px:
        shading, texture and compression shift a centroid by 0.1-0.3 px, common practice).
    radius_px : float [px]
        The detector-style apparent radius (median over the frames).
    radii_px : ndarray, shape (K,) [px]
        The per-frame radii.
    expected_radius_px : float [px]
        f R / depth of a ball lying on the ground at ``uv``.
    motion_px : float [px]
        RMS frame-to-frame scatter of the centroid while at rest.
    frames : int
        Frames measured at rest.
    t_leaves_s : float [s]
        Time at which the flight's backward extrapolation comes closest to the spot.
    link_px : float [px]
        That closest distance.
    flight : int
        The flight that leaves it.
    anchor : GroundPoint
        The ball's centre in the world (ray through ``uv`` meeting z = ball radius).
    """

    uv: np.ndarray
    uv_sigma_px: float
    radius_px: float
    radii_px: np.ndarray
    expected_radius_px: float
    motion_px: float
    frames: int
    t_leaves_s: float
    link_px: float
    flight: int
    anchor: GroundPoint


@dataclass(frozen=True)
class RestingSearch:
    """The outcome of :func:`find_resting_ball`: the ball, or None and the reason."""

    ball: RestingBall | None
    reason: str


def _backward_path(t, uv, n_fit=8):
    """Quadratic image path (u(t), v(t)) through the flight's first observations."""
    t = np.asarray(t, float)[:n_fit]
    uv = np.asarray(uv, float)[:n_fit]
    deg = min(2, len(t) - 1)
    pu, pv = np.polyfit(t - t[0], uv[:, 0], deg), np.polyfit(t - t[0], uv[:, 1], deg)
    return lambda tt: np.stack([np.polyval(pu, tt - t[0]), np.polyval(pv, tt - t[0])], axis=-1)


def _expected_radius(camera: Camera, uv, ball_radius_m: float) -> float:
    try:
        gp = ground_point(camera, uv, ball_radius_m)
    except BallTrajError:
        return math.nan
    return camera.focal_px * ball_radius_m / float(camera.depth(gp.position_m[None])[0])


def _matte_moments(diff, threshold):
    """Centroid (x, y), detector-style radius and axis ratio of the soft matte of ``diff``."""
    w = np.maximum(diff - 0.5 * threshold, 0.0).astype(np.float32)
    m = cv2.moments(w)
    if m["m00"] <= 0:
        return None
    cx, cy = m["m10"] / m["m00"], m["m01"] / m["m00"]
    mu20, mu02, mu11 = m["mu20"] / m["m00"], m["mu02"] / m["m00"], m["mu11"] / m["m00"]
    tr, det = mu20 + mu02, mu20 * mu02 - mu11**2
    disc = math.sqrt(max(tr * tr / 4 - det, 0.0))
    l1, l2 = tr / 2 + disc, max(tr / 2 - disc, 0.0)
    return cx, cy, 2.0 * math.sqrt(l2) * 1.08, math.sqrt(l1 / l2) if l2 > 0 else math.inf


def _edge_centre(B, A, c0, r_mom, r_exp):
    """The resting ball's centre [px, crop coordinates] and its one-sigma [px] from the silhouette edge fit
    (``edge_fit.fit_edge``: a shaded disc with a blurred edge) on the median image before launch against the
    median after; None when the fit fails or its radius is not the ball's."""
    from .edge_fit import fit_edge

    r0 = max(1.5, 1.15 * r_mom)
    m = int(math.ceil(2.0 * r0 + 4))
    cx, cy = int(round(c0[0])), int(round(c0[1]))
    ys, xs = slice(max(0, cy - m), min(B.shape[0], cy + m + 1)), slice(max(0, cx - m), min(B.shape[1], cx + m + 1))
    off = np.array([xs.start, ys.start], float)
    try:
        fit = fit_edge(B[ys, xs], A[ys, xs], np.asarray(c0, float) - off, r0)
    except (ValueError, np.linalg.LinAlgError):
        return None
    if not fit.ok or not (0.6 * r_exp - 1.0 <= fit.radius_px <= 1.6 * r_exp + 1.0):
        return None
    c = fit.centre_px + off
    if np.hypot(*(c - c0)) > 0.5 * fit.radius_px:
        return None  # not the blob the moments measured
    # the centre's error: the radius's one-sigma is the edge position's, and the centre is fixed by the
    # whole rim at least as well (common practice for a circle fit)
    return c, float(fit.radius_sigma_px)


def find_resting_ball(path, camera: Camera, ball_radius_m: float, flight_t, flight_uv, *, flight: int = 1,
                      before_s: float = 0.5, after_s: tuple[float, float] = (0.06, 0.2), capture_fps: float | None = None,
                      pixel_sigma_floor_px: float = 0.3, calibration_rms_px: float = 0.0) -> RestingSearch:
    """Find the ball resting where a flight starts, in the frames before launch.

    Parameters
    ----------
    path : path-like
        The clip.
    camera : Camera
        Its calibrated camera (frames as decoded).
    ball_radius_m : float [m]
    flight_t, flight_uv : array_like, shapes (N,), (N, 2) [s, px]
        The flight's first tracked observations (clip time, pixels); at least 4.
    flight : int
        The flight's number (for the link).
    before_s : float [s]
        How long before the first observation to look for the ball at rest.
    after_s : (float, float) [s]
        Window after the first observation whose median is the scene without the ball.
    capture_fps : float, optional
        As for :func:`balltraj.vision.clip.read_frames`.
    pixel_sigma_floor_px : float [px]
        Floor of the centre's one-sigma error.
    calibration_rms_px : float [px]
        The scene calibration's RMS error (carried into the anchor).

    Returns
    -------
    RestingSearch
        ``ball`` None with ``reason`` when there is no ball at rest.
    """
    t = np.asarray(flight_t, float)
    uv = np.asarray(flight_uv, float)
    if len(t) < 4:
        return RestingSearch(None, "the flight has fewer than 4 observations to extend back to a resting spot")
    t1 = float(t[0])
    path_fn = _backward_path(t, uv)
    w, h = camera.image_size
    # search window: the path extended back by up to 0.15 s, padded by a few expected radii
    back = path_fn(np.linspace(t1 - 0.15, t1, 31))
    r_exp0 = _expected_radius(camera, uv[0], ball_radius_m)
    pad = int(6 * (r_exp0 if np.isfinite(r_exp0) else 10.0) + 12)
    lo = np.nanmin(np.vstack([back, uv[:1]]), axis=0) - pad
    hi = np.nanmax(np.vstack([back, uv[:1]]), axis=0) + pad
    x0, y0 = int(max(0, math.floor(lo[0]))), int(max(0, math.floor(lo[1])))
    x1, y1 = int(min(w, math.ceil(hi[0]))), int(min(h, math.ceil(hi[1])))
    if x1 - x0 < 8 or y1 - y0 < 8:
        return RestingSearch(None, "the flight starts outside the image")
    before, after = [], []
    t_before0 = max(0.0, t1 - before_s)
    for _, tk, frame in read_frames(path, start_s=t_before0, end_s=t1 + after_s[1], capture_fps=capture_fps,
                                    grey=True):
        crop = frame[y0:y1, x0:x1].astype(np.float32)
        if tk < t1 - 0.5 * (t1 - t_before0) or (tk < t1 - 0.02 and len(before) < MIN_BEFORE_FRAMES):
            before.append(crop)
        elif tk >= t1 + after_s[0]:
            after.append(crop)
    if len(before) < MIN_BEFORE_FRAMES:
        return RestingSearch(None, f"only {len(before)} frames before the flight (a ball at rest needs "
                                   f"{MIN_BEFORE_FRAMES} or more)")
    if len(after) < 3:
        return RestingSearch(None, "too few frames after the flight starts to see the spot without the ball")
    B = np.median(np.stack(before), axis=0)
    A = np.median(np.stack(after), axis=0)
    D = np.abs(B - A)
    single = np.abs(before[len(before) // 2] - A)
    noise = 1.4826 * float(np.median(np.abs(before[0] - before[-1]))) / math.sqrt(2)
    # the flight detector's threshold rule on a single frame's difference (detect.py): 6 robust sigmas, >= 12
    thr_det = max(12.0, 6.0 * 1.4826 * float(np.median(single)))
    thr = max(4.0 * noise, 0.5 * thr_det)
    mask = (D > thr).astype(np.uint8)
    n, labels, stats, cents = cv2.connectedComponentsWithStats(mask, connectivity=8)
    best, why = None, "no blob at the start of the flight differs between before and after launch"
    for k in range(1, n):
        area = stats[k, cv2.CC_STAT_AREA]
        if area < 4:
            continue
        bx, by, bw, bh = stats[k, :4]
        p = 3
        sx0, sy0, sx1, sy1 = max(0, bx - p), max(0, by - p), min(D.shape[1], bx + bw + p), min(D.shape[0], by + bh + p)
        mom = _matte_moments(np.where(labels[sy0:sy1, sx0:sx1] == k, D[sy0:sy1, sx0:sx1], 0.0), thr_det)
        if mom is None:
            continue
        cx, cy, r, axis_ratio = mom
        c_uv = np.array([x0 + sx0 + cx, y0 + sy0 + cy])
        r_exp = _expected_radius(camera, c_uv, ball_radius_m)
        if not np.isfinite(r_exp):
            why = "the blob's ray does not meet the ground: not a ball on the ground"
            continue
        if not (0.6 * r_exp - 1.0 <= r <= 1.6 * r_exp + 1.0):
            why = f"a blob of radius {r:.1f} px where a ball on the ground would be {r_exp:.1f} px"
            continue
        if axis_ratio > 1.6 or area < 0.5 * math.pi * r * r:
            why = "the blob at the start is not round"
            continue
        tt = np.linspace(t1 - 0.3, t1, 301)
        dist = np.linalg.norm(path_fn(tt) - c_uv, axis=1)
        i = int(np.argmin(dist))
        link = float(dist[i])
        if link > max(3.0 * r_exp, 6.0):
            why = f"a round blob {link:.0f} px off the flight's path extended backward"
            continue
        if best is None or link < best[0]:
            best = (link, c_uv, r_exp, float(tt[i]), (sx0, sy0, sx1, sy1), k)
    if best is None:
        return RestingSearch(None, why)
    link, c_uv, r_exp, t_leave, (sx0, sy0, sx1, sy1), k = best
    keep = (labels[sy0:sy1, sx0:sx1] == k)
    keep = cv2.dilate(keep.astype(np.uint8), np.ones((3, 3), np.uint8)).astype(bool)
    cs, rs = [], []
    for fr in before:
        d1 = np.abs(fr[sy0:sy1, sx0:sx1] - A[sy0:sy1, sx0:sx1])
        mom = _matte_moments(np.where(keep, d1, 0.0), thr_det)
        if mom is None:
            continue
        cs.append((x0 + sx0 + mom[0], y0 + sy0 + mom[1]))
        rs.append(mom[2])
    if len(cs) < MIN_BEFORE_FRAMES:
        return RestingSearch(None, "the ball at the start is not seen in enough single frames")
    cs, rs = np.array(cs), np.array(rs)
    centre = np.median(cs, axis=0)
    motion = float(np.sqrt(np.mean(np.sum((cs - centre) ** 2, axis=1)) / 2))
    if motion > max(0.5, 0.15 * r_exp):
        return RestingSearch(None, f"the ball at the start moves ({motion:.1f} px rms): not at rest")
    sig = max(pixel_sigma_floor_px, motion / math.sqrt(len(cs)))
    edge = _edge_centre(B, A, centre - [x0, y0], float(np.median(rs)), r_exp)
    if edge is not None:
        # the silhouette's centre: the difference's centroid is pulled towards the lit half of a shaded ball
        # (1-2 px on a 9 px ball lit from the side); the sigma gains the edge fit's own error or, if larger, a
        # quarter of the two centres' disagreement (the edge fit may be the one misled: a shadow, a mark)
        shift = float(np.hypot(*(edge[0] + [x0, y0] - centre)))
        centre = edge[0] + [x0, y0]
        sig = math.hypot(sig, max(edge[1], 0.25 * shift))
    try:
        anchor = ground_point(camera, centre, ball_radius_m, pixel_sigma_px=sig,
                              calibration_rms_px=calibration_rms_px)
    except BallTrajError as e:
        return RestingSearch(None, e.problem)
    ball = RestingBall(uv=centre, uv_sigma_px=sig, radius_px=float(np.median(rs)), radii_px=rs,
                       expected_radius_px=camera.focal_px * ball_radius_m / float(camera.depth(anchor.position_m[None])[0]),
                       motion_px=motion, frames=len(cs), t_leaves_s=t_leave, link_px=link, flight=flight, anchor=anchor)
    return RestingSearch(ball, f"ball at rest at ({centre[0]:.1f}, {centre[1]:.1f}) px in {len(cs)} frames, left by "
                               f"flight {flight}")


def clear_of_rest_spot(ball: RestingBall, uv, radius_px=None, streak_px=None, margin_px: float = 2.0) -> np.ndarray:
    """Which flight observations are clear of the spot the ball rested on.

    The flight detector's background keeps the resting ball for a while after it leaves (a
    ghost), so a ball image that still overlaps the spot is measured together with the ghost:
    its centroid is pulled back toward the spot and it looks streaked. Those frames are dropped.

    Parameters
    ----------
    ball : RestingBall
    uv : array_like, shape (N, 2) [px]
    radius_px, streak_px : array_like, shape (N,) [px], optional
        The detector's radius and streak length of each observation.
    margin_px : float [px]

    Returns
    -------
    ndarray of bool, shape (N,)
        True where the observation is clear of the spot.
    """
    uv = np.asarray(uv, float)
    n = len(uv)
    r = np.full(n, ball.radius_px) if radius_px is None else np.nan_to_num(np.asarray(radius_px, float),
                                                                             nan=ball.radius_px)
    s = np.zeros(n) if streak_px is None else np.nan_to_num(np.asarray(streak_px, float))
    dist = np.linalg.norm(uv - ball.uv, axis=1)
    return dist > ball.radius_px + r + 0.5 * s + margin_px


def depth_anchor(path, camera: Camera, ball_radius_m: float, flight_t, flight_uv, *, flight: int = 1,
                 radius_px=None, previous=None, hint=None, zone=None, capture_fps: float | None = None,
                 calibration_rms_px: float = 0.0) -> tuple[Anchor, RestingSearch]:
    """What fixes the depth of one tracked flight seen by one camera: a ball at rest where it starts,
    else a bounce that starts it (the previous flight ending on a bounce just before), else the
    user's hint, else a template zone, else the apparent size (see
    :func:`balltraj.camera.anchors.choose_anchor`).

    Parameters
    ----------
    path, camera, ball_radius_m, flight_t, flight_uv, flight, capture_fps, calibration_rms_px
        As for :func:`find_resting_ball`.
    radius_px : array_like, shape (N,) [px], optional
        The flight's apparent radii (only whether any is finite matters).
    previous : (t (M,), uv (M, 2)), optional
        The flight just before, when it ended on a bounce [s, px].
    hint : ((x, y, z), sigma), optional
        The user's start point and its sigma [m].
    zone : (centre (3,), sigma, label), optional
        A template launch zone (:func:`balltraj.camera.calibrate.launch_zone`) [m].

    Returns
    -------
    (Anchor, RestingSearch)
        The chosen anchor and the resting-ball search (its reason says why none was found).
    """
    search = find_resting_ball(path, camera, ball_radius_m, flight_t, flight_uv, flight=flight,
                               capture_fps=capture_fps, calibration_rms_px=calibration_rms_px)
    bounce = None
    if search.ball is None and previous is not None:
        tp, up = np.asarray(previous[0], float), np.asarray(previous[1], float)
        t = np.asarray(flight_t, float)
        if len(tp) >= 3 and len(t) >= 3 and 0 <= t[0] - tp[-1] <= 0.05:
            try:
                uv_c, _, gap = bounce_pixel(tp, up, t, flight_uv)
                bounce = ground_point(camera, uv_c, ball_radius_m, pixel_sigma_px=max(0.5, gap),
                                      calibration_rms_px=calibration_rms_px)
            except BallTrajError:
                bounce = None
    radii = radius_px is not None and bool(np.isfinite(np.asarray(radius_px, float)).any())
    anchor = choose_anchor(resting=None if search.ball is None else search.ball.anchor, bounce=bounce, hint=hint,
                           zone=zone, radii_observed=radii)
    return anchor, search


__all__ = ["RestingBall", "RestingSearch", "find_resting_ball", "clear_of_rest_spot", "depth_anchor"]
