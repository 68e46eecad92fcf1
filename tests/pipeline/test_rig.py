"""Two unsynchronised cameras, one clip each: the pipeline pairs the flight across the clips, finds
the clock offset and fits through both cameras. Truth: the rendered scene (the flight flown by
balltraj's integrator, filmed by our renderer), the offset set by hand."""
import math

import numpy as np
import pytest

from balltraj import pipeline
from balltraj.camera.model import look_at_camera
from balltraj.camera.triangulate import estimate_time_offset
from balltraj.physics.air import air_conditions
from balltraj.physics.balls import get_ball
from balltraj.physics.flight import FlightModel, FlightParameters, fly, launch_state
from balltraj.vision.render import Scene, render_clip

SIDE = look_at_camera("side", [9.0, -12.0, 1.4], [9.0, 0.0, 1.3], 520, (640, 360))
HIGH = look_at_camera("high", [4.0, 11.0, 3.5], [10.0, 0.0, 1.2], 560, (640, 360))
OFFSET_S = 0.137  # the second phone started recording this much later


@pytest.fixture(scope="module")
def rig_clips(tmp_path_factory):
    d = tmp_path_factory.mktemp("rig")
    ball = get_ball("baseball")
    model = FlightModel.for_ball(ball, air_conditions())
    s0 = launch_state([0, 0.1, 1.8], 35.0, math.radians(-1), 0.0)
    spin = 2000 * 2 * math.pi / 60 * np.array([0.0, -1.0, 0.2]) / math.hypot(1, 0.2)
    tr = fly(model, 0.0, s0, FlightParameters.make(1, spin=spin), stop_x=19, ground_z=None)
    t_end = float(tr.first_crossing(0, 18.0)[0][0])
    start = 0.30  # on the first phone's clock
    paths = []
    for cam, shift in ((SIDE, 0.0), (HIGH, OFFSET_S)):
        t0 = start - shift
        fn = lambda ts, t0=t0: tr.positions(np.clip(np.asarray(ts) - t0, 0, t_end))[0]  # noqa: E731
        scene = Scene(cam, duration_s=start + t_end + 0.15, flights=[(t0, t0 + t_end, fn)],
                      ball_radius_m=model.radius_m, seed=3, walker=False)
        p = d / f"{cam.name}.mp4"
        render_clip(scene, p)
        paths.append(p)
    return paths, s0, start


def test_offset_from_two_tracks():
    # closed form: the same flight seen by both cameras, camera b's clock behind by 0.05 s
    t = np.arange(0, 0.4, 1 / 240)
    xyz = np.column_stack([30 * t, 0.1 + 0 * t, 1.8 - 4.9 * t**2])
    off, err = estimate_time_offset(SIDE, t, SIDE.project(xyz), HIGH, t - 0.05, HIGH.project(xyz), guess_s=0.0)
    assert off == pytest.approx(0.05, abs=2e-4) and err < 0.05


def test_rig_clips_fitted_together(rig_clips):
    paths, s0, start = rig_clips
    clips = [pipeline.ClipInput(paths[0], [SIDE]), pipeline.ClipInput(paths[1], [HIGH])]
    settings = pipeline.FitSettings(get_ball("baseball"), air_conditions(), target_x_m=17.0)
    res = pipeline.analyze_rig(clips, settings)
    assert len(res.records) == 1
    rec = res.records[0]
    assert rec["fit"]["cameras"]["cameras"] == ["side", "high"]
    assert rec["fit"]["cameras"]["time_offsets_s"]["high"] == pytest.approx(OFFSET_S, abs=2e-3)
    speed = float(np.linalg.norm(s0[3:]))
    # the launch is at the first used observation (the flight has slowed a little by then)
    assert rec["launch"]["speed_mps"] == pytest.approx(speed, rel=0.02)
    assert rec["launch"]["t_s"] >= start - 1e-3  # on the first camera's clock


def test_cli_analyze_with_a_rig_file(rig_clips, tmp_path):
    import json

    from typer.testing import CliRunner

    from balltraj.cli import app

    paths, _, _ = rig_clips
    rig = tmp_path / "rig.json"
    rig.write_text(json.dumps({"cameras": [SIDE.to_dict(), HIGH.to_dict()]}))
    out = tmp_path / "pitch"
    r = CliRunner().invoke(app, ["analyze", str(paths[0]), str(paths[1]), "--camera", str(rig), "--ball", "baseball",
                                 "--target-x", "17", "-o", str(out)])
    assert r.exit_code == 0, r.output
    rec = json.loads((out / "flight.json").read_text())
    assert rec["fit"]["cameras"]["time_offsets_s"]["high"] == pytest.approx(OFFSET_S, abs=2e-3)
    assert {"side", "high"} <= set((out / "observations.csv").read_text().split(","))
    # one clip for a two-camera rig: refused with the reason
    r = CliRunner().invoke(app, ["analyze", str(paths[0]), "--camera", str(rig), "--ball", "baseball",
                                 "-o", str(tmp_path / "x")])
    assert r.exit_code == 2 and "one clip per camera" in r.output
