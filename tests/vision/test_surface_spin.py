"""Surface spin: round trips on rendered clips (tests/surface_render.py, written apart from the estimator),
the cases where the spin cannot be read, the unbiased disc fit, and the fusion with the flight fit."""
import math

import numpy as np
import pytest

from surface_render import SpinScene, render_spin_clip
from balltraj.vision.surface_fusion import fuse_spin
from balltraj.vision.surface_spin import RPM_PER_RADPS, estimate_surface_spin


def _scene(**kw):
    base = dict(radius_px=12.0, image_size=(120, 60), fps=240.0, n_frames=7, exposure_s=1 / 8000, noise=2.0,
                subframes=3, supersample=2, seed=3)
    base.update(kw)
    return SpinScene(**base)


def _axis_error_deg(a, b):
    return math.degrees(math.acos(min(1.0, abs(float(a @ b)) / np.linalg.norm(a) / np.linalg.norm(b))))


def test_recovers_a_known_spin_from_a_rendered_clip():
    spin = np.array([40.0, -170.0, 70.0])  # about 1800 rpm; truth from the renderer
    frames, truth = render_spin_clip(_scene(spin=tuple(spin), n_frames=10))  # a 40 ms window
    res = estimate_surface_spin(list(frames), truth["t"])
    assert res.readable, res.reason
    # targets of issue 18 at >= 240 fps and >= 10 px radius: rate within 3 %, axis within 5 degrees
    assert abs(res.rate_rpm / (np.linalg.norm(spin) * RPM_PER_RADPS) - 1) < 0.03
    assert _axis_error_deg(res.spin_radps, spin) < 5.0
    assert 0 < res.rate_sigma_rpm < 0.1 * res.rate_rpm
    assert res.spin_radps @ spin > 0  # the sense of rotation too, not only the axis line


def test_pure_gyro_spin_is_read_and_fused():
    # the ball flies along +x of the image and spins about that direction only (a "bullet" spin)
    spin = np.array([190.0, 0.0, 0.0])
    frames, truth = render_spin_clip(_scene(spin=tuple(spin), velocity_pxps=(5000.0, 0.0), seed=5))
    res = estimate_surface_spin(list(frames), truth["t"])
    assert res.readable, res.reason
    assert abs(res.rate_rpm / (190 * RPM_PER_RADPS) - 1) < 0.03
    assert _axis_error_deg(res.spin_radps, spin) < 5.0
    # a flight along x sees no transverse spin; the fused record gets the gyro part from the surface
    fused = fuse_spin(res.spin_radps, res.covariance, [0.0, 0.0, 0.0], np.eye(3) * 25.0, [30.0, 0.0, 0.0])
    assert fused["gyro_observed"] is True
    assert fused["agreement"]["agrees"]
    assert fused["spin_efficiency"] < 0.1
    assert abs(fused["gyro_rate_rpm"]) == pytest.approx(fused["rate_rpm"], rel=0.01)


def test_textureless_ball_cannot_be_read():
    frames, truth = render_spin_clip(_scene(texture="plain", spin=(0.0, -200.0, 0.0)))
    res = estimate_surface_spin(list(frames), truth["t"])
    assert not res.readable
    assert "no surface markings" in res.reason
    assert res.spin_radps is None


def test_too_small_ball_cannot_be_read():
    frames, truth = render_spin_clip(_scene(radius_px=4.0, image_size=(60, 30)))
    res = estimate_surface_spin(list(frames), truth["t"])
    assert not res.readable
    assert "too small" in res.reason


def _moments(image, background):
    """The bright-pixel moments method: weighted centroid of (I - background) over the thresholded blob and
    the radius of a disc of the blob's area."""
    d = np.asarray(image, float) - background
    m = d > 0.25 * d.max()
    ys, xs = np.nonzero(m)
    w = d[m]
    return np.array([(xs * w).sum() / w.sum(), (ys * w).sum() / w.sum()]), math.sqrt(m.sum() / math.pi)


@pytest.mark.parametrize("light", [(-0.7, -0.4, -0.6), (0.6, 0.5, -0.62)])
def test_disc_fit_is_not_biased_by_shading_unlike_moments(light):
    r = 14.0
    sc = _scene(radius_px=r, image_size=(120, 70), n_frames=4, light=light, spin=(0.0, 50.0, 0.0), noise=1.5,
                velocity_pxps=(4000.0, 0.0), exposure_s=1 / 1000, supersample=3, subframes=4)
    frames, truth = render_spin_clip(sc)
    res = estimate_surface_spin(list(frames), truth["t"])
    assert len(res.discs) == 4
    errs = [np.linalg.norm(d.centre_px - c) for d, c in zip(res.discs, truth["centres"])]
    r_errs = [abs(d.radius_px - r) for d in res.discs]
    m_errs = [np.linalg.norm(_moments(f, sc.background)[0] - c) for f, c in zip(frames, truth["centres"])]
    # shading pulls the moments towards the lit side by pixels; the shaded-sphere fit stays within a few
    # per cent of the radius (a dark seam on the unlit limb is what is left)
    assert max(errs) < 0.05 * r
    assert max(r_errs) < 0.06 * r
    assert np.mean(m_errs) > 3 * np.mean(errs)


def _random_cov(rng, scale):
    A = rng.normal(size=(3, 3)) * scale
    return A @ A.T + np.eye(3) * scale ** 2


def test_fusion_invariants():
    rng = np.random.default_rng(7)
    for _ in range(20):
        v = rng.normal(size=3) * 20
        vhat = v / np.linalg.norm(v)
        ws = rng.normal(size=3) * 150
        Cs = _random_cov(rng, 3.0)
        wf = ws - (ws @ vhat) * vhat + rng.normal(size=3) * 0.5
        wf = wf - (wf @ vhat) * vhat
        Cf = _random_cov(rng, 4.0)
        out = fuse_spin(ws, Cs, wf, Cf, v)
        w = np.array(out["spin_vector_radps"])
        # invariants: total rate = |omega|, axis is the unit vector, rate^2 = transverse^2 + gyro^2
        assert out["rate_rpm"] == pytest.approx(np.linalg.norm(w) * RPM_PER_RADPS, rel=1e-12)
        assert np.allclose(np.array(out["axis"]) * np.linalg.norm(w), w)
        assert out["rate_rpm"] ** 2 == pytest.approx(out["transverse_rate_rpm"] ** 2 + out["gyro_rate_rpm"] ** 2,
                                                     rel=1e-9)
        assert out["agreement"]["agrees"] and out["gyro_observed"]
        # the combination is no less certain than the surface alone
        assert out["uncertainty"]["rate_rpm"] <= math.sqrt(np.trace(Cs)) * RPM_PER_RADPS
        # a flight transverse spin known far better than the surface's dominates the transverse part
        sharp = fuse_spin(ws, Cs, wf, Cf * 1e-8, v)
        ts = np.array(sharp["spin_vector_radps"])
        assert np.allclose(ts - (ts @ vhat) * vhat, wf, atol=1e-3)
        # a transverse spin far off in sigmas is a disagreement, and the surface vector stands alone
        kick = np.cross(vhat, rng.normal(size=3))
        off = fuse_spin(ws, Cs, wf + 300 * kick / np.linalg.norm(kick), Cf, v)
        assert not off["agreement"]["agrees"]
        assert np.allclose(off["spin_vector_radps"], ws)
        assert off["agreement"]["difference_sigmas"] > 3


def test_camera_model_gives_the_spin_in_the_world_frame():
    from balltraj.camera.model import look_at_camera

    # a long lens and no distortion: the camera model's ray-sphere patch matches the orthographic render
    cam = look_at_camera("side", [5.0, -30.0, 1.5], [5.0, 0.0, 1.5], 8000, (120, 60))
    spin_cam = np.array([40.0, -170.0, 70.0])
    frames, truth = render_spin_clip(_scene(spin=tuple(spin_cam), n_frames=8))
    res = estimate_surface_spin(list(frames), truth["t"], camera=cam)
    assert res.readable, res.reason
    assert res.frame == "world"
    # x_cam = R x_world, so omega_world = R^T omega_cam (the OpenCV convention of the camera file)
    truth_world = cam.R.T @ spin_cam
    assert _axis_error_deg(res.spin_radps, truth_world) < 5.0
    assert res.spin_radps @ truth_world > 0
    assert abs(np.linalg.norm(res.spin_radps) / np.linalg.norm(truth_world) - 1) < 0.03


def test_smeared_ball_is_declined_with_a_shutter_that_then_works():
    # round trip: the shutter the tool asks for, rendered, gives a readable spin
    import re

    spin = np.array([60.0, -160.0, 50.0])  # about 1700 rpm
    kw = dict(spin=tuple(spin), n_frames=9, velocity_pxps=(7000.0, 0.0), image_size=(330, 60), start_px=(30.0, 30.0))
    frames, truth = render_spin_clip(_scene(exposure_s=1 / 1000, subframes=12, **kw))  # 7 px smear, r 12 px
    res = estimate_surface_spin(list(frames), truth["t"])
    assert not res.readable and "smears its markings" in res.reason
    shutter = 1 / float(re.search(r"a shutter of 1/(\d+) s", res.reason).group(1))
    assert 1 / 3000 < shutter < 1 / 1000  # the smear may be 0.3 radii: 3.6 px at 7000 px/s (0.5 ms)
    frames, truth = render_spin_clip(_scene(exposure_s=shutter / 1.25, subframes=6, **kw))
    res = estimate_surface_spin(list(frames), truth["t"])
    assert res.readable, res.reason
    # Source: the renderer's spin; targets of issue 18 (3 %, 5 degrees)
    assert abs(res.rate_rpm / (np.linalg.norm(spin) * RPM_PER_RADPS) - 1) < 0.03
    assert _axis_error_deg(res.spin_radps, spin) < 5.0


def test_turn_during_a_long_shutter_alone_does_not_bias_the_spin():
    # the ball spinning in place (no movement across the image) under a 1/1000 s shutter: it turns 10 degrees
    # during each exposure, yet the surface is read; the shutter limit comes from the ball's movement
    # across the image, not from its turn (docs/validation.md, surface spin)
    spin = np.array([60.0, -160.0, 50.0])  # about 1700 rpm
    frames, truth = render_spin_clip(_scene(spin=tuple(spin), n_frames=10, exposure_s=1 / 1000, subframes=10,
                                            velocity_pxps=(0.0, 0.0), start_px=(60.0, 30.0)))
    res = estimate_surface_spin(list(frames), truth["t"], exposure_s=1 / 1000)
    assert res.readable, res.reason
    # Source: the renderer's spin (its sub-frame renders turn the ball over the exposure); issue 18 targets
    assert abs(res.rate_rpm / (np.linalg.norm(spin) * RPM_PER_RADPS) - 1) < 0.03
    assert _axis_error_deg(res.spin_radps, spin) < 5.0


def test_a_large_turn_a_frame_is_read_on_a_large_ball():
    # 64 degrees a frame (2576 rpm at 240 fps): consecutive surfaces overlap by less than half. The turn a
    # frame does not depend on the ball's size in the image, so a 30 px ball must be read as a 14 px one
    # is (the coarse search once let a spin that kept one pair of frames barely overlapping win on that
    # pair's few points, and the tool declined "turns too far" at 30 px only)
    axis = np.array([0.61, -0.71, 0.36])
    spin = axis / np.linalg.norm(axis) * 2576 / RPM_PER_RADPS
    r, n = 30.0, 8
    v = 946.0 * r  # 35 m/s for a baseball-sized ball, in px/s
    w, h = int(2 * (2.2 * r + 4) + v * n / 240) // 2 * 2 + 2, int(5 * r) // 2 * 2 + 8
    frames, truth = render_spin_clip(_scene(radius_px=r, image_size=(w, h), n_frames=n, spin=tuple(spin),
                                            start_px=(2.2 * r + 3, h / 2), velocity_pxps=(v, 0.6 * r * 240 / n),
                                            subframes=5))
    res = estimate_surface_spin(list(frames), truth["t"], exposure_s=1 / 8000)
    assert res.readable, res.reason
    # Source: the renderer's spin; targets of issue 18 (3 %, 5 degrees)
    assert abs(res.rate_rpm / (np.linalg.norm(spin) * RPM_PER_RADPS) - 1) < 0.03
    assert _axis_error_deg(res.spin_radps, spin) < 5.0


def test_a_turn_too_far_between_frames_is_declined():
    # 107 degrees a frame (2146 rpm at 120 fps): consecutive frames hardly show the same surface
    axis = np.array([-0.35, -0.9, 0.27])
    spin = axis / np.linalg.norm(axis) * 2146 / RPM_PER_RADPS
    frames, truth = render_spin_clip(_scene(fps=120.0, n_frames=8, spin=tuple(spin)))
    res = estimate_surface_spin(list(frames), truth["t"], exposure_s=1 / 8000)
    assert not res.readable  # never a guess: a too-far turn, or no match found at all
    assert "higher frame rate" in res.reason
