"""The silhouette edge fit (vision/edge_fit.py) beside a dark shadow touching the ball.

Truth drawn here, independently of the fit's erf-edge model: a bright disc of known sub-pixel centre and an
elongated dark ellipse under it on the side of a chosen direction (OpenCV's anti-aliased drawing with 4
fraction bits, then a 0.6 px Gaussian blur for the lens and 2 grey levels of noise), so that the ball's own
shadow (or a contact patch) joins its silhouette on one side. Common practice for checking a sub-pixel
locator: synthetic images of a known shape with a known centre, with and without the nuisance.
"""
import math

import cv2
import numpy as np
import pytest

from balltraj.vision.edge_fit import fit_edge

CENTRE = np.array([28.3, 27.6])
SHIFT = 16  # cv2's 4 fraction bits


def _scene(radius, shadow_dir, with_shadow=True, seed=0, size=64, ball=200.0, ground=110.0, shadow=55.0):
    """(image, background without ball or shadow) of a disc and, on the side of ``shadow_dir``, a dark
    ellipse 3.2 x 1.2 radii across, its centre 1.15 radii from the ball's, drawn under the ball."""
    img = np.full((size, size), ground, np.float32)
    bg = img.copy()
    if with_shadow:
        d = np.asarray(shadow_dir, float) / np.hypot(*shadow_dir)
        c = CENTRE + 1.15 * radius * d
        angle = math.degrees(math.atan2(d[1], d[0])) + 90.0  # long axis across the direction
        cv2.ellipse(img, (round(c[0] * SHIFT), round(c[1] * SHIFT)), (round(1.6 * radius * SHIFT),
                    round(0.6 * radius * SHIFT)), angle, 0, 360, shadow, -1, cv2.LINE_AA, 4)
    cv2.circle(img, (round(CENTRE[0] * SHIFT), round(CENTRE[1] * SHIFT)), round(radius * SHIFT), ball, -1,
               cv2.LINE_AA, 4)
    img = cv2.GaussianBlur(img, (0, 0), 0.6)
    rng = np.random.default_rng(seed)
    return img + rng.normal(0, 2.0, img.shape), cv2.GaussianBlur(bg, (0, 0), 0.6)


@pytest.mark.parametrize("shadow_dir", [(0.0, 1.0), (-0.6, 1.0), (0.5, 1.0)])
def test_centre_is_kept_beside_a_dark_shadow(shadow_dir):
    # a 9 px ball with its shadow below-left, below, below-right; the start 0.8 px off each way, the radius
    # 10 % small (as the detector gives it). The parent commit's fit (start radius from the whole area that
    # differs from the background, shadow included) grew over the shadow: 2.7-3.5 px off and refused
    # ("hardly differs"); here within 0.35 px, and the shadow's side is what was left out.
    img, bg = _scene(9.0, shadow_dir)
    fit = fit_edge(img, bg, CENTRE + [0.8, -0.8], 0.9 * 9.0)
    assert fit.ok, fit.message
    assert np.hypot(*(fit.centre_px - CENTRE)) < 0.35
    assert abs(fit.radius_px - 9.0) < 0.6  # (cv2's anti-aliased edge sits up to half a pixel out)
    assert fit.left_out > 0.05


def test_beside_a_shadow_anywhere_the_centre_is_kept_or_the_fit_refused():
    # eight shadow directions, two starts (on the centre with the true radius; 0.8 px off with it 10 % small):
    # no accepted fit lies more than 0.35 px off (a fit grown over ball and shadow is refused, and the frame
    # keeps the detector's centre), most are accepted, and what was left out lies on the shadow's side
    # (an invariant: no direction is assumed)
    import balltraj.vision.edge_fit as ef

    accepted = 0
    for k in range(8):
        a = 2 * math.pi * k / 8 + 0.3
        d = np.array([math.cos(a), math.sin(a)])
        img, bg = _scene(9.0, d)
        for start, r_start in ((CENTRE, 9.0), (CENTRE + [0.8, -0.8], 8.1)):
            seen = []
            original = ef._foreign_arcs

            def spy(X, *args, **kw):
                drop = original(X, *args, **kw)
                if drop is not None:
                    seen.append(X[drop].mean(0))
                return drop

            ef._foreign_arcs = spy
            try:
                fit = fit_edge(img, bg, start, r_start)
            finally:
                ef._foreign_arcs = original
            if not fit.ok:
                continue
            accepted += 1
            assert np.hypot(*(fit.centre_px - CENTRE)) < 0.35, (d, start)
            assert seen, f"nothing left out for a shadow toward {d}"
            v = seen[0] - CENTRE
            assert v @ d / np.hypot(*v) > math.cos(math.radians(30))
    assert accepted >= 9  # of 16 (measured: 11)


@pytest.mark.parametrize("radius", [5.0, 9.0])
def test_no_shadow_nothing_is_left_out(radius):
    # the same disc alone: no arc is foreign, and the centre is the drawn one
    img, bg = _scene(radius, (0.0, 1.0), with_shadow=False)
    for background in (bg, None):
        fit = fit_edge(img, background, CENTRE + [0.8, -0.8], 0.9 * radius)
        assert fit.ok and fit.left_out == 0.0
        assert np.hypot(*(fit.centre_px - CENTRE)) < 0.2
