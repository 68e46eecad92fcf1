"""Ground contacts as depth anchors: ray-plane geometry, its uncertainty, the radius bias and the anchor choice."""
import math

import numpy as np
import pytest

from balltraj.camera.anchors import (Anchor, apply_anchor, bounce_pixel, choose_anchor, ground_point,
                                     radius_correction)
from balltraj.camera.model import Camera, look_at_camera
from balltraj.errors import InputError


def test_round_trip_through_distortion(rng):
    # Source: invariant - project a known point on the plane z = R, intersect its ray with the plane again
    cam = look_at_camera("c", [-3.0, 1.5, 2.5], [15.0, 0.0, 0.0], 1400, (1280, 720), dist=(-0.12, 0.03, 1e-3, -5e-4, 0))
    for _ in range(20):
        X = np.array([rng.uniform(1, 20), rng.uniform(-3, 3), 0.11])
        uv = cam.project(X[None])[0]
        gp = ground_point(cam, uv, 0.11)
        assert np.linalg.norm(gp.position_m - X) < 1e-6


def test_pinhole_looking_down_closed_form():
    # Source: closed form - a pinhole at height H looking straight down sees (u - cx, v - cy) at ground
    # offset (H - z) (u - cx) / f; its one-sigma per axis is (H - z) sigma_px / f; the plane height error
    # moves the point only along the (straight-down) optical axis
    H, f, z = 10.0, 1000.0, 0.5
    R = np.array([[1.0, 0, 0], [0, -1.0, 0], [0, 0, -1.0]])  # camera x = world x, camera y = -world y, z down
    from balltraj.camera.model import rotation_vector
    cam = Camera("down", (1000, 800), [[f, 0, 500], [0, f, 400], [0, 0, 1]], np.zeros(5), rotation_vector(R),
                 -R @ np.array([0.0, 0.0, H]))
    gp = ground_point(cam, (700.0, 300.0), z, pixel_sigma_px=0.5, plane_sigma_m=0.02)
    assert gp.position_m == pytest.approx([(H - z) * 200 / f, (H - z) * 100 / f, z], abs=1e-9)
    s = (H - z) * 0.5 / f
    dXdz = (gp.position_m - cam.centre) / (gp.position_m - cam.centre)[2]
    expected = s**2 * np.diag([1.0, 1.0, 0.0]) + 0.02**2 * np.outer(dXdz, dXdz)
    assert np.allclose(gp.covariance_m2, expected, atol=1e-9)


def test_uncertainty_matches_monte_carlo(rng):
    # Source: invariant - the delta-method covariance agrees with the scatter of intersections of noisy pixels
    cam = look_at_camera("c", [5.0, -10.0, 1.6], [5.0, 0.0, 0.5], 1200, (1280, 720), dist=(-0.08, 0.01, 0, 0, 0))
    X = np.array([2.0, 0.4, 0.11])
    uv = cam.project(X[None])[0]
    gp = ground_point(cam, uv, 0.11, pixel_sigma_px=0.4)
    pts = np.array([ground_point(cam, uv + rng.normal(0, 0.4, 2), 0.11).position_m for _ in range(2000)])
    emp = np.cov(pts.T)
    assert np.sqrt(np.diag(emp))[:2] == pytest.approx(np.sqrt(np.diag(gp.covariance_m2))[:2], rel=0.08)


def test_ray_above_horizon_and_grazing_are_refused():
    cam = look_at_camera("c", [0.0, 0.0, 1.5], [20.0, 0.0, 3.0], 1000, (1280, 720))
    with pytest.raises(InputError, match="does not meet"):
        ground_point(cam, (640, 100), 0.11)  # above the horizon
    low = look_at_camera("c", [0.0, 0.0, 0.13], [30.0, 0.0, 0.13], 1000, (1280, 720))
    with pytest.raises(InputError, match="deg"):
        ground_point(low, low.project(np.array([[20.0, 0.0, 0.11]]))[0], 0.11)


def test_bounce_pixel_from_two_parabolas():
    # Source: invariant - two image parabolas that meet at a known point and time give back that point
    tc, pc = 0.5, np.array([400.0, 500.0])
    tb = tc - np.arange(1, 9)[::-1] / 240
    ta = tc + np.arange(1, 9) / 240
    ub = pc + np.outer(tb - tc, [300.0, 800.0]) + np.outer((tb - tc) ** 2, [0, 2000.0])
    ua = pc + np.outer(ta - tc, [280.0, -600.0]) + np.outer((ta - tc) ** 2, [0, 2000.0])
    uv, t, gap = bounce_pixel(tb, ub, ta, ua)
    assert np.linalg.norm(uv - pc) < 0.05 and abs(t - tc) < 1e-3 and gap < 0.1


def test_radius_bias_recovered_and_removed():
    # Source: invariant - radii measured with a constant +0.7 px edge bias: the resting ball at a known
    # distance gives the bias back, and the correction returns f R / depth for the flight's radii
    cam = look_at_camera("c", [-2.0, 0.5, 2.0], [20.0, 0.0, 0.5], 1400, (1280, 720))
    R = 0.11
    X = np.array([0.0, 0.0, R])
    gp = ground_point(cam, cam.project(X[None])[0], R, pixel_sigma_px=0.3)
    true_r = cam.focal_px * R / cam.depth(X[None])[0]
    rng = np.random.default_rng(4)
    corr = radius_correction(cam, gp, R, true_r + 0.7 + rng.normal(0, 0.2, 40))
    assert corr.bias_px == pytest.approx(0.7, abs=3 * corr.bias_sigma_px + 0.02)
    assert corr.projected_px == pytest.approx(true_r, rel=1e-9)
    flight = np.array([[5.0, 0.2, 1.5], [12.0, 0.3, 2.0], [20.0, 0.1, 1.0]])
    r_true = cam.focal_px * R / cam.depth(flight)
    assert np.abs(corr.apply(r_true + 0.7) - r_true).max() < 3 * corr.bias_sigma_px + 0.02


def test_anchor_choice_order_and_settings():
    # Source: invariant - a ground contact wins over a hint, a hint over a zone; apply_anchor sets the fit settings
    from dataclasses import dataclass

    cam = look_at_camera("c", [-2.0, 0.5, 2.0], [20.0, 0.0, 0.5], 1400, (1280, 720))
    gp = ground_point(cam, cam.project(np.array([[0.0, 0.0, 0.11]]))[0], 0.11, pixel_sigma_px=0.3)
    a = choose_anchor(resting=gp, hint=((5.0, 0.0, 0.11), 0.3), zone=(np.zeros(3), 1.0, "z"))
    assert a.name == "ground contact" and "was not used" in a.note
    assert np.allclose(a.start_near_m, gp.position_m) and a.start_sigma_m >= 0.02
    assert choose_anchor(hint=((0.0, 0.0, 1.8), 0.3), zone=(np.zeros(3), 1.0, "z")).name == "start hint"
    assert choose_anchor(zone=(np.zeros(3), 1.0, "z")).name == "template zone"
    assert choose_anchor(radii_observed=True).name == "apparent size"
    none = choose_anchor()
    assert none.name == "none" and none.start_near_m is None

    @dataclass(frozen=True)
    class Settings:
        start_near_m: tuple | None = None
        start_sigma_m: float = 0.3

    s = apply_anchor(Settings(), a)
    assert s.start_near_m == a.start_near_m and s.start_sigma_m == a.start_sigma_m
    assert apply_anchor(Settings(), none) == Settings()
    assert isinstance(a, Anchor) and a.as_tuple()[2] == "ground contact"
    assert math.isfinite(gp.horizontal_sigma_m)


def test_bounce_contact_placed_on_the_ground():
    # Source: invariant - a ball falling onto the plane z = R at a known point and rebounding, seen by a
    # camera behind and above; the contact pixel from the two tracks meets the plane near that point
    cam = look_at_camera("c", [-6.0, 1.0, 4.0], [14.0, 0.0, 0.0], 1200, (1280, 720))
    R, contact, tc = 0.033, np.array([12.0, 0.5, 0.033]), 0.4
    g = np.array([0, 0, -9.81])
    vin, vout = np.array([20.0, 0.0, -6.0]), np.array([15.0, 0.0, 4.0])
    tb = tc - np.arange(1, 10)[::-1] / 240
    ta = tc + np.arange(1, 10) / 240
    Xb = contact + np.outer(tb - tc, vin) + 0.5 * np.outer((tb - tc) ** 2, g)
    Xa = contact + np.outer(ta - tc, vout) + 0.5 * np.outer((ta - tc) ** 2, g)
    uv, t, gap = bounce_pixel(tb, cam.project(Xb), ta, cam.project(Xa))
    gp = ground_point(cam, uv, R, pixel_sigma_px=max(0.5, gap))
    assert abs(t - tc) < 2e-3
    assert np.linalg.norm(gp.position_m - contact) < 3 * gp.sigma_m * math.sqrt(3) + 0.01
