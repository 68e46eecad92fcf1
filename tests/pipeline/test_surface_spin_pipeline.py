"""The surface spin in `analyze`: a rendered high-speed clip of a textured ball spinning with a gyro part
(tests/surface_render.py, written apart from the estimator) read back from a video file through the
pipeline's reader, fused with a real image-space fit of the same flight; and a normal sample clip that
keeps the transverse-only spin and says why."""
import copy
import dataclasses
import functools
import json
import math
from pathlib import Path

import cv2
import numpy as np
import pytest

from surface_render import SpinScene, render_spin_clip
from synth import make_track
from balltraj import pipeline
from balltraj.camera.model import look_at_camera
from balltraj.commands.text import flight_summary
from balltraj.fitting.flight_fit import FitOptions
from balltraj.fitting.image_fit import fit_flight_image
from balltraj.formats import read_cameras
from balltraj.physics.air import air_conditions
from balltraj.physics.balls import get_ball
from balltraj.pipeline_spin import apply_surface_spin, read_flight_surface
from balltraj.record.build import fit_record
from balltraj.report.html import headline
from balltraj.units import RPM
from balltraj.vision.surface_window import read_window
from balltraj.vision.track import TrackedFlight

ROOT = Path(__file__).resolve().parents[2]
SIDE = look_at_camera("side", [9, -12, 1.5], [9, 0, 1.4], 1400, (1280, 720))


@functools.lru_cache(maxsize=1)
def _fitted_flight_cached():
    """A real image-space fit of a simulated pitch seen from the side (its transverse spin and covariance)."""
    t, xyz, truth = make_track("baseball", noise_m=0.0, seed=4)
    rng = np.random.default_rng(4)
    uv = SIDE.project(xyz) + rng.normal(0, 0.5, (len(t), 2))
    r = SIDE.focal_px * truth["model"].radius_m / SIDE.depth(xyz) + rng.normal(0, 0.3, len(t))
    fit = fit_flight_image(truth["model"], t, ["side"] * len(t), uv, [SIDE], radius_px=r,
                           options=FitOptions(start_near=(0, 0, 1.8)))
    assert fit.success, fit.message
    rec, _ = fit_record(fit, truth["ball"], truth["air"], truth["model"], target_x=17.0)
    return rec, fit, truth


def _fitted_flight():
    rec, fit, truth = _fitted_flight_cached()
    return copy.deepcopy(rec), fit, truth


def _write_clip(path, frames, fps):
    h, w = frames.shape[1:]
    out = cv2.VideoWriter(str(path), cv2.VideoWriter_fourcc(*"FFV1"), fps, (w, h), isColor=False)
    assert out.isOpened()
    for f in frames:
        out.write(f)
    out.release()


def _close_camera(scene):
    # beside the release point, looking across the flight: camera x = world +x, y = world -z, z = world +y;
    # at 2.8 m a 73.8 mm ball is scene.radius_px in radius with this focal length
    ball_r = get_ball("baseball").radius_m
    f = scene.radius_px * 2.8 / ball_r
    return look_at_camera("close", [0.0, -2.8, 1.8], [0.0, 0.0, 1.8], f, scene.image_size)


def _flight_of(truth, radius_px, drop=None):
    n = len(truth["t"])
    k = np.array([i for i in range(n) if i != drop])
    return TrackedFlight(flight=1, t=truth["t"][k], frame=k, uv=truth["centres"][k],
                         radius_px=np.full(len(k), radius_px), streak_px=np.zeros(len(k)), quality=np.ones(len(k)),
                         bounce=False, end_reason="test")


def _render(tmp_path, world_spin, fps=240.0, radius_px=13.0):
    scene = SpinScene(radius_px=radius_px, image_size=(120, 64), fps=fps, n_frames=int(round(0.04 * fps)) + 1,
                      exposure_s=1 / 8000, noise=2.0, subframes=3, supersample=2, seed=7,
                      velocity_pxps=(40.0 / 0.04, 3.0 / 0.04), start_px=(40.0, 30.0))
    cam = _close_camera(scene)
    scene.spin = tuple(cam.R @ world_spin)  # the renderer works in the camera frame
    frames, truth = render_spin_clip(scene)
    path = tmp_path / "close.avi"
    _write_clip(path, frames, fps)
    return path, cam, truth


def test_gyro_spin_is_read_from_the_surface_and_fused_with_the_flight(tmp_path):
    rec, fit, truth = _fitted_flight()
    v0 = np.asarray(rec["launch"]["velocity_mps"])
    vhat = v0 / np.linalg.norm(v0)
    gyro = 90.0  # rad/s along the flight, which the flight's curve cannot show
    world_spin = truth["spin"] + gyro * vhat  # truth: the simulated transverse spin plus the gyro part
    path, cam, rtruth = _render(tmp_path, world_spin)
    # the tracker missed frame 4: its centre is interpolated and the frame is still read
    surface = read_flight_surface(path, _flight_of(rtruth, 13.0, drop=4), cam)
    assert surface.readable, surface.reason
    assert surface.n_frames == 10  # the whole 40 ms window (frames 0..9 at 240 fps) decoded again from the file
    apply_surface_spin(rec, fit, surface, model=truth["model"])
    S, U = rec["spin"], rec["uncertainty"]["spin"]
    # the flight-file contract keys (docs/formats.md) stay
    for k in ("rate_rpm", "transverse_rate_rpm", "transverse_axis", "axis", "gyro_observed"):
        assert k in S
    assert S["gyro_observed"] is True
    rate_true = np.linalg.norm(world_spin) / RPM  # Source: the spin the independent renderer turned the ball by
    # targets of issue 18 at >= 240 fps and >= 10 px: rate within 3 %, axis within 5 degrees
    assert S["rate_rpm"] == pytest.approx(rate_true, rel=0.03)
    axis_err = math.degrees(math.acos(min(1.0, float(np.dot(S["axis"], world_spin / np.linalg.norm(world_spin))))))
    assert axis_err < 5.0
    # the gyro part comes from the surface alone: signed, along the velocity
    assert S["gyro_rate_rpm"] == pytest.approx(gyro / RPM, abs=max(3 * U["gyro_rate_rpm"], 0.05 * gyro / RPM))
    share = np.linalg.norm(truth["spin"]) / np.linalg.norm(world_spin)
    assert S["transverse_share"] == pytest.approx(share, abs=0.05)
    # the agreement check: the surface's transverse spin and the flight's agree (both are the same truth)
    ag = S["agreement"]
    assert ag["agrees"] and ag["combined"] and ag["difference_sigmas"] <= ag["threshold_sigmas"]
    assert 0 < U["rate_rpm"] < 0.1 * S["rate_rpm"]
    assert U["axis_deg"] > 0 and U["transverse_share"] > 0
    assert S["surface"]["readable"] and S["surface"]["frame"] == "world"
    json.dumps(rec)  # the record stays JSON
    # the console summary shows the whole spin with its sigmas and the check
    text = flight_summary(rec)
    assert f"full spin       {S['rate_rpm']:.0f} ± {U['rate_rpm']:.0f} rpm" in text
    assert f"gyro {S['gyro_rate_rpm']:.0f} ± {U['gyro_rate_rpm']:.0f} rpm along the flight" in text
    assert "spin check" in text and "they agree, combined" in text
    # and the report's spin card in plain words
    card = dict((k, n) for k, _, n in headline(rec, "metric"))["Transverse spin"]
    assert f"whole spin {S['rate_rpm']:.0f} rpm" in card and "agrees with the curve" in card


def test_slow_clip_keeps_the_transverse_spin_and_says_why(tmp_path):
    rec, fit, truth = _fitted_flight()
    before = dict(rec["spin"]), dict(rec["uncertainty"]["spin"])
    path, cam, rtruth = _render(tmp_path, truth["spin"], fps=120.0)
    surface = read_flight_surface(path, _flight_of(rtruth, 13.0), cam)
    assert not surface.readable and "frames/s" in surface.reason
    apply_surface_spin(rec, fit, surface, model=truth["model"])
    assert rec["spin"]["gyro_observed"] is False
    assert rec["spin"]["surface"] == {"readable": False, "reason": surface.reason}
    # the old behaviour exactly, apart from the added reason
    assert {k: v for k, v in rec["spin"].items() if k != "surface"} == before[0]
    assert rec["uncertainty"]["spin"] == before[1]
    assert "full spin" not in flight_summary(rec) and "gyro spin not observable" in flight_summary(rec)


def test_analyze_reads_the_whole_spin_from_a_rendered_high_speed_clip(tmp_path):
    # a textured ball crossing a close camera's view at 480 frames/s, spinning with a gyro part
    fps, r, (w, h) = 480.0, 13.0, (480, 128)
    ball = get_ball("baseball")
    focal = r * 2.8 / ball.radius_m
    cam = look_at_camera("close", [0.9, -2.8, 1.8], [0.9, 0.0, 1.8], focal, (w, h))
    speed_px = 30.0 * focal / 2.8  # 30 m/s at 2.8 m
    world_spin = np.array([90.0, -200.0, 0.0])  # backspin and a gyro part along the flight (+x)
    scene = SpinScene(radius_px=r, image_size=(w, h), fps=fps, n_frames=int((w - 5 * r) / speed_px * fps),
                      exposure_s=1 / 8000, noise=2.0, subframes=3, supersample=2, seed=7,
                      velocity_pxps=(speed_px, 0.0), start_px=(2.5 * r, h / 2), spin=tuple(cam.R @ world_spin))
    frames, _ = render_spin_clip(scene)
    path = tmp_path / "close.avi"
    _write_clip(path, frames, fps)
    # the rendered ball moves in a straight line without falling: no ball can fly so (the fit says
    # "impossible"), kept here with force because the point is the surface read
    settings = pipeline.FitSettings(ball=ball, air=air_conditions(), start_near_m=(0.0, 0.0, 1.8), force=True)
    res = pipeline.analyze_clip(pipeline.ClipInput(path, [cam]), settings)
    assert len(res.records) == 1
    rec = res.records[0]
    S = rec["spin"]
    assert S["gyro_observed"] is True, S.get("surface")
    # rate and axis of the whole spin against the renderer's truth (targets of issue 18: 3 %, 5 degrees)
    # Source: tests/surface_render.py, written apart from the estimator
    assert S["rate_rpm"] == pytest.approx(np.linalg.norm(world_spin) / RPM, rel=0.03)
    axis_err = math.degrees(math.acos(min(1.0, float(np.dot(S["axis"], world_spin / np.linalg.norm(world_spin))))))
    assert axis_err < 5.0
    assert rec["uncertainty"]["spin"]["rate_rpm"] > 0
    # the agreement check is there; the renderer moves the ball on a straight line at constant speed (no
    # fall), which only a lift as large as gravity explains: far more backspin than the surface shows
    ag = S["agreement"]
    assert ag["flight_transverse_rpm"] > 1.5 * ag["surface_transverse_rpm"]
    # the flight's transverse sigma now carries the spin-drag prior (issue 13), so whether 1.5x is a
    # disagreement depends on it: the verdict must follow the distance in sigmas, and a disagreement warns
    assert ag["agrees"] == (ag["difference_sigmas"] <= ag["threshold_sigmas"])
    warned = any("disagrees with the one the flight's curve needs" in x for x in rec["warnings"])
    assert warned == (not ag["agrees"])


def test_sample_clip_is_too_far_for_the_surface():
    meta = json.loads((ROOT / "sample_clips/pitch-side.truth.json").read_text())
    settings = pipeline.FitSettings(ball=get_ball(meta["ball"]), air=air_conditions(**meta["air_kwargs"]),
                                    target_x_m=float(meta["target_x_m"]))
    res = pipeline.analyze_clip(pipeline.ClipInput(ROOT / "sample_clips/pitch-side.mp4",
                                                   read_cameras(ROOT / "calibration/pitch-side.json")), settings)
    for rec in res.records:
        assert rec["spin"]["gyro_observed"] is False
        assert rec["spin"]["axis"] is None
        assert not rec["spin"]["surface"]["readable"]
        assert "px in radius" in rec["spin"]["surface"]["reason"]  # the ball is a couple of pixels across


def test_window_reader_round_trip(tmp_path):
    # frames written losslessly (FFV1) come back bit-exact, timed by the container at k / fps, only
    # those inside the window
    rng = np.random.default_rng(1)
    frames = rng.integers(0, 255, (30, 32, 48), dtype=np.uint8)
    path = tmp_path / "w.avi"
    _write_clip(path, frames, 240.0)
    got, times, index = read_window(path, 10 / 240 - 1e-4, 17 / 240 + 1e-4)
    assert index.tolist() == list(range(10, 18))
    assert np.allclose(times, index / 240.0, atol=1e-6)
    assert all(np.array_equal(g, frames[k]) for g, k in zip(got, index))
    sub, _, idx = read_window(path, 0.0, 1.0, indices=[3, 5, 8])
    assert idx.tolist() == [3, 5, 8] and np.array_equal(sub[1], frames[5])


def test_windows_of_several_flights_are_decoded_in_one_pass(tmp_path, monkeypatch):
    # two windows (overlapping) in one pass give the same frames as two separate reads (FFV1 is lossless)
    from balltraj.vision import surface_window

    rng = np.random.default_rng(2)
    frames = rng.integers(0, 255, (40, 24, 32), dtype=np.uint8)
    path = tmp_path / "two.avi"
    _write_clip(path, frames, 240.0)
    calls = []
    real = surface_window.read_frames
    monkeypatch.setattr(surface_window, "read_frames", lambda *a, **k: calls.append(k) or real(*a, **k))
    got = surface_window.read_windows(path, [(5 / 240 - 1e-4, 12 / 240 + 1e-4), (10 / 240 - 1e-4, 30 / 240 + 1e-4)])
    assert len(calls) == 1
    assert got[0][2].tolist() == list(range(5, 13)) and got[1][2].tolist() == list(range(10, 31))
    for fr, _, idx in got:
        assert all(np.array_equal(g, frames[k]) for g, k in zip(fr, idx))


def test_flights_of_one_clip_share_one_decode(tmp_path, monkeypatch):
    # a clip with the ball read twice (the same rendered flight given as flights 1 and 2): one decode, and
    # the same spin for both; a flight filmed too slowly is declined without decoding anything
    from balltraj import pipeline_spin

    rec, fit, truth = _fitted_flight()
    path, cam, rtruth = _render(tmp_path, truth["spin"])
    calls = []
    real = pipeline_spin.read_windows
    monkeypatch.setattr(pipeline_spin, "read_windows", lambda *a, **k: calls.append(a) or real(*a, **k))
    f1 = _flight_of(rtruth, 13.0)
    f2 = dataclasses.replace(f1, flight=2)
    slow = dataclasses.replace(f1, flight=3, t=f1.t * 2)  # 120 frames/s
    reader = pipeline_spin.FlightSurfaces(path, [f1, f2, slow], cam)
    assert "frames/s" in reader.read(slow).reason and not calls
    s1, s2 = reader.read(f1), reader.read(f2)
    assert len(calls) == 1 and len(calls[0][1]) == 2  # both windows in the one pass
    assert s1.readable and np.allclose(s1.spin_radps, s2.spin_radps)


def test_rig_reads_the_spin_in_the_fastest_clip(tmp_path):
    # a rig of a slow wide camera (120 frames/s, its flight declined) and a fast close one (240 frames/s,
    # the rendered textured ball): the spin comes from the fast clip, named in the record, whatever the order
    from balltraj import pipeline_spin
    from balltraj.pipeline_rig import rig_surface_spin

    rec, fit, truth = _fitted_flight()
    v0 = np.asarray(rec["launch"]["velocity_mps"])
    world_spin = truth["spin"] + 80.0 * v0 / np.linalg.norm(v0)
    path, cam, rtruth = _render(tmp_path, world_spin)
    fast = _flight_of(rtruth, 13.0)
    slow = dataclasses.replace(fast, t=fast.t * 2)
    wide = dataclasses.replace(SIDE, name="wide")
    readers = [pipeline_spin.FlightSurfaces(tmp_path / "absent.avi", [slow], wide),
               pipeline_spin.FlightSurfaces(path, [fast], cam)]
    rig_surface_spin(rec, fit, [(0, slow), (1, fast)], readers, model=truth["model"])
    S = rec["spin"]
    assert S["gyro_observed"] is True and S["surface"]["camera"] == "close"
    # Source: the spin the independent renderer turned the ball by; targets of issue 18 (3 %)
    assert S["rate_rpm"] == pytest.approx(np.linalg.norm(world_spin) / RPM, rel=0.03)
    # only slow clips: the transverse spin stays, and the record says why for the fastest one
    rec2, fit2, _ = _fitted_flight()
    rig_surface_spin(rec2, fit2, [(0, slow)], readers[:1], model=truth["model"])
    assert rec2["spin"]["gyro_observed"] is False
    assert rec2["spin"]["surface"]["camera"] == "wide" and "frames/s" in rec2["spin"]["surface"]["reason"]

