"""The matched line filter for long streaks (balltraj/vision/streak.py), on streaks drawn here."""
import math

import cv2
import numpy as np
import pytest

from balltraj.vision.detect import Candidate, Detector
from balltraj.vision.streak import fit_streak, inside_streak
from balltraj.vision.trackpoints import smooth_head
from balltraj.vision.trackpoints import _Track


def _streak(shape, cu, cv, r, length, angle, contrast, shaded=0.0, n=200):
    """A disc of radius r moving at a uniform velocity over the exposure, centre from
    (cu, cv) - L/2 e to (cu, cv) + L/2 e: the mean of n evenly spaced positions, each supersampled
    4 x 4. ``shaded``: the disc's lower half (image +v side) reaches only 1 - shaded of the contrast
    (lit from above)."""
    h, w = shape
    ss = 4
    yy, xx = np.mgrid[0:h * ss, 0:w * ss]
    xx = (xx + 0.5) / ss - 0.5
    yy = (yy + 0.5) / ss - 0.5
    e = (math.cos(angle), math.sin(angle))
    acc = np.zeros((h * ss, w * ss))
    for s in (np.arange(n) + 0.5) / n - 0.5:
        px, py = cu + s * length * e[0], cv + s * length * e[1]
        dy = yy - py
        inside = (xx - px) ** 2 + dy**2 <= r * r
        acc += inside * np.where(dy > 0, 1.0 - shaded * np.clip(dy / r, 0, 1) * 2, 1.0).clip(0.05, 1)
    acc /= n
    return contrast * acc.reshape(h, ss, w, ss).mean(axis=(1, 3))


@pytest.mark.parametrize("angle_deg", [0.0, -12.0, 35.0])
def test_a_shaded_streak_is_centred_at_its_midpoint(angle_deg):
    # Source: a uniform-velocity disc smeared over the exposure has its centroid at the midpoint
    # (common practice); its smear length is the distance moved, its radius the disc's
    rng = np.random.default_rng(1)
    cu, cv, r, length = 80.3, 60.7, 9.0, 40.0
    ang = math.radians(angle_deg)
    img = _streak((120, 160), cu, cv, r, length, ang, 120.0, shaded=0.45) + rng.normal(0, 3.0, (120, 160))
    # a seed as the thresholded core gives it: off centre towards the lit side, too short and too thin
    fit = fit_streak(img.astype(np.float32), cu + 3.0, cv - 4.0, ang, 6.0, 28.0)
    assert fit is not None
    # within 0.15 r (measured: 0.7-0.75 px when the shading is across the motion, 1.1 px when tilted 35 deg
    # to it -- then the lit side is also ahead or behind along the motion, which the filter cannot tell
    # from the motion)
    assert math.hypot(fit.u - cu, fit.v - cv) < 0.15 * r
    assert fit.length_px == pytest.approx(length, rel=0.1)
    assert fit.radius_px == pytest.approx(r, rel=0.15)
    # the centroid of the brighter half of the weights (what a plain moment measurement gives) is
    # pulled to the lit side: the filter is needed (an invariant of the drawing, not a tolerance)
    wgt = np.clip(img - 0.5 * img.max(), 0, None)
    m = cv2.moments(wgt.astype(np.float32))
    assert m["m01"] / m["m00"] < cv - 1.0
    assert inside_streak(fit.u, fit.v, fit.angle_rad, fit.radius_px, fit.length_px, cu + 18.0 * math.cos(ang),
                         cv + 18.0 * math.sin(ang))
    assert not inside_streak(fit.u, fit.v, fit.angle_rad, fit.radius_px, fit.length_px, cu - 20.0 * math.sin(ang),
                             cv + 20.0 * math.cos(ang))


def test_a_dark_streak_on_a_bright_floor_is_measured_alike():
    # invariant: the filter works on the difference's magnitude along the seed's polarity
    cu, cv, r, length = 70.0, 50.0, 7.0, 30.0
    img = -_streak((100, 140), cu, cv, r, length, 0.2, 80.0)
    fit = fit_streak(img.astype(np.float32), cu - 4.0, cv + 2.0, 0.2, 5.0, 20.0)
    assert fit is not None and math.hypot(fit.u - cu, fit.v - cv) < 0.6
    assert fit.length_px == pytest.approx(length, rel=0.1)


def test_a_streak_split_by_noise_into_fragments_is_one_candidate_at_its_midpoint():
    # Source: a uniform-velocity disc smeared over the exposure has its centroid at the midpoint
    # (common practice). Gaps across the streak (as noise and a threshold cut a dim one) split its
    # thresholded difference into pieces; the detector gives one candidate for them
    w, h = 320, 240
    rng = np.random.default_rng(4)
    bg = np.full((h, w), 40.0)
    cu, cv, r, length, ang = 161.0, 121.0, 9.0, 60.0, math.radians(-8.0)
    s = _streak((h, w), cu, cv, r, length, ang, 60.0, shaded=0.4)
    xx = np.arange(w)[None, :]
    s[:, ((xx[0] >= 145) & (xx[0] < 149)) | ((xx[0] >= 172) & (xx[0] < 176))] *= 0.1  # two gaps, 4 px wide
    frame = np.clip(bg + s + rng.normal(0, 1.0, (h, w)), 0, 255).astype(np.uint8)
    base = np.clip(bg + rng.normal(0, 1.0, (h, w)), 0, 255).astype(np.uint8)
    small = cv2.resize(frame, (w // 2, h // 2), interpolation=cv2.INTER_AREA)
    small_bg = cv2.resize(base, (w // 2, h // 2), interpolation=cv2.INTER_AREA)
    pieces, _ = cv2.findContours(cv2.compare(cv2.absdiff(small, small_bg), 10, cv2.CMP_GT), cv2.RETR_EXTERNAL,
                                 cv2.CHAIN_APPROX_SIMPLE)
    assert len(pieces) >= 3  # the thresholded difference is in pieces (the detector's first threshold is 10)
    det = Detector(w, h, streaks="all")
    det.process(base)
    cands = det.process(frame)
    near = [c for c in cands if math.hypot(c.u - cu, c.v - cv) < 0.5 * length + 2 * r]
    assert len(near) == 1, [(round(c.u - cu, 1), round(c.v - cv, 1), round(c.streak_px, 1)) for c in near]
    c = near[0]
    assert math.hypot(c.u - cu, c.v - cv) < 1.5
    assert c.streak_px == pytest.approx(length, rel=0.15)
    assert c.radius_px == pytest.approx(r, rel=0.2)


def test_the_smooth_beginning_of_a_track_that_ran_on_onto_a_person():
    # invariant: points on a parabola (a ball's image path) stay smooth; the jitter of a person's
    # shirt after it is not, and the beginning alone is what remains
    pts = [(i, i / 25, Candidate(20.0 + 50 * i, 400.0 - 30 * i + 1.5 * i * i, 10.0, 30.0, 0.0, 900.0, 150.0))
           for i in range(12)]
    rng = np.random.default_rng(2)
    pts += [(12 + i, (12 + i) / 25, Candidate(600.0 + rng.normal(0, 15), 300.0 + rng.normal(0, 15), 10.0, 5.0, 0.0,
                                              300.0, 60.0)) for i in range(8)]
    tr = _Track.of(pts, confirmed=True)
    head = smooth_head(tr, 6)
    assert head is not None and len(head.points) == 12
    assert smooth_head(_Track.of(pts[:12] + pts[12:] * 2), 6) is None  # over half of it off the curve: not kept
