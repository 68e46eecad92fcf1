"""Linking candidates into flights.

Each track predicts its next image position from a constant-acceleration fit (in u and v against
time) to its last points; candidates are given to tracks best first inside a window around each
prediction (locked-on tracks before tentative ones). New tracks start from three unclaimed
candidates in recent exposures that move fast enough and continue each other's motion. A track
survives a few missed exposures (occlusion), ends when the ball leaves the frame or is lost, and at
the end fragments are joined, stray end points trimmed, and tracks split at bounces (an abrupt
reversal of the up-down image motion — a kink, not a smooth lift-curved bend — near the ground when
a camera says where that is). A track is kept as a flight when it passes the tests in checks.py.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .checks import (_blur_consistent, _extent_px, _net_speed, _radius_consistent, _scene_travel, _speed_consistent,
                     _streak_consistent, downward_acceleration, image_fall, scene_uv, sideways_motion, smooth_enough,
                     streak_across_motion, world_speed)
from .detect import Candidate, lens_magnification
from .seed import seed_all
from .streak import Expected
from .trackpoints import (_Track, cut_at_false_reacquisition, drop_size_strays, smooth_head, smooth_part, trim_release,
                          trim_strays)


@dataclass(frozen=True)
class TrackedFlight:
    flight: int
    t: np.ndarray
    frame: np.ndarray
    uv: np.ndarray
    radius_px: np.ndarray
    streak_px: np.ndarray
    quality: np.ndarray
    bounce: bool
    end_reason: str


# most upward acceleration [m/s^2] taken for a ball in flight, beyond two sigmas: half of g, i.e. lift
# of 1.5 times the ball's weight (common practice: a hard-hit ball with strong backspin flies level or
# sinks slowly). The largest lift coefficients published for some balls exceed it at speeds that occur:
# a table-tennis ball from about 9 m/s, a volleyball from 20, a football from 24, a tennis ball from 28
# (balls.py's lift envelopes) -- such a flight, seen without a camera file, is not found
RISE_MAX = 0.5 * 9.81


def _skipped_before(tr) -> bool:
    """Has the track made a step (image distance over time) at least 1.4 times as fast as the steps on
    both sides of it: an exposure left out between two frames (a kick or a bounce changes the speed
    and keeps it; a skipped exposure is one fast step between slower ones)?"""
    st = tr._steps[-12:]
    return any(b > 1.4 * max(a, c) for a, b, c in zip(st, st[1:], st[2:]))


class Tracker:
    def __init__(self, width, height, fps_hint: float = 240.0, *, min_speed_px_s: float | None = None,
                 max_speed_px_s: float | None = None, max_misses: int = 10, min_points: int = 8,
                 confirm: int = 5, focal_px: float | None = None, ball_radius_m: float | None = None,
                 min_ball_speed_mps: float = 3.0, max_ball_speed_mps: float = 90.0, camera=None):
        self.w, self.h = width, height
        diag = float(np.hypot(width, height))
        self.min_speed = min_speed_px_s if min_speed_px_s is not None else 0.1 * diag  # px/s
        self.max_speed = max_speed_px_s if max_speed_px_s is not None else 25.0 * diag
        self.max_misses = max_misses
        self.min_points = min_points
        self.confirm = confirm
        self.focal_px = focal_px
        self.ball_radius_m = ball_radius_m
        self.min_ball_speed = min_ball_speed_mps
        self.max_ball_speed = max_ball_speed_mps
        self.camera = camera
        self.active: list[_Track] = []
        self.finished: list[_Track] = []
        self.pool: list[tuple[int, float, Candidate]] = []  # unclaimed candidates of recent frames
        self.fall_hints: list[float] = []  # apparent fall [m/s^2] of smooth tracks rejected as flights
        self.slow_tracks: list[_Track] = []  # smooth ball-like tracks rejected as too slow or short in the image
        self.rejected: list[tuple[int, str]] = []  # (points, why) of smooth tracks judged not to be a ball
        self.why_not = ""

    def update(self, k: int, t: float, cands: list[Candidate]) -> None:
        # every track's gate around its prediction; then pairs are taken best first (locked-on tracks
        # before tentative ones, then by distance over gate), so that a wandering tentative track
        # with a wide gate cannot take the ball from the track that predicts it
        pairs = []
        preds = []
        late = []  # (track, distances to where it expects the ball an exposure later, gate, step)
        if cands:
            cu = np.fromiter((c.u for c in cands), float, len(cands))
            cv = np.fromiter((c.v for c in cands), float, len(cands))
            cr = np.fromiter((c.radius_px for c in cands), float, len(cands))
            cs = np.fromiter((c.streak_px for c in cands), float, len(cands))
        for j, tr in enumerate(self.active):
            pred, spread = tr.predict(t)
            preds.append(pred)
            if not cands:
                continue
            last = tr.points[-1][2]
            step = tr.speed_px_per_s() * (t - tr.points[-1][1])
            gate = tr.gate(spread, step)
            d = np.hypot(cu - pred[0], cv - pred[1])
            if tr.confirmed and tr.misses == 0 and _skipped_before(tr):
                # an exposure left out between two frames (frame-rate conversion drops exposures;
                # phones drop frames), seen before in the track: a track that found the ball in the frame
                # before and took nothing in its gate now (nothing there, or another track took it) may
                # take, after every other track, a candidate where it expects the ball one exposure later
                # (its shortest recent interval on; ranked before the tentative tracks instead, it gave
                # false flights on the first renderer's kick from behind and the juggled football)
                ts = tr._ts[-8:]
                dt = min(y - x for x, y in zip(ts, ts[1:]))
                pred2, spread2 = tr.predict(t + dt)
                late.append((j, np.hypot(cu - pred2[0], cv - pred2[1]), tr.gate(spread2, step), step))
            # sizes alike, and smeared no longer than the track moves in one interval (the exposure is
            # shorter than the interval): a long streak next to a slow track is a limb or a pole
            ok = (d < gate) & (cr >= 0.33 * last.radius_px - 2) & (cr <= 3 * last.radius_px + 2) \
                & (cs <= 1.5 * step + 2.0 + cr)
            for i in np.flatnonzero(ok):
                pairs.append((not tr.confirmed, float(d[i]) / gate, j, int(i)))
        pairs.sort()
        taken_t, taken_c = set(), set()
        for _, _, j, i in pairs:
            if j in taken_t or i in taken_c:
                continue
            taken_t.add(j)
            taken_c.add(i)
            tr = self.active[j]
            tr.add(k, t, cands[i])
            tr.misses = 0
            if not tr.confirmed and len(tr.points) >= self.confirm:
                # fast enough, of steady speed, and on a smooth curve: a chain of blobs that merely
                # lines up (common among the dozens of candidates a busy frame holds) is not
                tr.confirmed = self._plausible(tr) and _speed_consistent(tr) and smooth_enough(tr)
                if not tr.confirmed and len(tr.points) >= 2 * self.confirm:
                    tr.ended = "not a flight"
        # second, a track with nothing in its gate: a candidate where an exposure skipped would put the ball
        late_pairs = []
        for j, d_late, gate, step in late:
            if j in taken_t:
                continue
            r0 = self.active[j].points[-1][2].radius_px
            ok = (d_late < gate) & (cr >= 0.33 * r0 - 2) & (cr <= 3 * r0 + 2) & (cs <= 1.5 * step + 2.0 + cr)
            late_pairs += [(float(d_late[i]) / gate, j, int(i)) for i in np.flatnonzero(ok) if int(i) not in taken_c]
        for _, j, i in sorted(late_pairs):
            if j in taken_t or i in taken_c:
                continue
            taken_t.add(j)
            taken_c.add(i)
            self.active[j].add(k, t, cands[i])
            self.active[j].misses = 0
        for j, tr in enumerate(self.active):
            if j in taken_t:
                continue
            pred = preds[j]
            tr.misses += 1
            if not (-0.05 * self.w <= pred[0] <= 1.05 * self.w and -0.05 * self.h <= pred[1] <= 1.05 * self.h):
                tr.ended = "left the frame"
            elif tr.misses > (self.max_misses if tr.confirmed else 2):
                tr.ended = "lost"
        free = [i for i in range(len(cands)) if i not in taken_c]
        still = []
        for tr in self.active:
            (self.finished if tr.ended else still).append(tr)
        self.active = still
        # seed new tracks from unclaimed candidates and the recent pool: three points in three recent
        # exposures that move fast enough and continue each other's motion (a random pair of clutter
        # blobs is common in a busy scene, a random triplet in line is not)
        seeds = seed_all(self.pool, k, t, [cands[i] for i in free], self.w, self.h, self.min_speed,
                         self.max_speed)
        new_pool = []
        for i, seed in zip(free, seeds):
            if seed is not None:
                self.active.append(_Track.of(seed))
            else:
                new_pool.append((k, t, cands[i]))
        self.pool = [p for p in self.pool if k - p[0] < 3] + new_pool

    def expected(self, t: float) -> list[Expected]:
        """Where each confirmed track expects the ball at time t (for the detector's streak gate; a
        tentative track is as often clutter lined up as a ball)."""
        return [tr.expected(t) for tr in self.active if tr.confirmed]

    def _can_be_continued(self, prev: _Track) -> bool:
        """May prev (lost, or ended on a suspected bounce) be continued by a later fragment?"""
        if len(prev.points) < 5 or prev.ended not in ("lost", "clip ended", "bounce") or not self._plausible(prev):
            return False
        if not smooth_enough(prev):
            return False  # a jittery fragment (a person's limb, a ghost) is continued by nothing
        return self._looks_like_ball(prev)  # never extend a person, a ghost or a flag with a ball

    def _can_continue(self, tr: _Track) -> bool:
        """Only a fragment that is a flight in its own right joins another."""
        return len(tr.points) >= self.min_points and self._plausible(tr)

    def _continuation(self, prev: _Track, tr: _Track) -> float | None:
        """How well fragment tr continues prev (both passed the tests above): the miss distance over
        its tolerance (below 1 continues), or None."""
        gap = tr.points[0][1] - prev.points[-1][1]
        if not (0 < gap <= 0.15):
            return None
        # extrapolate with the whole fragment (its curvature is better known than from the last points);
        # judge by the best of tr's first three points (its very first may be a stray blob)
        ts, uv = prev.times(), prev.uv()
        deg = 2 if len(ts) >= 6 else 1
        coef = np.polyfit(ts - ts[-1], uv, deg)
        fit = np.stack([np.polyval(coef[:, k], ts - ts[-1]) for k in range(2)], axis=1)
        spread = float(np.sqrt(np.mean(np.sum((uv - fit) ** 2, axis=1))))
        score = np.inf
        for _, t_b, c_b in tr.points[:3]:
            dt = t_b - ts[-1]
            pred = np.array([np.polyval(coef[:, 0], dt), np.polyval(coef[:, 1], dt)])
            tol = 6.0 + 3.0 * c_b.radius_px + 3.0 * spread + 0.1 * prev.speed_px_per_s() * dt
            score = min(score, float(np.hypot(c_b.u - pred[0], c_b.v - pred[1])) / tol)
        return score if score <= 1.0 else None

    def _merge(self, tracks: list[_Track]) -> list[_Track]:
        """Join fragments of one flight split by an occlusion: B starts soon after A was lost and
        A's curve, extrapolated, lands on B's first points. Links are made best first, each
        fragment continuing at most one and continued by at most one."""
        tracks = sorted(tracks, key=lambda x: x.points[0][1])
        # a track that ran on for a moment onto something else (a person the ball passed) after
        # another fragment picked the ball up again: cut its tail where that fragment begins, if the
        # cut track then continues into it
        long = [b for b in tracks if len(b.points) >= self.min_points]
        for i, a in enumerate(tracks):
            if len(a.points) < self.min_points + 2:
                continue
            for b in long:
                t_b = b.points[0][1]
                if b is a or not (a.points[0][1] < t_b <= a.points[-1][1]) or a.points[-1][1] - t_b > 0.06:
                    continue
                cut = _Track.of([p for p in a.points if p[1] < t_b], confirmed=True, ended="lost")
                if len(cut.points) >= self.min_points and self._can_be_continued(cut) and self._can_continue(b) \
                        and self._continuation(cut, b) is not None:
                    tracks[i] = cut
                    break
        # the per-fragment tests once each (not once per pair: a clip can hold dozens of fragments)
        heads = [i for i, a in enumerate(tracks) if self._can_be_continued(a)]
        tails = [j for j, b in enumerate(tracks) if self._can_continue(b)]
        pairs = sorted((sc, i, j) for i in heads for j in tails
                       if i != j and (sc := self._continuation(tracks[i], tracks[j])) is not None)
        succ: dict[int, int] = {}
        pred: dict[int, int] = {}
        for _, i, j in pairs:
            if i not in succ and j not in pred and self._joined_ok(tracks[i], tracks[j]):
                succ[i], pred[j] = j, i
        out = []
        for i, tr in enumerate(tracks):
            if i in pred:
                continue  # part of an earlier chain
            j = succ.get(i)
            while j is not None:
                nxt = tracks[j]
                for kk, tt, cc in nxt.points:
                    tr.add(kk, tt, cc)
                tr.ended, tr.bounce = nxt.ended, nxt.bounce
                j = succ.get(j)
            out.append(tr)
        return out

    def _joined_ok(self, a: _Track, b: _Track) -> bool:
        """Does a followed by b still look like one ball's flight (smooth, of consistent size and
        speed)? A fragment that lands near a's curve may still be a person."""
        both = _Track.of(a.points + b.points)
        return smooth_enough(both) and self._looks_like_ball(both)

    def _no(self, why: str) -> bool:
        self.why_not = why  # why the last track judged was not a ball (for the "no flight" error)
        return False

    def _looks_like_ball(self, tr: _Track) -> bool:
        if not (_blur_consistent(tr) and _radius_consistent(tr) and _speed_consistent(tr) and _streak_consistent(tr)) \
                or streak_across_motion(tr):
            return self._no("its size, smear or speed changed as a ball's do not")
        if self.focal_px and self.ball_radius_m:
            # too fast by its typical speed; too slow only if never fast: a ball juggled or thrown
            # up is slow near the top of its arc, for much of its track
            if world_speed(tr, self.focal_px, self.ball_radius_m, self.camera) > self.max_ball_speed:
                return self._no("as large as it looked it moved faster than this ball flies (check --ball and the camera file)")
            if world_speed(tr, self.focal_px, self.ball_radius_m, self.camera, 90.0) < self.min_ball_speed:
                return self._no("as large as it looked it moved slower than a ball in flight (check --ball and the camera file)")
        if self.ball_radius_m:
            c = (self.w / 2, self.h / 2) if self.camera is None else (self.camera.K[0][2], self.camera.K[1][2])
            mo = sideways_motion(tr, self.ball_radius_m, c)
            if mo is not None and mo[1] - 2.0 * mo[2] > 100.0:
                return self._no("it turned like a swinging limb")  # at the ball's own scale over 10 g
            if mo is not None and mo[0] < self.min_ball_speed:
                return self._no("it was never as fast as a ball in flight")  # even at its end: a hand, a person
        if self.camera is not None and self.ball_radius_m:
            fall = downward_acceleration(tr, self.camera, self.ball_radius_m, with_sigma=True)
            a_z, s_a = fall if fall is not None else (None, 0.0)
            if a_z is not None and not (-1.0 + 2 * s_a > a_z > -30.0 - 2 * s_a):
                return self._no("it did not fall as a ball in free flight does (seen through this camera file)")
        elif self.ball_radius_m:
            # (judged on the flight after release: a hand lifting the ball before it lets go accelerates upward)
            fall = image_fall(trim_release(tr, self.min_points), self.ball_radius_m, self.h / 2.0)
            if fall is not None and fall[0] < -RISE_MAX - 2.0 * fall[1]:
                return self._no("it rose faster than a ball in flight does")  # a person getting up, a shadow
        return True

    def _plausible(self, tr: _Track) -> bool:
        # both the net motion and the typical step: a jump onto a parked blob is not a flight; in the
        # image or in the scene (a view panned after the ball holds it nearly still in the image)
        if _net_speed(tr) >= self.min_speed and tr.speed_px_per_s() >= self.min_speed:
            return True
        sc = scene_uv(tr)
        return sc is not None and _net_speed(tr, sc) >= self.min_speed and \
            float(np.median(np.linalg.norm(np.diff(sc, axis=0), axis=1) / np.maximum(np.diff(tr.times()), 1e-9))) \
            >= self.min_speed

    def end_all(self, reason: str) -> None:
        """End every track now (a scene cut): nothing continues across it."""
        for tr in self.active:
            tr.ended = reason
        self.finished.extend(self.active)
        self.active = []
        self.pool = []

    def _contact_height_ok(self, tr: _Track, i: int) -> bool:
        """With a camera and a ball: is point i of tr near the ground (the ray at the depth the
        apparent radius gives)? A bounce happens on the ground, a lift-curved path anywhere."""
        if self.camera is None or not self.ball_radius_m:
            return True
        uv = tr.uv()
        r = np.array([p[2].radius_px for p in tr.points])
        lo, hi = max(0, i - 6), min(len(r), i + 7)
        r_i = float(np.median(r[lo:hi]))
        mag = float(lens_magnification(self.camera, uv[i]))
        depth = self.camera.focal_px * mag * self.ball_radius_m / max(r_i, 0.3)
        origin, ray = self.camera.rays(uv[i])
        z = float(origin[2] + ray[2] * depth / max(float(ray @ self.camera.R[2]), 1e-6))
        # the radius (hence depth) is known to ~15 %: allow that much of the ray's height change
        dz = abs(ray[2]) * depth * 0.15 / max(float(ray @ self.camera.R[2]), 1e-6)
        return z <= 0.5 + dz

    def _split_at_bounce(self, tr: _Track) -> list[_Track]:
        """Split tr where its up-down image motion reverses abruptly (a kink: the up-down velocity
        just before and just after differ far beyond what one smooth curve through both sides
        allows) and, with a camera, the ball is near the ground there. A path curved by lift bends
        smoothly and stays one flight."""
        ts, uv = tr.times(), tr.uv()
        n = len(ts)
        if n < 10:
            return [tr]
        best, best_score = None, 0.0
        vel = np.convolve(np.gradient(uv[:, 1], ts), np.ones(5) / 5, mode="same")
        for i in range(4, n - 4):
            if not (vel[i - 2] > 0 and vel[min(n - 1, i + 2)] < 0):
                continue  # only where the up-down motion turns from falling to rising
            W = min(8, i, n - i - 1)
            L, R_ = slice(i - W, i + 1), slice(i, i + W + 1)
            if W < 4:
                continue
            tl, tr_ = ts[L] - ts[i], ts[R_] - ts[i]
            cl, rl = np.polyfit(tl, uv[L, 1], 2, full=True)[:2]
            cr, rr = np.polyfit(tr_, uv[R_, 1], 2, full=True)[:2]
            v_before, v_after = cl[1], cr[1]
            if not (v_before > 0 and v_after < 0):  # image v grows downwards: falling, then rising
                continue
            both = slice(i - W, i + W + 1)
            tb = ts[both] - ts[i]
            _, rb = np.polyfit(tb, uv[both, 1], 3, full=True)[:2]
            split_rms = float(np.sqrt((float(np.sum(rl)) + float(np.sum(rr))) / (2 * W + 2)))
            joint_rms = float(np.sqrt(float(np.sum(rb)) / (2 * W + 1)))
            score = joint_rms / max(split_rms, 0.15)
            dv = v_before - v_after
            if score > 4.0 and joint_rms > 0.5 and dv > 0.1 * tr.speed_px_per_s() and score > best_score \
                    and self._contact_height_ok(tr, i):
                best, best_score = i, score
        if best is None:
            return [tr]
        a = _Track.of(tr.points[:best + 1], confirmed=True, ended="bounce", bounce=True)
        b = _Track.of(tr.points[best + 1:], confirmed=True, ended=tr.ended, bounce=tr.bounce)
        return [a] + self._split_at_bounce(b)

    def apparent_fall(self, tr: _Track) -> float | None:
        """Downward acceleration [m/s^2] of the track along the image's up-down axis, with the scale
        (metres per pixel) from the ball's apparent size; None without a ball size or when the
        track is short. A real flight gives about g; a time-stretched slow-motion file g / s^2."""
        if not self.ball_radius_m or len(tr.points) < 8:
            return None
        ts, uv = tr.times(), tr.uv()
        r = float(np.median([p[2].radius_px for p in tr.points]))
        a_px = 2.0 * np.polyfit(ts - ts.mean(), uv[:, 1], 2)[0]
        return float(a_px * self.ball_radius_m / max(r, 0.3))

    def finish(self) -> list[TrackedFlight]:
        for tr in self.active:
            tr.ended = tr.ended or "clip ended"
        merged = self._merge([part for tr in self.finished + self.active if tr.confirmed
                              for part in cut_at_false_reacquisition(tr)])
        done = [trim_strays(part) for tr in merged for part in self._split_at_bounce(trim_strays(tr))]
        self.active = []
        flights = []
        self.fall_hints, self.slow_tracks, self.rejected = [], [], []
        for tr in done:
            dt = float(np.median(np.diff(tr.times()))) if len(tr.points) > 1 else 0.0
            min_points = self.min_points if dt < 1 / 40 else max(5, self.min_points - 2)  # 25-30 frames/s
            if not tr.confirmed or len(tr.points) < min_points:
                continue
            sc = scene_uv(tr)  # far and fast enough in the image, or in the scene (a view panned after the ball)
            if all(_extent_px(p) < 0.05 * np.hypot(self.w, self.h) or _net_speed(tr, p) < self.min_speed
                   for p in ([tr.uv()] if sc is None else [tr.uv(), sc])):
                if smooth_enough(tr) and self._looks_like_ball(tr):  # (for the slow-motion message)
                    self.slow_tracks.append(tr)
                continue
            if _scene_travel(tr) < 0.05 * np.hypot(self.w, self.h):
                continue  # moved only with the view (a misregistered edge of a panned view): in place in the scene
            if not smooth_enough(tr):  # a thrown ball follows a smooth curve in the image; people and flags do not
                # (but a long throw's track may have begun on the hand before release: kept without
                # those first points if the rest is smooth and still crosses a quarter of the view)
                part = smooth_part(tr, min_points)
                if part is None or _extent_px(part.uv()) < 0.25 * np.hypot(self.w, self.h):
                    # (or a track that ran on from the ball onto a person it passed: its smooth beginning,
                    # if that alone crosses a quarter of the view)
                    head = smooth_head(tr, min_points)
                    part = None if head is None else trim_strays(head)
                    if part is None or _extent_px(part.uv()) < 0.25 * np.hypot(self.w, self.h):
                        continue
                tr = part
            # elongated beyond what its own motion can smear (a limb, a pole), a size that jumps, or as
            # big as it looks a speed no ball has (a walking person, a bag): not the ball
            if not self._looks_like_ball(tr):
                self.rejected.append((len(tr.points), self.why_not))
                a = self.apparent_fall(tr)
                if a is not None:
                    self.fall_hints.append(a)
                continue
            # (its ends cut where it ran on onto something of another size, once judged whole: the judgement
            # stays the one of the track as tracked)
            flights.append(drop_size_strays(trim_release(tr, min_points)))
        flights.sort(key=lambda x: x.points[0][1])
        out = []
        for i, tr in enumerate(flights):
            cs = [p[2] for p in tr.points]
            out.append(TrackedFlight(
                flight=i + 1, t=tr.times(), frame=np.array([p[0] for p in tr.points]), uv=tr.uv(),
                radius_px=np.array([c.radius_px for c in cs]), streak_px=np.array([c.streak_px for c in cs]),
                quality=np.array([min(1.0, c.contrast / 60.0) for c in cs]), bounce=tr.bounce, end_reason=tr.ended))
        return out
