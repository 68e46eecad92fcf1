"""Two ways a ball in flight was lost although the detector found it in nearly every exposure: a view
panned after the ball (it barely moves in the image, it flies through the scene), and re-coded repeats
of frame-rate conversion that the frame guard could not tell from exposures (the same exposure twice at
one place folds the track back).

Truth comes from closed-form motion (free fall under g, a pinhole projection written here, a pan that
follows the ball), from the arithmetic of a repeated frame, and from the second renderer's own record of
the ball's image centre (tests/scene_outside.py), not from the code under test."""
import math

import numpy as np
import pytest

from balltraj.vision.detect import Candidate
from balltraj.vision.track import Tracker
from balltraj.vision.trackpoints import _Track, stayed_put

G = 9.81  # m/s^2, standard gravity (common practice)
F_PX, R_BALL, DEPTH = 1000.0, 0.11, 20.0  # focal length [px], ball radius [m], its distance [m]
W, H = 1280, 720


def _followed_lob(follow=0.9, fps=30.0, n=45):
    """Image and scene positions [px] of a ball lobbed across a view that pans after it: the view's centre
    moves by ``follow`` of the ball's own image motion, so the ball moves by (1 - follow) of it in the
    image. Pinhole (Source: Hartley & Zisserman 2004, eq. 6.1) at a fixed depth: scene px = f X / Z."""
    ts = np.arange(n) / fps
    X, Y = 9.0 * ts - 6.0, -11.0 * ts + 0.5 * G * ts ** 2
    us, vs = W / 2 + F_PX * X / DEPTH, H / 2 + 0.2 * H + F_PX * Y / DEPTH
    pan_u, pan_v = follow * (us - us[0]), follow * (vs - vs[0])
    return ts, us - pan_u, vs - pan_v, us, vs


def _cand(u, v, us=None, vs=None, r=F_PX * R_BALL / DEPTH, s=1.0):
    return Candidate(float(u), float(v), r, s, 0.0, math.pi * r * r, 80.0,
                     None if us is None else float(us), None if vs is None else float(vs))


def _track_of(ts, u, v, us=None, vs=None):
    return _Track.of([(k, float(t), _cand(u[k], v[k], None if us is None else us[k], None if vs is None else vs[k]))
                      for k, t in enumerate(ts)], confirmed=True)


def test_a_ball_followed_by_a_pan_is_plausible():
    # in the image it moves at a tenth of its speed through the scene: slower than the tracker's floor
    # (a tenth of the view's diagonal a second), which is meant for things that stay in place
    ts, u, v, us, vs = _followed_lob()
    floor = 0.1 * math.hypot(W, H)
    assert np.median(np.hypot(np.diff(u), np.diff(v)) / np.diff(ts)) < floor
    assert np.median(np.hypot(np.diff(us), np.diff(vs)) / np.diff(ts)) > floor
    trk = Tracker(W, H, ball_radius_m=R_BALL)
    assert trk._plausible(_track_of(ts, u, v, us, vs))
    # the same image motion with the view standing still (no scene positions): a slow thing, not a flight
    assert not trk._plausible(_track_of(ts, u, v))


def test_a_thing_in_place_in_the_scene_stays_no_flight_under_a_pan():
    # a misregistered edge of a panned view: it moves in the image with the pan (as fast as the ball's
    # scene motion), not in the scene
    ts, _, _, us, vs = _followed_lob()
    pan_u, pan_v = us - us[0], vs - vs[0]
    trk = Tracker(W, H, ball_radius_m=R_BALL)
    for k, t in enumerate(ts):
        trk.update(k, float(t), [_cand(900.0 - pan_u[k], 500.0 - pan_v[k], 900.0, 500.0)])
    assert trk.finish() == []


def _moving_track(n=8, step=20.0, dt=1 / 12, confirmed=True, u0=100.0, v0=200.0):
    pts = [(k, k * dt, _cand(u0 + step * k, v0 - 0.5 * step * k + 0.2 * k * k, s=4.0)) for k in range(n)]
    return _Track.of(pts, confirmed=confirmed)


def test_a_repeat_is_known_by_the_ball_found_where_it_was():
    # a repeated frame shows the last exposure again: the ball where the track's last point was, to the
    # coding noise; an exposure shows it moved on, near the track's prediction
    ball = _moving_track()
    t_next = ball.points[-1][1] + 1 / 12
    last = ball.points[-1][2]
    again = _cand(last.u + 0.1, last.v - 0.1, r=last.radius_px, s=last.streak_px)
    pred, _ = ball.predict(t_next)
    moved = _cand(pred[0] + 1.0, pred[1], r=last.radius_px, s=last.streak_px)
    clutter = _cand(700.0, 100.0)
    assert stayed_put([ball], t_next, [again, clutter])
    assert not stayed_put([ball], t_next, [moved, clutter])
    # a shorter confirmed track (clutter lined up) that found something moved does not outvote the ball's,
    # and tentative tracks are not asked
    other = _moving_track(n=5, u0=400.0, v0=300.0)
    o_pred, _ = other.predict(t_next)
    tentative = [_moving_track(n=6, u0=150.0 + 40 * i, v0=500.0, confirmed=False) for i in range(4)]
    cands = [again, _cand(o_pred[0], o_pred[1], s=4.0)] + [_cand(*tr.predict(t_next)[0], s=4.0) for tr in tentative]
    assert stayed_put([ball, other] + tentative, t_next, cands)
    # a track that barely moves says nothing either way
    slow = _moving_track(step=0.5)
    assert not stayed_put([slow], t_next, [slow.points[-1][2]])


def _scored(shot, tmp_path):
    """(recall, precision) of track_clip on the rendered shot against the renderer's own ball centre in the
    frame each observation was made in (Source: tests/scene_outside.py's truth rows)."""
    pytest.importorskip("av")
    from scene_outside import render_shot

    from balltraj.vision.pipeline import track_clip
    path = tmp_path / "clip.mp4"
    truth = render_shot(shot, path)
    res = track_clip(path, None, shot.ball.radius_m)
    hit, good, n = set(), 0, 0
    for f in res.flights:
        for k, (u, v) in zip(f.frame, f.uv):
            row = truth[int(k)]
            n += 1
            if row["visible"] and not row["repeat"] and math.hypot(u - row["u"], v - row["v"]) <= max(2.0, 0.5 * row["r"]):
                good += 1
                hit.add(row["exposure"])
    visible = {r["exposure"] for r in truth if r["visible"]}
    return len(hit & visible) / len(visible), good / max(n, 1)


LINES = (((-30, 20), (30, 20)), ((0, 8), (0, 40)), ((-30, 35), (30, 35)))


@pytest.mark.slow
def test_a_lob_followed_by_a_hand_held_pan_is_tracked(tmp_path):
    # the benchmark's high lob against the sky (second rendering): the view pans after the ball, which then
    # hovers in the image -- over its whole track it reached too little in the image for the speed floor,
    # and was given up although every point was on the ball
    from scene_outside import FOOTBALL, Lens, Person, Shot, Style
    shot = Shot(Lens((1280, 720), 1000, (0, 0, 1.5), pitch=14, k1=-0.06), FOOTBALL, (-11.0, 22.0, 0.11),
                (9.5, -1.0, 13.0), 0.3, 2.9, 30, 30, shutter=1 / 1000, readout=0.03,
                style=Style("grass", "trees", 60.0, LINES), shake_px=1.5, follow=0.8, follow_lag=0.3,
                roll_deg=0.3, people=(Person(-11.4, 22.0, 0, 0, cadence=0, stride=0, kicks=(0.3,)),),
                bitrate=3_000_000, seed=104)
    recall, precision = _scored(shot, tmp_path)
    # (measured: recall 0.95, precision 1.00; before: no flight)
    assert recall >= 0.8 and precision >= 0.9, (recall, precision)


@pytest.mark.slow
def test_twelve_images_a_second_shown_unevenly_are_tracked(tmp_path):
    # the benchmark's kick-up on a field (second rendering): 12 images a second shown 1-4 times each at
    # 29.97 frames/s, H.264 at 900 kbit/s; before, a third of the re-coded repeats passed as exposures
    # (their mean difference over half of two exposures', or an intra-coded repeat's as large), the
    # ball's track folded back at each and was given up: no flight
    from scene_outside import FOOTBALL, Lens, Person, Shot, Style
    shot = Shot(Lens((640, 360), 520, (0, -1.0, 1.2), pitch=8, k1=-0.06), FOOTBALL, (-3.0, 9.0, 0.11),
                (5.0, 0.3, 9.0), 0.2, 2.2, 12, 30000 / 1001, shutter=1 / 250, readout=0.03, uneven=0.35,
                style=Style("grass", "trees", 35.0, LINES), shake_px=0.6,
                people=(Person(-3.3, 9.0, 0, 0, cadence=0, stride=0, kicks=(0.2,), shirt=(0.1, 0.5, 0.5)),
                        Person(2.0, 12.0, -1.4, 0, shirt=(0.7, 0.7, 0.2))), bitrate=900_000, seed=109)
    recall, precision = _scored(shot, tmp_path)
    # (measured: recall 0.71, precision 0.94; before: no flight)
    assert recall >= 0.5 and precision >= 0.85, (recall, precision)


def test_a_streak_across_the_motion_is_not_a_ball():
    # a ball's blur streak lies along its path (it is the motion during the exposure); a limb or a torso's
    # edge carried sideways by a walking person is long across it. Geometry written here: a path along +u
    # with a gentle fall, streaks of 3 radii either along the local direction or upright.
    from balltraj.vision.checks import streak_across_motion
    ts = np.arange(12) / 25.0
    u, v = 100.0 + 150.0 * ts, 200.0 + 0.5 * 300.0 * ts ** 2
    r = 4.0

    def track(angle_of):
        pts = []
        for k, t in enumerate(ts):
            a = angle_of(k)
            pts.append((k, float(t), Candidate(float(u[k]), float(v[k]), r, 3 * r, a, math.pi * r * r, 80.0)))
        return _Track.of(pts)

    along = track(lambda k: math.atan2(300.0 * ts[k], 150.0))  # Source: d(v)/d(u) of the path above
    upright = track(lambda k: math.pi / 2)
    assert not streak_across_motion(along)
    assert streak_across_motion(upright)
    # a round blob (no streak to speak of) says nothing about its direction
    assert not streak_across_motion(_Track.of([(k, t, replace_streak(c, 0.5 * r)) for k, t, c in upright.points]))


def replace_streak(c, s):
    from dataclasses import replace
    return replace(c, streak_px=s)


def test_a_confirmed_track_takes_the_ball_one_exposure_on_after_a_left_out_exposure():
    # a ball across the view at 24 frames/s whose track has already seen one exposure left out (one
    # step twice as long as those beside it); in the next frame another exposure is left out: the
    # ball is two steps on, beyond the track's window, and nothing else is near (Source: the arithmetic
    # of a rate conversion by dropping frames, common practice)
    fps = 24.0
    steps = [1, 1, 2, 1, 1, 1, 1, 1]  # exposures advanced per frame
    e = np.concatenate([[0], np.cumsum(steps)])
    u, v = 200.0 + 40.0 * e, 300.0 + 0.0 * e
    trk = Tracker(W, H, fps_hint=fps)
    for j in range(len(e)):
        trk.update(j, j / fps, [_cand(u[j], v[j], r=3.3)])
    (tr,) = [t for t in trk.active if t.confirmed]
    n = len(tr.points)
    j = len(e)
    far = 200.0 + 40.0 * (e[-1] + 2)  # two exposures on
    trk.update(j, j / fps, [_cand(far, 300.0, r=3.3)])
    assert tr in trk.active and len(tr.points) == n + 1 and tr.points[-1][2].u == far and tr.misses == 0
    # a track that has never skipped an exposure does not look there
    trk2 = Tracker(W, H, fps_hint=fps)
    for j in range(8):
        trk2.update(j, j / fps, [_cand(200.0 + 40.0 * j, 300.0, r=3.3)])
    (tr2,) = [t for t in trk2.active if t.confirmed]
    trk2.update(8, 8 / fps, [_cand(200.0 + 40.0 * 9, 300.0, r=3.3)])
    assert tr2.points[-1][0] == 7 and tr2.misses == 1
