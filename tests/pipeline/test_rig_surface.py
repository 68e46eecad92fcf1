"""`analyze` of a rig end to end: a far side camera at 240 frames/s and a close high-speed camera at
480 frames/s that shows the ball's surface, started unsynchronised. The pipeline pairs the flight, finds
the offset, fits through both cameras and reads the whole spin (gyro part included) from the close clip,
with sigmas and the agreement check against the flight's curve.

Truth: the flight flown by balltraj's integrator with a known spin vector (transverse part plus a gyro
part along the flight), filmed by the project's scene renderer (side clip) and by tests/surface_render.py
(close clip: its own ray-cast textured sphere, no code shared with the estimator)."""
import math

import cv2
import numpy as np
import pytest

from surface_render import SpinScene, render_spin_clip
from balltraj import pipeline
from balltraj.camera.model import look_at_camera
from balltraj.physics.air import air_conditions
from balltraj.physics.balls import get_ball
from balltraj.physics.flight import FlightModel, FlightParameters, fly, launch_state
from balltraj.units import RPM
from balltraj.vision.render import Scene, render_clip

SIDE = look_at_camera("side", [9.0, -12.0, 1.4], [9.0, 0.0, 1.3], 520, (640, 360))
START = 0.30  # release on the side camera's clock [s]
CLOSE_FPS, CLOSE_R_PX, CLOSE_D_M = 480.0, 13.0, 8.0


def _close_clip(tr, spin, ball_r, path):
    """The close camera (CLOSE_D_M above the flight, looking down on it) and its clip; returns the camera
    and the side clock's time of the close clip's first frame."""
    f = CLOSE_R_PX * CLOSE_D_M / ball_r
    w, h = 640, 96
    t_first = 2.2 / 35.0  # the ball about 2.2 m out in the first frame, where the side camera also sees it
    x_mid = float(tr.positions(np.array([t_first]))[0][0, 0]) + 0.5 * w / f * CLOSE_D_M - 3 * ball_r
    y0 = float(tr.positions(np.array([0.0]))[0][0, 1])
    # looking straight down from high above the release point (people out of the ball's path): the fall is
    # along the line of sight, which the renderer's straight image track can show
    cam = look_at_camera("close", [x_mid, y0, 1.8 + CLOSE_D_M], [x_mid, y0, 1.8], f, (w, h), up=(0, 1, 0))
    speed_px = 35.0 * f / CLOSE_D_M
    n = int((w - 5 * CLOSE_R_PX) / speed_px * CLOSE_FPS)
    tc = np.arange(n) / CLOSE_FPS
    xyz = tr.positions(t_first + tc)[0]
    uv = cam.project(xyz)
    # the renderer moves the ball on a straight line at constant speed: the chord of the true image track
    A = np.stack([np.ones(n), tc], 1)
    coef = np.linalg.lstsq(A, uv, rcond=None)[0]
    assert np.abs(uv - A @ coef).max() < 1.0  # drag and the fall along the line of sight: under a pixel
    # the renderer draws the ball orthographically (the same face wherever it is in the image); through
    # the camera model the view turns with the ray to the ball, at d x dd/dt: render the flown spin less that
    d = (xyz - cam.centre) @ cam.R.T
    d /= np.linalg.norm(d, axis=1, keepdims=True)
    ray_rate = np.mean(np.cross(d[:-1], np.diff(d, axis=0)), axis=0) * CLOSE_FPS
    spin_cam = cam.R @ np.asarray(spin) - ray_rate
    scene = SpinScene(radius_px=CLOSE_R_PX, image_size=(w, h), fps=CLOSE_FPS, n_frames=n, exposure_s=1 / 8000,
                      noise=2.0, subframes=3, supersample=2, seed=7, spin=tuple(spin_cam),
                      start_px=tuple(coef[0]), velocity_pxps=tuple(coef[1]))
    frames, _ = render_spin_clip(scene)
    out = cv2.VideoWriter(str(path), cv2.VideoWriter_fourcc(*"FFV1"), CLOSE_FPS, (w, h), isColor=False)
    assert out.isOpened()
    for fr in frames:
        out.write(fr)
    out.release()
    return cam, START + t_first


@pytest.fixture(scope="module")
def rig(tmp_path_factory):
    d = tmp_path_factory.mktemp("rig_surface")
    ball = get_ball("baseball")
    model = FlightModel.for_ball(ball, air_conditions())
    s0 = launch_state([0, 0.1, 1.8], 35.0, math.radians(-1), 0.0)
    vhat = s0[3:] / np.linalg.norm(s0[3:])
    transverse = 2000 * RPM * np.array([0.0, -1.0, 0.2]) / math.hypot(1, 0.2)
    spin = transverse + 700 * RPM * vhat  # a gyro part the flight's curve cannot show
    tr = fly(model, 0.0, s0, FlightParameters.make(1, spin=spin), stop_x=19, ground_z=None)
    t_end = float(tr.first_crossing(0, 18.0)[0][0])
    fn = lambda ts: tr.positions(np.clip(np.asarray(ts) - START, 0, t_end))[0]  # noqa: E731
    side = d / "side.mp4"
    render_clip(Scene(SIDE, duration_s=START + t_end + 0.15, flights=[(START, START + t_end, fn)],
                      ball_radius_m=model.radius_m, seed=3, walker=False), side)
    close_cam, close_t0 = _close_clip(tr, spin, model.radius_m, d / "close.avi")
    return side, d / "close.avi", close_cam, close_t0, spin, ball


def test_analyze_rig_reads_the_full_spin_from_the_fast_clip(rig):
    side, close, close_cam, close_t0, spin, ball = rig
    clips = [pipeline.ClipInput(side, [SIDE]), pipeline.ClipInput(close, [close_cam])]
    settings = pipeline.FitSettings(ball, air_conditions(), target_x_m=17.0)
    res = pipeline.analyze_rig(clips, settings)
    assert len(res.records) == 1
    rec = res.records[0]
    assert rec["fit"]["cameras"]["cameras"] == ["side", "close"]
    # the close clip's first frame is at close_t0 on the side clock: that is its offset
    assert rec["fit"]["cameras"]["time_offsets_s"]["close"] == pytest.approx(close_t0, abs=2e-3)
    S, U = rec["spin"], rec["uncertainty"]["spin"]
    assert S["gyro_observed"] is True, S.get("surface")
    assert S["surface"]["camera"] == "close"
    # Source: the spin the flight was flown with (balltraj's integrator) and the close clip rendered with
    # (tests/surface_render.py); targets of issue 18: rate within 3 %, axis within 5 degrees
    assert S["rate_rpm"] == pytest.approx(np.linalg.norm(spin) / RPM, rel=0.03)
    axis_err = math.degrees(math.acos(min(1.0, float(np.dot(S["axis"], spin / np.linalg.norm(spin))))))
    assert axis_err < 5.0
    vhat = np.array([math.cos(math.radians(-1)), 0.0, math.sin(math.radians(-1))])
    assert S["gyro_rate_rpm"] == pytest.approx(float(spin @ vhat) / RPM, abs=max(60.0, 3 * U["gyro_rate_rpm"]))
    assert U["gyro_rate_rpm"] < 0.3 * float(spin @ vhat) / RPM  # a gyro part read, not a wide sigma around nothing
    for k in ("rate_rpm", "gyro_rate_rpm", "transverse_rate_rpm", "axis_deg"):
        assert U[k] is not None and 0 < U[k] < math.inf, k
    # the agreement check: both readings are of the same truth, so they must agree and be combined
    ag = S["agreement"]
    assert ag["agrees"] is True and ag["combined"] is True, ag
    assert ag["difference_sigmas"] <= ag["threshold_sigmas"]
    assert not any("disagrees with the one the flight's curve needs" in x for x in rec["warnings"])


def test_cli_analyze_of_the_rig_reports_the_full_spin(rig, tmp_path):
    import json

    from typer.testing import CliRunner

    from balltraj.cli import app

    side, close, close_cam, _, spin, _ = rig
    rigfile = tmp_path / "rig.json"
    rigfile.write_text(json.dumps({"cameras": [SIDE.to_dict(), close_cam.to_dict()]}))
    out = tmp_path / "pitch"
    r = CliRunner().invoke(app, ["analyze", str(side), str(close), "--camera", str(rigfile), "--ball", "baseball",
                                 "--target-x", "17", "-o", str(out)])
    assert r.exit_code == 0, r.output
    rec = json.loads((out / "flight.json").read_text())
    S = rec["spin"]
    assert S["gyro_observed"] is True and S["surface"]["camera"] == "close"
    # Source: the spin the flight was flown and the close clip rendered with; issue 18 target (3 %)
    assert S["rate_rpm"] == pytest.approx(np.linalg.norm(spin) / RPM, rel=0.03)
    assert len(S["spin_vector_radps"]) == 3 and rec["uncertainty"]["spin"]["rate_rpm"] > 0
    # the report printed by analyze: the whole spin with its sigmas and the check against the flight's curve
    full = [ln for ln in r.output.splitlines() if ln.startswith("full spin")]
    check = [ln for ln in r.output.splitlines() if ln.startswith("spin check")]
    assert full and "±" in full[0] and "gyro" in full[0], r.output
    assert check and "they agree, combined" in check[0], r.output
