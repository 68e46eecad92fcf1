"""Tests that tell a ball's track from other moving things: a smooth path, a consistent size
(following 1/distance), blur no longer than its own motion allows, and — with the ball's size and a
camera — a plausible speed and a fall near g. Pure functions of a track's points."""

from __future__ import annotations

import math
from typing import TYPE_CHECKING

import numpy as np

from .detect import lens_magnification
from .frames import _median

if TYPE_CHECKING:
    from .trackpoints import _Track


def running_median(x, half: int = 2) -> np.ndarray:
    """The median of each value's neighbourhood x[i - half : i + half + 1] (cut at the ends), as
    np.median gives it (the mean of the two middle values in an even-sized window at the ends), by
    sorting plain floats: numpy's per-call cost dominated these 5-value medians, taken for every
    point of every track."""
    v = [float(a) for a in x]
    return np.array([_median(v[max(0, i - half):i + half + 1]) for i in range(len(v))])

def _robust_line(x: np.ndarray, y: np.ndarray) -> np.ndarray:
    """Theil-Sen straight line (slope the median of pairwise slopes, intercept the median offset):
    a few wild radii where the ball passes in front of a person must not bend the depth trend.
    Returns polyfit-style coefficients (slope, intercept)."""
    n = len(x)
    idx = np.arange(n)
    if n > 60:  # pairs of points a fixed stride apart: enough for a median, linear in n
        i = idx[: n - n // 3]
        j = i + n // 3
    else:
        i, j = np.triu_indices(n, 1)
    dx = x[j] - x[i]
    ok = np.abs(dx) > 1e-12
    if not ok.any():
        return np.array([0.0, float(np.median(y))])
    slope = float(np.median((y[j] - y[i])[ok] / dx[ok]))
    return np.array([slope, float(np.median(y - slope * x))])


def world_speed(tr: _Track, focal_px: float, ball_radius_m: float, camera=None, percentile: float = 50.0) -> float:
    """Speed [m/s] the track would have if it were the ball, at the given percentile over its points
    (50: typical; 90: near its fastest): depth from the apparent radius (f R / r, fitted by a
    straight line in time), sideways speed from the image motion."""
    ts, uv = tr.times(), tr.uv()
    r = np.array([p[2].radius_px for p in tr.points])
    tt = ts - ts.mean()
    mag = lens_magnification(camera, uv) if camera is not None else np.ones(len(r))
    depth = focal_px * mag * ball_radius_m / np.maximum(r, 0.3)
    dc = _robust_line(tt, depth)  # a straight line: noisy radii must not invent radial speed
    d_s = np.polyval(dc, tt)
    radial = np.full(len(tt), dc[0])
    uc = [np.polyfit(tt, uv[:, k], min(3, len(ts) - 1)) for k in range(2)]
    du = np.hypot(np.polyval(np.polyder(uc[0]), tt), np.polyval(np.polyder(uc[1]), tt))
    lateral = du * np.maximum(d_s, 0.1) / (focal_px * mag)
    return float(np.percentile(np.hypot(lateral, radial), percentile))


def _blur_consistent(tr: _Track) -> bool:
    """A ball's streak is at most the distance it moves in one frame interval (the exposure is
    shorter than the interval), plus the blur of its edge and the streak's own measuring error: a
    shaded or patterned ball's matte is not quite round (its second moments differ by 20-30 %, which
    reads as a streak of 0.8-1 radius with no motion at all)."""
    uv, ts = tr.uv(), tr.times()
    step = float(np.median(np.linalg.norm(np.diff(uv, axis=0), axis=1) / np.diff(ts))) * float(np.median(np.diff(ts)))
    streak = float(np.median([p[2].streak_px for p in tr.points]))
    r = float(np.median([p[2].radius_px for p in tr.points]))
    return streak <= 1.2 * step + 2.0 + r


def _radius_consistent(tr: _Track) -> bool:
    """Median scatter of the apparent radius within 15 % (0.75 px floor) about a smooth law: a
    quadratic in time, or the reciprocal of one (the radius goes as 1/distance, and the distance of
    a ball thrown away from the camera grows about linearly: r = a / (1 + b t) is far from any
    quadratic when the ball recedes from 1 m to 20 m)."""
    r = np.array([p[2].radius_px for p in tr.points])
    if len(r) >= 5:  # and no jumps: each radius near the median of its neighbours (padded by a pixel)
        loc = running_median(r)
        q = (r + 1.0) / (loc + 1.0)
        if np.count_nonzero((q > 1.6) | (q < 1 / 1.6)) > len(r) // 8:
            return False
    ts = tr.times()
    tt = ts - ts.mean()
    # compressed small balls: the second-moment radius of a 2-6 px ball wobbles by 0.5-1 px from frame
    # to frame (block artefacts, a strand of netting across it); a chain of unrelated blobs differs by far more
    tol = max(0.15 * float(np.median(r)), 0.75)
    rf = np.polyval(np.polyfit(tt, r, 2), tt)
    if float(np.median(np.abs(r - rf))) <= tol:
        return True
    inv = 1.0 / np.maximum(r, 0.3)
    rf = 1.0 / np.maximum(np.polyval(np.polyfit(tt, inv, 2, w=r), tt), 1e-6)
    return float(np.median(np.abs(r - rf))) <= tol


def downward_acceleration(tr: _Track, camera, ball_radius_m: float, with_sigma: bool = False):
    """Acceleration along +z [m/s^2] of the track placed in 3D (rays through the camera, depth from
    the apparent radius fitted by a robust straight line in time); None when the track is too
    short to tell (under 0.2 s: over a shorter span a noisy depth-from-size trend says little about
    the fall). A ball in free flight has about -g, give or take its lift."""
    ts, uv = tr.times(), tr.uv()
    if ts[-1] - ts[0] < 0.2 or len(ts) < 8:
        return None
    r = np.array([p[2].radius_px for p in tr.points])
    tt = ts - ts.mean()
    mag = lens_magnification(camera, uv)
    depth = np.polyval(_robust_line(tt, camera.focal_px * mag * ball_radius_m / np.maximum(r, 0.3)), tt)
    origin, rays = camera.rays(uv)
    xyz = origin + rays * (np.maximum(depth, 0.3) / (rays @ camera.R[2]))[:, None]
    # a parabola in time, refitted without the points far off it (a tail that strayed onto a person)
    c, keep = _clipped_parabola(tt, xyz[:, 2], 8, 1e-6)
    if not with_sigma:
        return float(2.0 * c[0])
    # one sigma from the scatter about the parabola: a short track of a tiny ball (its depth from a
    # radius of a pixel or two) tells the fall only roughly
    return _curvature_and_sigma(tt[keep], xyz[keep, 2], c)


def _clipped_parabola(tt, y, least: int, tiny: float):
    """A parabola in time through (tt, y), refitted up to three times without the points more than 4
    robust sigmas off it (``tiny`` added to the spread; stops when under ``least`` points would stay):
    (coefficients, the points kept)."""
    keep = _parabola_start(tt, y, least, tiny)
    for _ in range(3):
        c = np.polyfit(tt[keep], y[keep], 2)
        res = np.abs(y - np.polyval(c, tt))
        mad = float(np.median(res[keep])) * 1.4826 + tiny
        new = res <= 4.0 * mad
        if new.sum() < least or np.array_equal(new, keep):
            break
        keep = new
    return c, keep


def _parabola_start(tt, y, least: int, tiny: float) -> np.ndarray:
    """The points the clipping of :func:`_clipped_parabola` starts from: all of them, or all but a tenth or
    a fifth at either end (3 points or more) if that parabola's median absolute residual over every point is under 0.7 of the
    one through all (least median of residuals, Rousseeuw 1984, over these few candidates). A track that ran
    on from the ball onto a person, or began on the hand, has its strays at an end, and a few of them drag a
    parabola through every point far enough that none stands out."""
    n = len(tt)
    c = np.polyfit(tt, y, 2)
    best, best_score = np.ones(n, bool), 0.7 * float(np.median(np.abs(y - np.polyval(c, tt)))) + tiny
    for a, b in ((0, n // 10), (0, n // 5), (n // 10, 0), (n // 5, 0)):
        seg = np.zeros(n, bool)
        seg[a:n - b] = True
        if max(a, b) < 3 or seg.sum() < max(least, 4):
            continue  # (one or two strays stand out anyway; on a short track dropping them is a guess)
        c = np.polyfit(tt[seg], y[seg], 2)
        score = float(np.median(np.abs(y - np.polyval(c, tt))))
        if score < best_score:
            best, best_score = seg, score
    return best


def _curvature_and_sigma(tk, yk, c):
    """Twice the parabola ``c``'s leading coefficient (the acceleration) and its one sigma from the
    scatter of the points (tk, yk) about it."""
    A = np.vander(tk, 3)
    res = yk - A @ c
    cov = np.linalg.pinv(A.T @ A) * (float(res @ res) / max(1, len(tk) - 3))
    return float(2.0 * c[0]), float(2.0 * np.sqrt(max(cov[0, 0], 0.0)))


def image_fall(tr: _Track, ball_radius_m: float, centre_v: float):
    """Downward acceleration [m/s^2] of the track seen from a camera of unknown focal length, and its one
    sigma; None under 6 points. With depth Z = f R / r, a point's height below the optical axis is
    (v - c_v) Z / f = (v - c_v) R / r, whatever f: so the height is measured in metres from the image row
    and the apparent radius (1/r fitted by a straight line in time: the depth changes about linearly over
    a flight's short stretch, and a single radius is noisy), and a parabola through it (refitted without
    points far off it) gives the fall. About g for a ball in free flight seen by a level camera, from any
    side (a ball coming towards the camera while it rises shows as rising faster in the image, but not in
    this height); a tilted view or a pan mixes in a share of the motion along the line of sight. Scene
    positions are used where the view moved."""
    ts = tr.times()
    if len(ts) < 6 or ts[-1] - ts[0] < 0.2 or len(np.unique(ts)) < 6:
        return None  # (as downward_acceleration: over a shorter span the fall is told only roughly)
    sc = scene_uv(tr)
    v = (tr.uv() if sc is None else sc)[:, 1]
    r = np.array([p[2].radius_px for p in tr.points])
    tt = ts - ts.mean()
    inv = np.polyval(_robust_line(tt, 1.0 / np.maximum(r, 0.3)), tt)
    y = (v - centre_v) * ball_radius_m * np.maximum(inv, 1e-3)  # [m] below the optical axis
    _, keep = _clipped_parabola(tt, y, 6, 1e-9)
    c = np.polyfit(tt[keep], y[keep], 2)  # the parabola of the points kept (their sigma below)
    return _curvature_and_sigma(tt[keep], y[keep], c)


def _extent_px(uv: np.ndarray) -> float:
    """How far [px] a track reached: the diagonal of its points' bounding box. Its net displacement
    (first to last point) would say nothing of a ball juggled or thrown straight up, which comes
    back down where it rose; a blob jittering in place or a jump onto a parked blob reaches no
    further by this measure than by that."""
    return float(np.hypot(*np.ptp(uv, axis=0)))


def _net_speed(tr: _Track, uv: np.ndarray | None = None) -> float:
    """The track's reach (:func:`_extent_px`) over its duration [px/s]: of its image positions, or of
    the positions ``uv`` given (its scene positions)."""
    ts = tr.times()
    return _extent_px(tr.uv() if uv is None else uv) / max(ts[-1] - ts[0], 1e-9)


def scene_uv(tr: _Track) -> np.ndarray | None:
    """The track's positions in the scene (the view's own motion undone), shape (N, 2) [px]; None
    where the view did not move (nothing to undo). A point seen before the view first moved has no
    scene position: its scene position is its image position (leaving such points out took a whole
    pitch for a track in place when the view began to shake near its end)."""
    if all(c.u_scene is None for _, _, c in tr.points):
        return None
    return np.asarray([(c.u, c.v) if c.u_scene is None else (c.u_scene, c.v_scene) for _, _, c in tr.points], float)


def _scene_travel(tr: _Track, finite: bool = False) -> float:
    """How far [px] the track reached in the scene: the diagonal of the box around its scene positions,
    so a ball that comes back down where it rose (a juggle, an up-down throw filmed hand-held) still
    reaches; where the view did not move, inf (or with ``finite`` 0: nothing to undo)."""
    sc = scene_uv(tr)
    return (0.0 if finite else np.inf) if sc is None else _extent_px(sc)


def _path_smoothness_px(uv: np.ndarray) -> float:
    """Median distance of the points from a smooth path (the sideways coordinate a cubic of the
    coordinate along the main direction, in windows of 24 points); inf where the path folds back.
    Independent of the frame times, which frame-rate conversion (dropped exposures) makes uneven."""
    res = []
    for a in range(0, len(uv), 12):
        seg = uv[a:a + 24]
        if len(seg) < 5 or (a > 0 and len(seg) < 8):
            continue
        deg = 3 if len(seg) >= 8 else 2
        d = seg[-1] - seg[0]
        n = float(np.hypot(*d))
        if n < 1e-9:
            return np.inf
        e = d / n
        s_al = (seg - seg[0]) @ e
        if np.any(np.diff(s_al) <= 0):
            return np.inf
        s_side = (seg - seg[0]) @ np.array([-e[1], e[0]])
        x = (s_al - s_al.mean()) / max(n, 1.0)
        res.extend(np.abs(s_side - np.polyval(np.polyfit(x, s_side, deg), x)) * np.sqrt(len(seg) / (len(seg) - deg - 1)))
    return float(np.median(res)) if res else 0.0


def smooth_enough(tr: _Track) -> bool:
    """Do the points lie on a smooth curve in time to within the centroid's own accuracy, a quarter
    of the apparent radius (1.5 px at least: compressed small balls), or on a smooth path regardless
    of time to within half that? A thrown ball does; people, flags and chains of unrelated blobs
    do not."""
    r = float(np.median([p[2].radius_px for p in tr.points]))
    tol = max(1.5, 0.25 * r)
    # the time-free form (for footage with dropped exposures) ignores the timing, so fewer points
    # can fake it: it must fit twice as closely
    return _time_smoothness_px(tr) <= tol or _path_smoothness_px(tr.uv()) <= 0.5 * tol


def _smoothness_px(tr: _Track) -> float:
    """Median distance of the points from a smooth curve: a cubic in time in windows of 24 points,
    or, where that fits worse, a smooth path regardless of time (uneven frame times)."""
    return min(_time_smoothness_px(tr), _path_smoothness_px(tr.uv()))


def _time_smoothness_px(tr: _Track) -> float:
    ts, uv = tr.times(), tr.uv()
    res = []
    for a in range(0, len(ts), 12):
        sl = slice(a, min(len(ts), a + 24))
        m = sl.stop - sl.start
        if m < 5 or (a > 0 and m < 8):
            continue
        deg = 3 if m >= 8 else 2  # short tracks (25-30 frames/s): a parabola through 5-7 points
        tt = ts[sl] - ts[sl].mean()
        A = np.vander(tt, deg + 1)
        coef, *_ = np.linalg.lstsq(A, uv[sl], rcond=None)
        # scaled for the degrees of freedom the fit used up (few points would look too smooth)
        res.extend(np.linalg.norm(uv[sl] - A @ coef, axis=1) * np.sqrt(m / (m - deg - 1)))
    return float(np.median(res)) if res else 0.0


def _speed_consistent(tr: _Track, ratio: float = 2.5) -> bool:
    """A ball's image speed changes smoothly: gravity and drag change it by a few per cent a frame,
    a bounce by a factor well under 2, and a dropped exposure (frame-rate conversion) makes one step
    look at most twice as fast as its neighbours. A chain of unrelated blobs (a person's hands, folds,
    a ghost) jumps by short and long steps at random. Each step's speed [px/s] is compared with the
    median of the steps around it (five steps), both padded by a pixel plus a quarter radius per
    interval (the centroids' own scatter); at most one step in eight may differ by more than
    ``ratio``."""
    ts, uv = tr.times(), tr.uv()
    n = len(ts)
    if n < 4:
        return True
    dt = np.maximum(np.diff(ts), 1e-9)
    r = float(np.median([p[2].radius_px for p in tr.points]))
    pad = (1.0 + 0.25 * r) / dt
    sp = np.linalg.norm(np.diff(uv, axis=0), axis=1) / dt
    m = len(sp)
    loc = running_median(sp)
    q = (sp + pad) / (loc + pad)
    bad = int(np.count_nonzero((q > ratio) | (q < 1.0 / ratio)))
    return bad <= m // 8


def _streak_consistent(tr: _Track, ratio: float = 2.0) -> bool:
    """A ball's blur streak is its motion during the exposure: with the exposure fixed it follows the
    ball's speed and changes smoothly. Fragments of a line or an edge lit up one by one (a rail
    under a pan, netting) give streaks of any length. Each streak is compared with the median of
    its neighbours (five points), both padded by the radius and 2 px (the streak's own measuring
    error); at most one in eight may differ by more than ``ratio``."""
    n = len(tr.points)
    if n < 5:
        return True
    s = np.array([p[2].streak_px for p in tr.points])
    pad = float(np.median([p[2].radius_px for p in tr.points])) + 2.0
    loc = running_median(s)
    q = (s + pad) / (loc + pad)
    return int(np.count_nonzero((q > ratio) | (q < 1.0 / ratio))) <= n // 8


def streak_across_motion(tr: _Track) -> bool:
    """Do most of the track's points have a streak that does not lie along its motion? A ball's blur
    streak is its motion during the exposure, so its long axis follows the path (to within the axis's
    own uncertainty, about atan(r / L) for a streak of length L and radius r, plus 15 degrees for the
    path's direction from its neighbours); a limb, a torso's edge or a pole carried sideways is long
    across the way it moves, or at any angle. Points count when clearly elongated (a streak of 1.5 radii
    and 3 px at least: a shaded ball's matte reads as a streak of up to a radius with no motion); True
    when over half of all points are elongated across the motion."""
    uv = tr.uv()
    n = len(uv)
    if n < 5:
        return False
    across = 0
    for i, (_, _, c) in enumerate(tr.points):
        if c.streak_px < max(1.5 * c.radius_px, 3.0):
            continue
        d = uv[min(n - 1, i + 1)] - uv[max(0, i - 1)]
        if not d.any():
            continue
        off = abs((c.angle_rad - math.atan2(d[1], d[0]) + math.pi / 2) % math.pi - math.pi / 2)
        across += off > math.radians(15.0) + math.atan2(c.radius_px, c.streak_px)
    return across > n / 2


def sideways_motion(tr: _Track, ball_radius_m: float, centre_px) -> tuple[float, float, float] | None:
    """The track placed at the ball's own scale across the line of sight: X = (u - c_u) R / r,
    Y = (v - c_v) R / r are the ball's true coordinates across the view (pinhole: X = (u - c_u) Z / f
    and r = f R / Z), whatever the focal length, and perspective (a ball moving toward or away from
    the camera) does not accelerate them. 1/r is taken either as constant (its median) or as a
    robust straight line in time (a ball moving away): over a short track of a small ball the
    slope of a noisy radius is not known well enough to be trusted alone, so each result gives the
    ball the benefit of the doubt (the smaller acceleration, the larger speed). A parabola in time
    is fitted to X and Y, refitted once or twice without a stray point (a bounce's contact point).

    Returns (peak speed [m/s] across the view: the larger of the parabola's speeds at the two ends,
    acceleration magnitude [m/s^2], its one sigma [m/s^2]), or None under 5 points. A ball in flight
    accelerates at about g plus its drag and lift (well under 10 g), where a swinging arm or a
    chain of unrelated blobs turns far harder; the peak speed across the view is a lower bound of the
    ball's speed."""
    ts, uv = tr.times(), tr.uv()
    n = len(ts)
    if n < 5:
        return None
    tt = ts - ts.mean()
    r = np.array([p[2].radius_px for p in tr.points])
    inv_r = 1.0 / np.maximum(r, 0.3)
    A = np.vander(tt, 3)
    fits = []
    for inv in (np.full(n, float(np.median(inv_r))), np.maximum(np.polyval(_robust_line(tt, inv_r), tt), 1e-3)):
        xy = (uv - np.asarray(centre_px, float)) * (ball_radius_m * inv)[:, None]
        keep = np.ones(n, bool)
        for _ in range(2):
            coef, *_ = np.linalg.lstsq(A[keep], xy[keep], rcond=None)
            d = np.linalg.norm(xy - A @ coef, axis=1)
            worst = int(np.argmax(np.where(keep, d, -1.0)))
            if keep.sum() <= max(5, n - 2) or d[worst] <= 4.0 * float(np.median(d[keep])) + 1e-9:
                break
            keep[worst] = False
        coef, *_ = np.linalg.lstsq(A[keep], xy[keep], rcond=None)
        res = (xy - A @ coef)[keep]
        s2 = float(np.sum(res**2)) / (2 * max(1, int(keep.sum()) - 3))
        g = float(np.linalg.pinv(A[keep].T @ A[keep])[0, 0])
        # the centroid's own scatter (a quarter radius) sets a floor for the sigma
        var = g * max(s2, float(np.mean((0.25 * ball_radius_m * (r * inv)[keep]) ** 2)))
        speed = max(float(np.hypot(*(2 * coef[0] * t_end + coef[1]))) for t_end in (tt[keep][0], tt[keep][-1]))
        fits.append((speed, float(np.hypot(*(2.0 * coef[0]))), float(np.sqrt(var))))
    best = min(fits, key=lambda f: f[1] - 2.0 * f[2])
    return max(f[0] for f in fits), best[1], best[2]
