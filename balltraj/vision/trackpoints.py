"""One track's points (exposure index, time, candidate) with the fast constant-acceleration
prediction the tracker asks of it every frame."""

from __future__ import annotations

from dataclasses import dataclass, field
from statistics import median

import numpy as np

from .checks import _robust_line
from .streak import Expected


@dataclass
class _Track:
    points: list = field(default_factory=list)  # (k, t, Candidate)
    misses: int = 0
    confirmed: bool = False
    ended: str = ""
    bounce: bool = False
    _ts: list = field(default_factory=list)
    _uvs: list = field(default_factory=list)
    _steps: list = field(default_factory=list)
    _speed: float | None = 0.0
    _last: tuple | None = None  # the last prediction asked for: ((t, number of points), result)

    @classmethod
    def of(cls, points, *, confirmed: bool = False, ended: str = "", bounce: bool = False) -> "_Track":
        """A track made of ``points`` ((k, t, Candidate), in order) with the given state."""
        out = cls()
        for p in points:
            out.add(*p)
        out.confirmed, out.ended, out.bounce = confirmed, ended, bounce
        return out

    def add(self, k, t, c):
        if self.points:
            t0, (u0, v0) = self._ts[-1], self._uvs[-1]
            self._steps.append(((c.u - u0) ** 2 + (c.v - v0) ** 2) ** 0.5 / max(t - t0, 1e-9))
            self._speed = None  # the median is taken when asked for (tracks are rebuilt point by point)
        self.points.append((k, t, c))
        self._ts.append(t)
        self._uvs.append((c.u, c.v))

    def times(self):
        return np.asarray(self._ts)

    def uv(self):
        return np.asarray(self._uvs)

    def predict(self, t, velocity: bool = False):
        """Position at t from a least-squares line (under 4 points) or parabola in time through the
        last 8 points, and the rms scatter about it (and, with ``velocity``, the fit's velocity at t
        [px/s] third). Plain floats: numpy's per-call cost would dominate these 8-point fits, done for
        every track in every frame (twice for a confirmed track: the detector's streak gate asks first,
        so the last answer is kept)."""
        key = (t, len(self._ts))
        if self._last is None or self._last[0] != key:
            self._last = (key, self._predict(t))
        pos, spread, vel = self._last[1]
        return (pos, spread, vel) if velocity else (pos, spread)

    def _predict(self, t):
        ts, uvs = self._ts[-8:], self._uvs[-8:]
        n = len(ts)
        if n == 1:
            return np.asarray(uvs[-1]), 0.0, np.zeros(2)
        t_ref = ts[-1]
        deg = 2 if n >= 4 else 1
        s = [0.0] * (2 * deg + 1)
        bu = [0.0] * (deg + 1)
        bv = [0.0] * (deg + 1)
        for ti, (u, v) in zip(ts, uvs):
            x = ti - t_ref
            p = 1.0
            for k in range(2 * deg + 1):
                s[k] += p
                if k <= deg:
                    bu[k] += p * u
                    bv[k] += p * v
                p *= x
        if deg == 1:
            det = s[0] * s[2] - s[1] * s[1]
            if abs(det) < 1e-30:
                return np.asarray(uvs[-1]), 0.0, np.zeros(2)
            cu = ((s[2] * bu[0] - s[1] * bu[1]) / det, (s[0] * bu[1] - s[1] * bu[0]) / det, 0.0)
            cv = ((s[2] * bv[0] - s[1] * bv[1]) / det, (s[0] * bv[1] - s[1] * bv[0]) / det, 0.0)
        else:  # symmetric 3x3 normal equations, solved by the adjugate
            a, b, c, d, e = s
            i00, i01, i02 = c * e - d * d, c * d - b * e, b * d - c * c
            i11, i12, i22 = a * e - c * c, b * c - a * d, a * c - b * b
            det = a * i00 + b * i01 + c * i02
            if abs(det) < 1e-30:
                return np.asarray(uvs[-1]), 0.0, np.zeros(2)
            cu = ((i00 * bu[0] + i01 * bu[1] + i02 * bu[2]) / det, (i01 * bu[0] + i11 * bu[1] + i12 * bu[2]) / det,
                  (i02 * bu[0] + i12 * bu[1] + i22 * bu[2]) / det)
            cv = ((i00 * bv[0] + i01 * bv[1] + i02 * bv[2]) / det, (i01 * bv[0] + i11 * bv[1] + i12 * bv[2]) / det,
                  (i02 * bv[0] + i12 * bv[1] + i22 * bv[2]) / det)
        spread = 0.0
        if n > deg + 1:
            acc = 0.0
            for ti, (u, v) in zip(ts, uvs):
                x = ti - t_ref
                du = u - (cu[0] + x * cu[1] + x * x * cu[2])
                dv = v - (cv[0] + x * cv[1] + x * x * cv[2])
                acc += du * du + dv * dv
            spread = (acc / n) ** 0.5
        x = t - t_ref
        return (np.array([cu[0] + x * cu[1] + x * x * cu[2], cv[0] + x * cv[1] + x * x * cv[2]]), spread,
                np.array([cu[1] + 2 * x * cu[2], cv[1] + 2 * x * cv[2]]))

    def gate(self, spread: float, step: float) -> float:
        """How far [px] from its prediction the track looks for the ball: a few radii, three times its
        scatter, and a share of its ``step`` since its last point (wider while it is tentative)."""
        return 4.0 + 2.0 * self.points[-1][2].radius_px + 3.0 * spread + (0.25 if self.confirmed else 0.35) * step

    def expected(self, t: float) -> Expected:
        """Where the track expects the ball at time t: its prediction, the predicted motion over one
        frame interval (the shortest of its recent steps in time), the reach of the gate it will
        search, and its scatter."""
        pred, spread, vel = self.predict(t, velocity=True)
        ts = self._ts[-8:]
        dt = min(b - a for a, b in zip(ts, ts[1:])) if len(ts) > 1 else 0.0
        reach = self.gate(spread, self.speed_px_per_s() * (t - ts[-1]))
        last = [p[2] for p in self.points[-5:]]  # (plain medians: numpy's cost per call would dominate)
        return Expected(float(pred[0]), float(pred[1]), float(vel[0] * dt), float(vel[1] * dt), reach, spread,
                        median([c.radius_px for c in last]), median([c.streak_px for c in last]))

    def speed_px_per_s(self):
        if self._speed is None:
            st = sorted(self._steps)
            n = len(st)
            self._speed = 0.5 * (st[(n - 1) // 2] + st[n // 2])
        return self._speed


def stayed_put(tracks: list[_Track], t: float, cands) -> bool:
    """Does a doubtful frame (frames.FrameKind.doubtful) repeat the last exposure, by what the tracks
    see in it? A confirmed track that moves 3 px or more an interval finds, in a repeat, a candidate
    where its last point was, of the same size and streak to within the centroid's coding noise
    (0.3 px; 1 px for the streak); in an exposure it finds one moved towards its prediction. The
    longest such track that finds either decides (tentative tracks are mostly clutter, whose last
    point can be a static blob that an exposure shows again in the same place)."""
    best = None
    for tr in tracks:
        if not tr.confirmed or (best is not None and len(tr.points) <= best[0]):
            continue
        _, t_last, last = tr.points[-1]
        step = tr.speed_px_per_s() * (t - t_last)
        if step < 3.0:
            continue  # a slow track looks the same in a repeat and in an exposure
        pred, spread = tr.predict(t)
        gate = tr.gate(spread, step)
        near = [c for c in cands if abs(c.u - pred[0]) < gate + step and abs(c.v - pred[1]) < gate + step]
        if any(abs(c.u - last.u) <= 0.3 and abs(c.v - last.v) <= 0.3 and abs(c.radius_px - last.radius_px) <= 0.3
               and abs(c.streak_px - last.streak_px) <= 1.0 for c in near):
            best = (len(tr.points), True)
        elif any(np.hypot(c.u - pred[0], c.v - pred[1]) < gate and np.hypot(c.u - last.u, c.v - last.v) > 0.25 * step
                 for c in near):
            best = (len(tr.points), False)
    return best is not None and best[1]


def _size_jump_cut(tr: _Track) -> _Track:
    """A short track (too short to extrapolate its ends) cut where its blob changes size between two
    points by more than a ball's can (|r1 - r2| > 0.6 max(r1, r2) + 1.5 px: two objects, e.g. a head
    then specks below it), keeping the longest run; the track itself when there is no such jump."""
    r = np.array([p[2].radius_px for p in tr.points])
    jump = np.abs(np.diff(r)) > 0.6 * np.maximum(r[1:], r[:-1]) + 1.5
    if not jump.any():
        return tr
    edges = [0, *(np.flatnonzero(jump) + 1).tolist(), len(r)]
    a, b = max(zip(edges[:-1], edges[1:]), key=lambda e: e[1] - e[0])
    return _Track.of(tr.points[a:b], confirmed=tr.confirmed, ended=tr.ended, bounce=tr.bounce)


def trim_strays(tr: _Track) -> _Track:
    """Drop stray points at either end of a track (a track often starts on the thrower's hand or
    ends on clutter before it locks on or after it loses the ball): an end point goes while the
    next 8 points, extrapolated by a parabola in time, miss it by more than a few radii, or its
    apparent radius is far from what theirs extrapolates to (at most a third of the points go). A track
    under 12 points is only cut at a jump of its size (``_size_jump_cut``)."""
    pts = list(tr.points)
    if len(pts) < 12:
        return _size_jump_cut(tr)
    r_med = float(np.median([p[2].radius_px for p in pts]))
    limit, removed = len(pts) // 3, 0

    def stray(p, nxt):
        ts = np.array([q[1] for q in nxt])
        uv = np.array([(q[2].u, q[2].v) for q in nxt])
        t0 = ts[0]
        pred = [np.polyval(np.polyfit(ts - t0, uv[:, j], 2), p[1] - t0) for j in range(2)]
        step = float(np.median(np.linalg.norm(np.diff(uv, axis=0), axis=1)))
        miss = float(np.hypot(p[2].u - pred[0], p[2].v - pred[1]))
        inv = 1.0 / np.maximum([q[2].radius_px for q in nxt], 0.3)  # radius ~ 1/distance, about linear in time
        r_pred = 1.0 / max(float(np.polyval(np.polyfit(ts - t0, inv, 1), p[1] - t0)), 1e-3)
        return miss > 3.0 + 2.0 * r_med + 0.3 * step or abs(p[2].radius_px - r_pred) > 0.4 * r_pred + 1.0

    while removed < limit and len(pts) >= 10 and stray(pts[0], pts[1:9]):
        pts.pop(0)
        removed += 1
    while removed < limit and len(pts) >= 10 and stray(pts[-1], pts[-9:-1]):
        pts.pop()
        removed += 1
    if not removed:
        return tr
    return _Track.of(pts, confirmed=tr.confirmed, ended=tr.ended, bounce=tr.bounce)


def drop_size_strays(tr: _Track, least_px: float = 4.0, lo: float = 0.55, hi: float = 1.8) -> _Track:
    """Cut a track's ends where its points are of another size than their neighbours give (1/radius on a
    Theil-Sen straight line in time through the 14 nearest): a ball's apparent size changes smoothly (as
    1/distance, about linear in time over a short stretch), so a point at under ``lo`` or over ``hi`` times
    it is something the track took instead (a hand, a head, a blob merged with a passer-by) if it also lies
    off the path of the others. Within the first and the last fifth of the points, everything up to the
    innermost such point goes. Only for balls of ``least_px`` or more (a pixel or two of radius is that
    noisy), not for tracks of streaks."""
    pts = list(tr.points)
    n_nb = 14  # neighbours
    if len(pts) < n_nb + 1:
        return tr
    r = np.array([p[2].radius_px for p in pts])
    # (not tracks of streaks, smeared over more than their diameter as detect._elongated says: a long
    # streak's width is measured from its fragments and pieces, and scatters more than a ball's size does)
    r_typ = float(np.median(r))
    if r_typ < least_px or float(np.median([p[2].streak_px for p in pts])) >= max(6.0, 2.0 * r_typ):
        return tr
    t = np.array([p[1] for p in pts])
    inv = 1.0 / np.maximum(r, 0.3)
    med = np.empty(len(r))  # each point's expected radius: 1/r on a robust straight line in time through its
    for i in range(len(r)):  # 14 nearest neighbours (apparent radius = f R / distance, distance about linear)
        a = max(0, min(i - n_nb // 2, len(r) - n_nb - 1))
        j = [k for k in range(a, a + n_nb + 1) if k != i]
        med[i] = 1.0 / max(float(_robust_line(t[j] - t[i], inv[j])[1]), 1e-3)  # the line's value at t[i]
    bad = (r < lo * med) | (r > hi * med)
    # and off the path: where a parabola in time through the track's points of the right size puts it, more
    # than half the expected radius away (a piece of the ball itself -- its lit cap in a dark room -- is of
    # another size but at the ball, and its position is kept)
    good = ~bad
    edge = len(pts) // 5
    if good.sum() >= 6:
        uv = np.array([(p[2].u, p[2].v) for p in pts])
        for i in np.flatnonzero(bad):
            if edge <= i < len(pts) - edge:
                continue  # (only the ends are cut, below)
            near = np.flatnonzero(good)[np.argsort(np.abs(np.flatnonzero(good) - i))[:8]]
            pred = [np.polyval(np.polyfit(t[near] - t[i], uv[near, k], 2), 0.0) for k in range(2)]
            bad[i] = float(np.hypot(uv[i, 0] - pred[0], uv[i, 1] - pred[1])) > max(2.0, 0.5 * med[i])
    # cut at the ends only: a track that ran on from the ball onto something else (or began on it) leaves
    # the ball there for good, while a stray inside the track is one exposure's blob and dropping it would
    # leave a gap that the smoothness tests read as an uneven step
    a = max([i + 1 for i in range(edge) if bad[i]], default=0)
    b = min([i for i in range(len(pts) - edge, len(pts)) if bad[i]], default=len(pts))
    if a == 0 and b == len(pts):
        return tr
    return _Track.of(pts[a:b], confirmed=tr.confirmed, ended=tr.ended, bounce=tr.bounce)


def _stray_from(prev: list, p, r_med: float) -> bool:
    """Is point p far from where a parabola in time through the points prev (up to 8) puts it?"""
    ts = np.array([q[1] for q in prev])
    uv = np.array([(q[2].u, q[2].v) for q in prev])
    deg = min(2, len(prev) - 1)
    t0 = ts[-1]
    pred = [np.polyval(np.polyfit(ts - t0, uv[:, j], deg), p[1] - t0) for j in range(2)]
    step = float(np.median(np.linalg.norm(np.diff(uv, axis=0), axis=1) / np.diff(ts))) * (p[1] - t0)
    return float(np.hypot(p[2].u - pred[0], p[2].v - pred[1])) > 3.0 + 2.0 * r_med + 0.3 * step


def cut_at_false_reacquisition(tr: _Track) -> list[_Track]:
    """Cut a track where, after coasting through two or more missed exposures, it picked up
    something other than the ball: the first two points after the gap both miss the curve of the
    points before it (a parabola in time through the last 8) by more than a few radii. Returns the
    pieces (the track itself when there is no such place); each piece is judged on its own later."""
    pts = tr.points
    if len(pts) < 10:
        return [tr]
    for i in range(6, len(pts) - 1):
        if pts[i][0] - pts[i - 1][0] < 3:
            continue
        prev = pts[max(0, i - 8):i]
        r_med = float(np.median([q[2].radius_px for q in prev]))
        if _stray_from(prev, pts[i], r_med) and _stray_from(prev, pts[i + 1], r_med):
            head = _Track.of(pts[:i], confirmed=True, ended="lost")
            tail = _Track.of(pts[i:], confirmed=True, ended=tr.ended, bounce=tr.bounce)
            return [head] + cut_at_false_reacquisition(tail)
    return [tr]


def smooth_part(tr: _Track, min_points: int) -> _Track | None:
    """The track without its first points, as few as make the rest lie on a smooth curve
    (checks.smooth_enough): a track often begins on the thrower's hand or the kicker's foot before
    the ball leaves it. At most a third of the points go and ``min_points`` stay; None when no such
    remainder is smooth."""
    from .checks import smooth_enough

    pts = tr.points
    n = len(pts)
    for cut in range(1, min(n // 3, n - min_points) + 1):
        rest = _Track.of(pts[cut:], confirmed=tr.confirmed, ended=tr.ended, bounce=tr.bounce)
        if smooth_enough(rest):
            return rest
    return None


def smooth_head(tr: _Track, min_points: int) -> _Track | None:
    """The longest beginning of the track (``min_points`` at least, and at least half its points)
    that lies on a smooth curve (checks.smooth_enough): a track that took the ball and then, where the
    ball passed in front of a person, ran on along the person; None when no such beginning is smooth."""
    from .checks import smooth_enough

    pts = tr.points
    for n in range(len(pts) - 1, max(min_points, (len(pts) + 1) // 2) - 1, -1):
        head = _Track.of(pts[:n], confirmed=tr.confirmed, ended="lost", bounce=False)
        if smooth_enough(head):
            return head
    return None


class PathFit:
    """The image of a path with constant acceleration seen in perspective, ``(a0 + a1 t + a2 t^2) /
    (1 + d t)`` in both coordinates with one denominator (the depth relative to its value at t = 0), by
    linear least squares (the equation multiplied out); a quadratic (d = 0) from fewer than 8 points or
    when the depth would not stay positive over the fitted times. ``fit(t)`` gives (len(t), 2) pixels.

    A parabola moving away from a pinhole camera (u = f X / Z, v = f Y / Z, depth linear in time) is
    reproduced exactly:

    >>> t = np.linspace(0.0, 1.0, 9)
    >>> X, Y, Z = 1.0 + 2.0 * t, 0.5 + 3.0 * t - 4.9 * t ** 2, 5.0 + 3.0 * t
    >>> uv = np.stack([100 * X / Z, 100 * Y / Z], 1)
    >>> bool(np.allclose(PathFit(t, uv)(t), uv, atol=1e-6))
    True
    """

    def __init__(self, t, uv):
        t = np.asarray(t, float)
        uv = np.asarray(uv, float)
        n = len(t)
        self.d = 0.0
        if n >= 8:
            A = np.zeros((2 * n, 7))
            A[:n, 0], A[:n, 1], A[:n, 2], A[:n, 6] = 1.0, t, t ** 2, -uv[:, 0] * t
            A[n:, 3], A[n:, 4], A[n:, 5], A[n:, 6] = 1.0, t, t ** 2, -uv[:, 1] * t
            x = np.linalg.lstsq(A, np.concatenate([uv[:, 0], uv[:, 1]]), rcond=None)[0]
            if np.all(1.0 + x[6] * np.append(t, 0.0) > 0.3):
                self.a, self.d = x[:6].reshape(2, 3), float(x[6])
                return
        Q = np.stack([np.ones_like(t), t, t ** 2], 1)
        self.a = np.linalg.lstsq(Q, uv, rcond=None)[0].T

    def __call__(self, t):
        t = np.asarray(t, float)
        Q = np.stack([np.ones_like(t), t, t ** 2], 1)
        return (Q @ self.a.T) / (1.0 + self.d * t)[:, None]


def trim_release(tr: _Track, min_points: int, n_fit: int = 10) -> _Track:
    """Drop the first points of a flight that are not yet in free flight (the ball still in the
    thrower's hand or on the kicker's foot: the hand swings it on an arc that joins the flight's path
    only at release). The flight starts at the first point c that the free-flight path through the
    next ``n_fit`` points (:class:`PathFit`, strays left out) passes within max(2 px, half a radius) plus 4 times that
    fit's scatter, where that scatter is no more than twice (plus half a pixel) the scatter of the
    same fit in the flight's body (points from a third of the way on) or half the radius (a large
    ball's centre is found less precisely, near the thrower or kicker more so). At most a third of the
    points go and ``min_points`` stay; with no such point nothing goes."""
    pts = list(tr.points)
    limit = min(len(pts) // 3, len(pts) - max(min_points, n_fit + 1))
    if limit <= 0:
        return tr

    def fit_of(seg):
        ts = np.array([q[1] for q in seg])
        scale = max(float(ts[-1] - ts[0]), 1e-9)
        uv = np.array([(q[2].u, q[2].v) for q in seg])
        tau = (ts - ts[0]) / scale
        ok = np.ones(len(seg), bool)
        for _ in range(2):  # a stray detection or two left out, the worst first
            fit = PathFit(tau[ok], uv[ok])
            res = np.where(ok, np.linalg.norm(uv - fit(tau), axis=1), 0.0)
            worst = int(np.argmax(res))
            if res[worst] <= max(1.5, 3.0 * 1.4826 * float(np.median(res[ok]))):
                break
            ok[worst] = False
        fit = PathFit(tau[ok], uv[ok])
        res = np.linalg.norm(uv - fit(tau), axis=1)[ok]
        return fit, ts[0], scale, float(np.sqrt((res ** 2).sum() / max(2 * len(res) - 7, 1)))

    body = len(pts) // 3
    rms_body = fit_of(pts[body:body + n_fit])[3]
    for c in range(limit + 1):
        fit, t0, scale, rms = fit_of(pts[c + 1:c + 1 + n_fit])
        r = float(np.median([q[2].radius_px for q in pts[c + 1:c + 1 + n_fit]]))
        if rms > max(2.0 * rms_body + 0.5, 0.5 * r):
            continue  # those points are not in free flight either
        p = pts[c]
        miss = float(np.linalg.norm(np.array([p[2].u, p[2].v]) - fit(np.array([(p[1] - t0) / scale]))[0]))
        if miss <= max(2.0, 0.5 * r) + 4.0 * rms:
            break
    else:
        return tr
    if c == 0:
        return tr
    return _Track.of(pts[c:], confirmed=tr.confirmed, ended=tr.ended, bounce=tr.bounce)
