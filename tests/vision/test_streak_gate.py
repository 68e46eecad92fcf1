"""The streak filter gated by the tracker's predictions (streak.streak_expected, Detector streaks="tracked",
Tracker.expected), on streaks drawn here."""
import math
from functools import lru_cache

import cv2
import numpy as np
from test_streak import _streak

from balltraj.vision.detect import Candidate, Detector
from balltraj.vision.streak import Expected, streak_expected
from balltraj.vision.track import Tracker
from balltraj.vision.trackpoints import _Track

W, H = 320, 240
CU, CV, R, LENGTH, ANG = 161.0, 121.0, 9.0, 60.0, math.radians(-8.0)


@lru_cache(maxsize=1)
def _frames(seed=4):
    """A background and a frame holding a dim shaded streak cut by two gaps into pieces (as noise and a
    threshold cut a dim one), plus a round ball of the same size elsewhere."""
    rng = np.random.default_rng(seed)
    bg = np.full((H, W), 40.0)
    s = _streak((H, W), CU, CV, R, LENGTH, ANG, 60.0, shaded=0.4)
    xx = np.arange(W)
    s[:, ((xx >= 145) & (xx < 149)) | ((xx >= 172) & (xx < 176))] *= 0.1  # two gaps, 4 px wide
    s += _streak((H, W), 60.0, 60.0, R, 0.5, 0.0, 60.0)  # a round (unsmeared) ball
    frame = np.clip(bg + s + rng.normal(0, 1.0, (H, W)), 0, 255).astype(np.uint8)
    base = np.clip(bg + rng.normal(0, 1.0, (H, W)), 0, 255).astype(np.uint8)
    return base, frame


def _detect(streaks, expected=None):
    base, frame = _frames()
    det = Detector(W, H, streaks=streaks)
    det.process(base)
    return det.process(frame, expected=expected)


def _near_streak(cands):
    return sorted((c for c in cands if math.hypot(c.u - CU, c.v - CV) < 0.5 * LENGTH + 2 * R), key=lambda c: c.u)


def _track_at(angle, step=60.0, radius=R, streak=LENGTH):
    """A confirmed track's prediction at the streak's midpoint, moving ``step`` px a frame at ``angle``,
    whose recent points were streaks of this radius and length."""
    return Expected(CU + 3.0, CV - 2.0, step * math.cos(angle), step * math.sin(angle), 4 + 2 * radius + 0.25 * step,
                    1.0, radius, streak)


def test_the_filter_acts_on_a_streak_along_a_tracks_motion_only():
    # Source: a uniform-velocity disc smeared over the exposure has its centroid at the midpoint
    # (common practice). Along the predicted motion: one candidate at the midpoint, the pieces dropped
    off = _near_streak(_detect("off"))
    assert len(off) >= 2  # the pieces, as the plain detector measures them
    along = _near_streak(_detect("tracked", [_track_at(ANG)]))
    assert len(along) == 1
    assert math.hypot(along[0].u - CU, along[0].v - CV) < 1.5
    assert abs(along[0].streak_px - LENGTH) < 0.15 * LENGTH
    # across the predicted motion (a limb or a strand of netting crossing a track's path): untouched
    across = _near_streak(_detect("tracked", [_track_at(ANG + math.radians(60.0))]))
    assert [(c.u, c.v, c.streak_px) for c in across] == [(c.u, c.v, c.streak_px) for c in off]
    # no prediction near it (a flight not yet tracked): untouched too
    assert [(c.u, c.v) for c in _near_streak(_detect("tracked", []))] == [(c.u, c.v) for c in off]


def test_a_track_that_is_not_streaking_expects_no_streak():
    # invariant: a track whose recent points were round (streak well under the diameter) or smeared beyond its
    # own motion (a limb) does not expect one, and a blob far from its size is not its ball
    off = [(c.u, c.v) for c in _near_streak(_detect("off"))]
    for e in (_track_at(ANG, streak=4.0), _track_at(ANG, step=20.0), _track_at(ANG, radius=3.0, streak=20.0)):
        assert [(c.u, c.v) for c in _near_streak(_detect("tracked", [e]))] == off


def test_a_round_ball_near_a_prediction_is_untouched():
    # invariant: the filter only measures elongated blobs; a round ball at a streaking track's prediction stays
    def ball(cands):
        return [(c.u, c.v, c.radius_px) for c in cands if math.hypot(c.u - 60.0, c.v - 60.0) < 2 * R]
    e = Expected(61.0, 59.0, 60.0, 0.0, 4 + 2 * R + 15.0, 1.0, R, LENGTH)
    plain = ball(_detect("off"))
    assert len(plain) == 1 and math.hypot(plain[0][0] - 60.0, plain[0][1] - 60.0) < 1.0
    assert ball(_detect("tracked", [e])) == plain


def test_streak_expected_angle_tolerance_follows_the_geometry():
    # invariant: the tolerance is atan(r / L) + atan((spread + 1) / step), so a blob just inside is taken and
    # one just outside is not
    e = Expected(0.0, 0.0, 50.0, 0.0, 30.0, 1.0, 6.0, 30.0)
    tol = math.atan2(6.0, 30.0) + math.atan2(2.0, 50.0)
    assert streak_expected(2.0, 1.0, 0.97 * tol, 6.0, 30.0, [e]) == (True, True)
    assert streak_expected(2.0, 1.0, 1.03 * tol, 6.0, 30.0, [e]) == (True, False)
    assert streak_expected(2.0, 1.0, math.pi - 0.97 * tol, 6.0, 30.0, [e]) == (True, True)  # an axis has no sign
    assert streak_expected(2.0, 1.0, 0.0, 6.0, 80.0, [e]) == (True, False)  # longer than the motion allows
    assert streak_expected(2.0, 1.0, 0.0, 14.0, 30.0, [e]) == (True, False)  # twice the track's size


def test_only_confirmed_tracks_predict_and_their_motion_is_one_frame_interval():
    # invariant: points moving at a constant velocity are predicted on that line, the motion per frame
    # interval being the velocity times the interval (even after a missed exposure)
    trk = Tracker(640, 480)
    dt = 1 / 30
    pts = [(k, k * dt, Candidate(100.0 + 40.0 * k, 200.0 - 10.0 * k, 8.0, 30.0, 0.0, 200.0, 100.0))
           for k in (0, 1, 2, 3, 5, 6)]
    trk.active = [_Track.of(pts, confirmed=True), _Track.of(pts[:3])]
    (e,) = trk.expected(7 * dt)
    assert math.hypot(e.u - 380.0, e.v - 130.0) < 1e-6
    assert math.hypot(e.du - 40.0, e.dv + 10.0) < 1e-6
    assert e.radius_px == 8.0 and e.streak_px == 30.0
    assert e.reach_px > 2 * 8.0


def test_the_drawn_streak_is_in_pieces():
    # a check that the drawing is what the tests above assume: the thresholded difference is in pieces
    base, frame = _frames()
    small = cv2.resize(frame, (W // 2, H // 2), interpolation=cv2.INTER_AREA)
    small_bg = cv2.resize(base, (W // 2, H // 2), interpolation=cv2.INTER_AREA)
    pieces, _ = cv2.findContours(cv2.compare(cv2.absdiff(small, small_bg), 10, cv2.CMP_GT), cv2.RETR_EXTERNAL,
                                 cv2.CHAIN_APPROX_SIMPLE)
    assert len(pieces) >= 4  # the streak's pieces and the round ball
