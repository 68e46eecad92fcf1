"""The image fit's noise levels: pixel noise estimated from 2D residual norms (one camera, apparent radius
observed). Kept with the single-camera tests because the depth sigma of an unanchored fit rests on them."""
import math

import numpy as np
import pytest

from balltraj.camera.model import look_at_camera
from balltraj.fitting.image_fit import fit_flight_image
from balltraj.physics.air import air_conditions
from balltraj.physics.balls import get_ball
from balltraj.physics.flight import FlightModel, FlightParameters, integrate


@pytest.mark.parametrize("noise_px", [0.5, 1.0])
def test_pixel_noise_is_recovered_from_two_dimensional_residuals(noise_px):
    # Source: invariant - for Gaussian pixel noise of sigma s per axis the 2D residual norm is Rayleigh with
    # median s sqrt(2 ln 2) (from memory; standard result), so the fit's estimate must come back near s
    # (not 0.77 s, as a 3D-norm median would give); 150 points: the estimate's own scatter is under 10 %
    model = FlightModel.for_ball(get_ball("soccer"), air_conditions())
    state = np.array([0.0, 0.0, 0.11, 26.0, 0.5, 6.5])
    spin = np.array([0.0, 10.0, 45.0])
    t = 0.01 + np.arange(150) / 240.0
    tr = integrate(model, 0.0, state[None], FlightParameters.make(1, spin=spin), (0.0, t[-1] + 0.01), max_step=0.002)
    X = tr.positions_rows(t[None])[0]
    cam = look_at_camera("side", [9.0, -16.0, 1.5], [9.5, 0.0, 1.8], 700, (960, 540))
    rng = np.random.default_rng(11)
    uv = cam.project(X) + rng.normal(0, noise_px, (len(t), 2))
    r = cam.focal_px * model.radius_m / cam.depth(X) + rng.normal(0, 0.3, len(t))
    fit = fit_flight_image(model, t, ["side"] * len(t), uv, [cam], radius_px=r)
    assert float(np.median(fit.sigma)) == pytest.approx(noise_px, rel=0.15)
    assert math.isfinite(fit.launch_depth_sigma_m["side"])
