"""One camera, no anchor: do the stated sigmas of launch speed and launch depth cover the errors?

Truth: scipy solve_ivp (DOP853) of m dv/dt = m g - 1/2 rho A C_D |v| v + 1/2 rho A C_L |v|^2 (w x v)/|w x v|
with C_D 0.22 and C_L = S, written here (the fit's model uses the same laws). The apparent radii carry a
per-flight scale error drawn from N(0, SCALE_SIGMA) with SCALE_SIGMA the root-mean-square scale error the
edge fit made on independent renders (tests/benchmarks/refined_radius_errors.json), and 0.3 px per frame.
"""

import json
import math
from pathlib import Path

import numpy as np
import pytest
from scipy.integrate import solve_ivp

from balltraj.camera.model import look_at_camera
from balltraj.fitting.flight_fit import FitOptions
from balltraj.fitting.image_fit import fit_flight_image
from balltraj.physics.air import air_conditions
from balltraj.physics.balls import get_ball
from balltraj.physics.flight import FlightModel

REFINED = Path(__file__).resolve().parents[1] / "benchmarks" / "refined_radius_errors.json"
SIZE = (960, 540)
CAMS = {"side": look_at_camera("side", [9.0, -16.0, 1.5], [9.5, 0.0, 1.8], 700, SIZE),
        "behind": look_at_camera("behind", [-7.0, 0.8, 1.7], [15.0, 0.0, 0.8], 800, SIZE)}


def _truth(ball, rho, s0, spin, cd=0.22):
    R = 0.5 * ball.diameter_m
    K = rho * math.pi * R * R / (2 * ball.mass_kg)
    g = np.array([0.0, 0.0, -9.80665])

    def rhs(_, y):
        v = y[3:]
        sp = np.linalg.norm(v)
        vh = v / sp
        wp = spin - (spin @ vh) * vh
        wn = np.linalg.norm(wp)
        a = g - K * cd * sp * v
        if wn > 0:
            c = np.cross(wp / wn, vh)
            a = a + K * (R * wn / sp) * sp * sp * c / max(np.linalg.norm(c), 1e-12)
        return np.concatenate([v, a])

    return solve_ivp(rhs, (0.0, 1.2), s0, method="DOP853", rtol=1e-10, atol=1e-12, dense_output=True).sol


def _z_values(n_kicks=10, seed=11):
    ball, air = get_ball("soccer"), air_conditions()
    model = FlightModel.for_ball(ball, air, drag_coefficient=0.22)
    scale_sigma = _measured_scale_sigma()
    rng = np.random.default_rng(seed)
    z = []
    for _ in range(n_kicks):
        speed = rng.uniform(24, 31)
        el, az = math.radians(rng.uniform(10, 19)), math.radians(rng.uniform(-6, 6))
        v = speed * np.array([math.cos(el) * math.cos(az), math.cos(el) * math.sin(az), math.sin(el)])
        axis = np.array([0.0, 0.0, rng.choice([-1.0, 1.0])]) + rng.normal(0, 0.35, 3)
        axis -= (axis @ v) * v / speed ** 2
        spin = rng.uniform(300, 700) * 2 * math.pi / 60 * axis / np.linalg.norm(axis)
        sol = _truth(ball, air.density, np.concatenate([[0.0, 0.0, 0.11], v]), spin)
        for cam in CAMS.values():
            t = np.arange(2 / 240, 1.2, 1 / 240)
            X = sol(t)[:3].T
            keep = X[:, 0] <= 21.0
            t, X = t[keep], X[keep]
            uv = cam.project(X)
            w, h = cam.image_size
            ok = np.all(np.isfinite(uv), axis=1) & (uv[:, 0] > 2) & (uv[:, 0] < w - 2) & (uv[:, 1] > 2) & (uv[:, 1] < h - 2)
            t, X, uv = t[ok], X[ok], uv[ok] + rng.normal(0, 0.5, (ok.sum(), 2))
            r = cam.focal_px * model.radius_m / cam.depth(X) * (1 + rng.normal(0, scale_sigma)) + rng.normal(0, 0.3, len(t))
            fit = fit_flight_image(model, t, [cam.name] * len(t), uv, [cam], radius_px=r, options=FitOptions())
            st = sol(fit.t0)
            vt, vf = st[3:], np.asarray(fit.state0[3:])
            gs = vf / np.linalg.norm(vf)
            s_speed = math.sqrt(gs @ np.asarray(fit.covariance)[3:6, 3:6] @ gs)
            depth_err = float(cam.depth(np.asarray(fit.state0[:3])[None])[0] - cam.depth(st[None, :3])[0])
            z += [(np.linalg.norm(vf) - np.linalg.norm(vt)) / s_speed, depth_err / fit.launch_depth_sigma_m[cam.name]]
    return np.abs(np.array(z))


def _measured_scale_sigma() -> float:
    scales = np.array([c["scale"] for c in json.loads(REFINED.read_text())["clips"] if "scale" in c])
    return float(np.sqrt(np.mean(scales ** 2)))


@pytest.mark.xfail(strict=True, reason="known defect (issue 15): with the 6 % radius-scale prior the no-anchor sigmas "
                   "are too wide when the radius errors are as measured (90 % of 40 within one sigma); narrowing the "
                   "prior to the measured 2.6 % gave 72 % here but made the scene_realism rows worse (docs/validation.md)")
def test_no_anchor_sigmas_cover_the_errors_of_a_measured_radius_scale_spread():
    # Source: the one-sigma interval of a normal error holds 68 % (common practice). 40 values from 20 fits
    # (the speed and depth errors of one fit are nearly one error, so about 20 independent ones): a binomial
    # 68 % share of 20 lies within 50-85 % with 94 % probability.
    z = _z_values()
    share = float(np.mean(z <= 1.0))
    assert 0.50 <= share <= 0.85, (share, np.round(z, 2))
