"""The tests that tell a ball's track from other moving things (checks.py), the cut where a coasting
track picked up something else (trackpoints.py), the timing of frame-rate-converted exposures
(pipeline.py) and the split of a ball from a person it touches (detect.py).

Truth comes from closed-form motion (free fall under g, a pinhole projection written here) and
from the arithmetic of frame-rate conversion, not from the code under test."""
import math

import numpy as np
import pytest

from balltraj.vision.checks import (_extent_px, _net_speed, _speed_consistent, _streak_consistent, running_median,
                                   sideways_motion, world_speed)
from balltraj.vision.detect import Candidate, Detector
from balltraj.vision.frames import _median
from balltraj.vision.pipeline import exposure_time
from balltraj.vision.trackpoints import _Track, cut_at_false_reacquisition, trim_strays

G = 9.81  # m/s^2, standard gravity (common practice)
F_PX, R_BALL = 1000.0, 0.11  # pinhole focal length [px] and ball radius [m] of the synthetic views
CENTRE = (640.0, 360.0)


def _project(X, Y, Z):
    """Pinhole projection (Source: Hartley & Zisserman 2004, eq. 6.1): pixel and apparent radius."""
    return CENTRE[0] + F_PX * X / Z, CENTRE[1] + F_PX * Y / Z, F_PX * R_BALL / Z


def _track(ts, X, Y, Z, frames=None, streak=None):
    tr = _Track()
    frames = np.arange(len(ts)) if frames is None else frames
    for i, t in enumerate(ts):
        u, v, r = _project(X[i], Y[i], Z[i])
        s = 0.0 if streak is None else streak[i]
        tr.add(int(frames[i]), float(t), Candidate(u, v, r, s, 0.0, math.pi * r * r, 80.0))
    return tr


def _free_fall(ts, vx=12.0, vy=-8.0, z0=10.0, vz=0.0):
    """A ball across the view (image y grows downward, so gravity is +Y), depth z0 + vz t."""
    return vx * ts - 3.0, vy * ts + 0.5 * G * ts**2, z0 + vz * ts


def test_sideways_acceleration_of_a_ball_in_free_flight_is_g():
    ts = np.arange(30) / 60.0
    mo = sideways_motion(_track(ts, *_free_fall(ts)), R_BALL, CENTRE)
    # Source: free fall, |a| = g across a view whose up-down axis points straight up
    assert mo[1] == pytest.approx(G, rel=0.02)
    peak = max(math.hypot(12.0, -8.0), math.hypot(12.0, -8.0 + G * ts[-1]))  # the faster end of the parabola
    assert mo[0] == pytest.approx(peak, rel=0.02)


def test_sideways_acceleration_of_a_receding_ball_is_still_g():
    # the kick from behind: 2 m -> 20 m away; perspective bends the image path, X and Y stay ballistic
    ts = np.arange(40) / 60.0
    X, Y, Z = _free_fall(ts, vx=1.0, vy=-6.0, z0=2.0, vz=27.0)
    mo = sideways_motion(_track(ts, X, Y, Z), R_BALL, CENTRE)
    assert mo[1] == pytest.approx(G, rel=0.05)


def test_a_swinging_hand_turns_far_harder_than_a_ball():
    # a hand 0.7 m from the shoulder swinging at 3 turns a second: centripetal omega^2 L = 249 m/s^2
    # (Source: uniform circular motion), a ball-sized blob 8 m away seen at 60 frames/s for 0.1 s
    ts = np.arange(7) / 60.0
    ang = 2 * math.pi * 3.0 * ts
    mo = sideways_motion(_track(ts, 0.7 * np.sin(ang), 0.7 * np.cos(ang), np.full(len(ts), 8.0)), R_BALL, CENTRE)
    assert mo[1] - 2 * mo[2] > 100.0  # over 10 g, beyond its own uncertainty


def test_speed_consistency_allows_dropped_exposures_but_not_jumps():
    # 30 exposures/s stored at 24 frames/s: every 5th exposure dropped, container times at 1/24 s
    exp = np.array([j for j in range(40) if j % 5 != 4])
    t_capture = exp / 30.0
    t_container = np.arange(len(exp)) / 24.0
    X, Y, Z = _free_fall(t_capture)
    assert _speed_consistent(_track(t_container, X, Y, Z))
    # a short track (one stray step in eight is tolerated) with one point from a blob three steps on
    X2, Y2, Z2, t2 = X[:8].copy(), Y[:8], Z[:8], t_container[:8]
    assert _speed_consistent(_track(t2, X2, Y2, Z2))
    X2[4] += 3 * (X2[5] - X2[4])
    assert not _speed_consistent(_track(t2, X2, Y2, Z2))


def test_streaks_follow_the_speed_of_a_ball_not_line_fragments():
    ts = np.arange(24) / 60.0
    X, Y, Z = _free_fall(ts)
    speed_px = np.hypot(np.gradient(X), np.gradient(Y)) * F_PX / Z  # px per interval
    assert _streak_consistent(_track(ts, X, Y, Z, streak=0.5 * speed_px))  # exposure half the interval
    rng = np.random.default_rng(5)
    assert not _streak_consistent(_track(ts, X, Y, Z, streak=rng.uniform(5, 130, len(ts))))


def test_a_track_that_picked_up_a_person_after_coasting_is_cut_there():
    ts = np.arange(20) / 60.0
    ball = _track(ts, *_free_fall(ts))
    tr = _Track()
    for p in ball.points:
        tr.add(*p)
    for i in range(6):  # 4 missed exposures, then a person's hand 40 cm away, moving slowly
        t = (24 + i) / 60.0
        u, v, r = _project(-2.0 + 0.02 * i, 1.5, 10.0)
        tr.add(24 + i, t, Candidate(u, v, r, 0.0, 0.0, math.pi * r * r, 50.0))
    pieces = cut_at_false_reacquisition(tr)
    assert [len(p.points) for p in pieces] == [20, 6]
    assert cut_at_false_reacquisition(ball)[0] is ball  # a clean track is left alone


def test_exposure_times_of_frame_rate_converted_footage_are_even():
    # 25 exposures/s stored at 30 frames/s: exposure j is first shown at frame ceil(6 j / 5)
    # (Source: the arithmetic of the 5-in-6 repeat pattern; the renderer of the realism tests does the same)
    j = np.arange(60)
    first_shown = np.ceil(6 * j / 5) / 30.0
    true = j / 25.0
    raw_err = first_shown - true
    fitted = np.array([exposure_time(list(first_shown[: n + 1])) for n in range(len(j))])
    fit_err = fitted[10:] - true[10:]
    assert np.ptp(raw_err) > 0.5 / 30  # the raw times jitter by most of a frame interval
    assert np.ptp(fit_err) < 0.2 / 30  # the fitted ones by a small part of it (a constant offset is harmless)


def test_a_ball_touching_a_person_is_found_by_its_core():
    w, h = 320, 240
    bg = np.full((h, w), 200, np.uint8)
    frame = bg.copy()
    frame[100:200, 60:130] = 150  # a person-sized shape 50 grey levels darker than the background
    yy, xx = np.mgrid[0:h, 0:w]
    cu, cv, r = 136.0, 120.0, 7.0
    frame[(xx - cu) ** 2 + (yy - cv) ** 2 <= r * r] = 60  # a dark ball touching its edge
    det = Detector(w, h)
    det.process(bg)
    cands = det.process(frame)
    best = min(cands, key=lambda c: math.hypot(c.u - cu, c.v - cv))
    assert math.hypot(best.u - cu, best.v - cv) < 1.0
    assert best.radius_px == pytest.approx(r, rel=0.25)


def test_reach_of_a_ball_that_comes_back_down_where_it_rose():
    # invariant: a ball thrown straight up and caught where it left the hand has no net displacement,
    # but it reached as high as it went
    pts = [(i, i / 30, Candidate(320.0, 300.0 - 120 * math.sin(math.pi * i / 20), 20.0, 3.0, 0.0, 1200.0, 80.0))
           for i in range(21)]
    tr = _Track.of(pts)
    assert np.hypot(*(tr.uv()[-1] - tr.uv()[0])) < 1e-9
    assert _extent_px(tr.uv()) == pytest.approx(120.0, abs=1e-6)
    assert _net_speed(tr) == pytest.approx(120.0 / (20 / 30), rel=1e-9)


def test_world_speed_percentiles_of_a_ball_thrown_straight_up():
    # Source: free fall, v(t) = v0 - g t (closed form). A ball thrown up at 4 m/s at a constant 5 m from
    # the camera (constant apparent radius): its typical (median) speed is under 3 m/s, its speed
    # near the fastest (90th percentile) over it -- the minimum-speed test must use the latter
    f, R, Z, v0, g = 1000.0, 0.11, 5.0, 4.0, 9.81
    ts = np.arange(0, 2 * v0 / g, 1 / 60)
    r = f * R / Z
    pts = [(i, t, Candidate(500.0, 400.0 - (v0 * t - 0.5 * g * t * t) * f / Z, r, 1.0, 0.0, 3 * r * r, 80.0))
           for i, t in enumerate(ts)]
    tr = _Track.of(pts)
    speeds = np.abs(v0 - g * ts)
    assert world_speed(tr, f, R) == pytest.approx(np.median(speeds), abs=0.02)
    assert world_speed(tr, f, R, None, 90.0) == pytest.approx(np.percentile(speeds, 90), abs=0.02)
    assert world_speed(tr, f, R) < 3.0 < world_speed(tr, f, R, None, 90.0)


@pytest.mark.parametrize("n", [1, 2, 3, 4, 5, 6, 17, 40])
def test_sorted_medians_equal_numpys(n):
    """The plain-float medians that replaced np.median on short windows give numpy's values exactly
    (odd and even windows, the cut windows at the ends, repeated values): the speed-up changed no
    observation and no track test."""
    rng = np.random.default_rng(n)
    for x in (rng.normal(0, 50, n), np.round(rng.uniform(0, 4, n)), np.full(n, 2.5)):
        ref = np.array([np.median(x[max(0, i - 2):i + 3]) for i in range(n)])
        assert np.array_equal(running_median(x), ref)
        assert _median(list(x)) == float(np.median(x))


def test_strays_are_trimmed_from_a_short_track():
    # A walker's head tracked for 7 frames at 120 frames/s (a 10.6 px disc moving sideways in a straight
    # line), then two points on other things (radii 2 and 1 px, 20-70 px below): before, a track under 12
    # points kept its ends, and the strays lent it the fall and the points it needed to pass as a flight.
    def cand(u, v, r):
        return Candidate(u, v, r, 18.0, 0.0, math.pi * r * r, 60.0)

    head = [(k, k / 120, cand(200 + 1.8 * k, 213.0, 10.6)) for k in range(7)]
    strays = [(8, 8 / 120, cand(227.7, 234.6, 2.0)), (15, 15 / 120, cand(243.5, 280.9, 1.0))]
    out = trim_strays(_Track.of(head + strays))
    assert [p[0] for p in out.points] == list(range(7))
    # Invariant: a short flight on a parabola (falling at g seen at 100 px/m), radius steady, keeps every point
    fall = [(k, k / 120, cand(300 + 4.0 * k, 200 - 3.0 * k + 0.5 * 981 * (k / 120) ** 2, 6.0)) for k in range(9)]
    assert len(trim_strays(_Track.of(fall)).points) == 9


def test_the_fall_without_a_focal_length_is_g_from_any_side_and_a_riser_is_no_ball():
    from balltraj.vision.checks import image_fall
    from balltraj.vision.track import Tracker
    ts = np.arange(30) / 60.0
    # a ball thrown towards a level camera while it rises: 20 m/s closer and 6 m/s up (image y grows
    # downward, so up is -Y): in the image it climbs ever faster as it nears, yet its height falls at g
    Z = 14.0 - 20.0 * ts
    Y = 0.5 - 6.0 * ts + 0.5 * G * ts ** 2
    X = 1.0 + 0.5 * ts
    tr = _track(ts, X, Y, Z)
    v = np.array([p[2].v for p in tr.points])
    assert 2.0 * np.polyfit(ts, v, 2)[0] < 0  # the image's own acceleration is upward
    a, s = image_fall(tr, R_BALL, CENTRE[1])
    # Source: the drag-free parabola above (g, common practice); the height (v - c) R / r is exact for a
    # pinhole, so only the fitted straight line in 1/r (exact here: Z linear in t) stands between them
    assert a == pytest.approx(G, rel=0.02) and s < 0.5
    # the same motion rising at g instead (a person getting up, a shadow climbing the court): not a ball
    riser = _track(ts, X, 0.5 - 6.0 * ts - 0.5 * G * ts ** 2, Z)
    assert image_fall(riser, R_BALL, CENTRE[1])[0] == pytest.approx(-G, rel=0.02)
    trk = Tracker(1280, 720, ball_radius_m=R_BALL)
    assert trk._looks_like_ball(tr) and not trk._looks_like_ball(riser)
    assert "rose faster" in trk.why_not  # the no-flight error's reason (pipeline.track_clip)
    # too short to tell (under 0.2 s), or the same instants over and over: no answer
    assert image_fall(_track(ts[:10], X[:10], Y[:10], Z[:10]), R_BALL, CENTRE[1]) is None
    twice = _track(np.repeat(ts[[0, 20]], 4), np.repeat(X[[0, 20]], 4), np.repeat(Y[[0, 20]], 4),
                   np.repeat(Z[[0, 20]], 4))
    assert image_fall(twice, R_BALL, CENTRE[1]) is None


def test_a_stray_tail_does_not_drag_the_fall_parabola():
    # Source: closed form - heights of a free fall z = 1.5 + 0.9 t - g/2 t^2 (g 9.81, from memory) over 0.2 s at
    # 240 frames/s with 2 mm noise, then 4 points of a track that ran on onto a person, rising 5-20 cm off
    # the path (the shape of a close tennis toss whose track ended on the tosser): a parabola through every
    # point bends upward (+9 m/s^2 here before the robust start); the fall must still be about -g
    from balltraj.vision.checks import _clipped_parabola

    rng = np.random.default_rng(4)
    t = np.arange(46) / 240.0
    z = 1.5 + 0.9 * t - 0.5 * 9.81 * t**2 + rng.normal(0, 0.002, t.size)
    z[-4:] += [0.05, 0.13, 0.19, 0.2]
    tt = t - t.mean()
    c, keep = _clipped_parabola(tt, z, 8, 1e-6)
    assert 2 * c[0] == pytest.approx(-9.81, abs=1.0)
    assert not keep[-4:].any() and keep[:-4].all()
    # and a clean track keeps every point and its own least-squares parabola
    z0 = 1.5 + 0.9 * t - 0.5 * 9.81 * t**2 + rng.normal(0, 0.002, t.size)
    c0, keep0 = _clipped_parabola(tt, z0, 8, 1e-6)
    assert keep0.all() and np.allclose(c0, np.polyfit(tt, z0, 2))


def test_points_of_another_size_are_dropped_from_a_track():
    # Source: invariant - a ball's apparent radius follows f R / distance, smooth in time: here a ball coming
    # closer (radius 12 -> 18 px over 40 frames); points the track took on something else at its end (a 5 px hand,
    # a 30 px merged blob) near its ends go with what lies beyond them, the rest stays, and a 2 px ball's noisy radii are left alone
    from balltraj.vision.trackpoints import drop_size_strays

    def track(radii, off=()):
        tr = _Track()
        for i, r in enumerate(radii):
            dv = 25.0 if i in off else 0.0  # what the track took instead lies off the ball's path
            tr.add(i, i / 60, Candidate(100.0 + 9 * i, 200.0 - 3 * i + dv, float(r), 0.0, 0.0, math.pi * r * r, 60.0))
        return tr

    radii = list(12.0 + 6.0 * np.arange(40) / 39)
    bad = {2: 30.0, 17: 30.0, 35: 6.0, 37: 5.5}
    mixed = [bad.get(i, r) for i, r in enumerate(radii)]
    out = drop_size_strays(track(mixed, off=bad))
    # the ends are cut up to their innermost stray (the track ran on onto something); one inside stays
    assert [p[0] for p in out.points] == list(range(3, 35))
    # a point of another size on the ball's path (a piece of the ball: its lit cap in a dark room) stays
    assert len(drop_size_strays(track(mixed)).points) == 40
    assert len(drop_size_strays(track(radii)).points) == 40
    tiny = [2.0, 1.0, 2.2, 2.0, 3.8, 2.1, 1.9, 2.0, 2.0, 2.1, 2.0] * 2
    assert len(drop_size_strays(track(tiny)).points) == len(tiny)
    # a ball kicked away from the camera: 1/r linear in time, 14 -> 4 px in 30 frames, nothing dropped
    away = list(1.0 / (1 / 14 + (1 / 4 - 1 / 14) * np.arange(30) / 29))
    assert len(drop_size_strays(track(away)).points) == 30
