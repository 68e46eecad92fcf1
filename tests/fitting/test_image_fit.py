import math
import json
import subprocess
import sys

import numpy as np
import pytest
from typer.testing import CliRunner

from balltraj.camera.model import look_at_camera
from balltraj.cli import app
from balltraj.record.build import fit_record
from balltraj.fitting.flight_fit import FitOptions
from balltraj.fitting.image_fit import fit_flight_image
from balltraj.physics.reference import plane_deflection

from synth import make_track

runner = CliRunner()
SIDE = look_at_camera("side", [9, -12, 1.5], [9, 0, 1.4], 1400, (1280, 720), dist=(-0.08, 0.01, 0, 0, 0))
BEHIND = look_at_camera("behind", [-3, 0.8, 2.6], [18, 0, 1.0], 1400, (1280, 720))


def observe(cams, offsets, noise=0.5, seed=0, radius=True):
    t, xyz, truth = make_track("baseball", noise_m=0.0, seed=seed)
    rng = np.random.default_rng(seed)
    T, C, UV, R = [], [], [], []
    for cam, off in zip(cams, offsets):
        uv = cam.project(xyz) + rng.normal(0, noise, (len(t), 2))
        T.append(t - off)  # each phone's own clock; rig time = own time + offset
        C += [cam.name] * len(t)
        UV.append(uv)
        R.append(cam.focal_px * truth["model"].radius_m / cam.depth(xyz) + rng.normal(0, 0.3, len(t)))
    return np.concatenate(T), C, np.concatenate(UV), (np.concatenate(R) if radius else None), truth


@pytest.mark.parametrize("cams,offsets,tol", [([SIDE], [0.0], 0.03), ([SIDE, BEHIND], [0.0, 0.0031], 0.01)])
def test_image_space_round_trip(cams, offsets, tol):
    # targets at 240 fps and 0.5 px: side view deflection < 3 cm, two cameras < 1 cm
    t, c, uv, r, truth = observe(cams, offsets, seed=2)
    fit = fit_flight_image(truth["model"], t, c, uv, cams, radius_px=r, options=FitOptions(start_near=(0, 0, 1.8)))
    assert fit.success, fit.message
    rec, _ = fit_record(fit, truth["ball"], truth["air"], truth["model"], target_x=17.0)
    d = plane_deflection(truth["model"], 0.0, truth["state0"], truth["params"], 17.0, ground_z=None)
    assert abs(rec["deflection"]["horizontal_m"] - d.horizontal_m) < tol
    assert abs(rec["deflection"]["vertical_m"] - d.vertical_m) < tol
    assert rec["fit"]["residual_unit"] == "px" and rec["fit"]["rms_residual"] < 1.0
    if len(cams) == 2:
        assert fit.extra["time_offsets_s"]["behind"] == pytest.approx(offsets[1], abs=3e-4)
    else:
        assert any("one camera" in w for w in rec["warnings"])


def _write_obs(path, t, c, uv, r):
    with open(path, "w") as f:
        f.write("t,camera,u,v,radius_px\n")
        for a, b, (u, v), rr in zip(t, c, uv, r):
            f.write(f"{a:.6f},{b},{u:.3f},{v:.3f},{rr:.3f}\n")


def test_cli_fit_with_rig_and_triangulate(tmp_path):
    t, c, uv, r, truth = observe([SIDE, BEHIND], [0.0, 0.0], seed=3)
    obs = tmp_path / "obs.csv"
    _write_obs(obs, t, c, uv, r)
    rig = tmp_path / "rig.json"
    rig.write_text(json.dumps({"cameras": [SIDE.to_dict(), BEHIND.to_dict()]}))
    out = tmp_path / "f.json"
    res = runner.invoke(app, ["fit", str(obs), "--camera", str(rig), "--ball", "baseball", "--target-x", "17",
                              "-o", str(out)])
    assert res.exit_code == 0, res.output
    rec = json.loads(out.read_text())
    assert rec["launch"]["speed_mps"] == pytest.approx(np.linalg.norm(truth["state0"][3:]), rel=3e-3)
    trk = tmp_path / "track.csv"
    res = runner.invoke(app, ["triangulate", str(obs), "--camera", str(rig), "-o", str(trk)])
    assert res.exit_code == 0, res.output
    rows = [l for l in trk.read_text().splitlines() if not l.startswith("#")]
    assert rows[0] == "t,x,y,z" and len(rows) > 50
    x0 = [float(v) for v in rows[1].split(",")]
    assert np.linalg.norm(np.array(x0[1:]) - truth["state0"][:3]) < 0.05


def test_observation_naming_unknown_camera(tmp_path):
    t, c, uv, r, _ = observe([SIDE], [0.0], seed=4)
    obs = tmp_path / "obs.csv"
    _write_obs(obs, t, ["nope"] * len(t), uv, r)
    cam = tmp_path / "cam.json"
    cam.write_text(json.dumps(SIDE.to_dict()))
    p = subprocess.run([sys.executable, "-m", "balltraj", "fit", str(obs), "--camera", str(cam), "--ball", "baseball",
                        "-o", str(tmp_path / "f.json")], capture_output=True, text=True)
    assert p.returncode == 2 and "nope" in p.stderr and "side" in p.stderr


def test_observations_without_camera_file(tmp_path):
    t, c, uv, r, _ = observe([SIDE], [0.0], seed=4)
    obs = tmp_path / "obs.csv"
    _write_obs(obs, t, c, uv, r)
    p = subprocess.run([sys.executable, "-m", "balltraj", "fit", str(obs), "--ball", "baseball",
                        "-o", str(tmp_path / "f.json")], capture_output=True, text=True)
    assert p.returncode == 2 and "--camera" in p.stderr


def test_pinned_drag_model_moves_the_catalogue_law_as_the_ladder_does():
    # invariant: C_D = e^s C_D,cat(e^c Re) (Re / Re_0)^a (balltraj.physics.aero_published.drag_modified);
    # all zero gives the catalogue law back, at every Re (the soccer ball's catalogue law has a drag crisis)
    from balltraj.fitting.drag_law import pinned_drag_model
    from balltraj.physics.air import air_conditions
    from balltraj.physics.balls import get_ball
    from balltraj.physics.flight import FlightModel

    cat = FlightModel.for_ball(get_ball("soccer"), air_conditions())
    re = np.linspace(1.0e5, 5.0e5, 41)
    same = pinned_drag_model(cat, {}, 27.0)
    assert np.allclose(same.drag(re, 0.1), cat.drag(re, 0.1), rtol=1e-12)
    moved = pinned_drag_model(cat, {"log_drag_scale": 0.2, "log_re_shift": 0.15}, 27.0)
    assert np.allclose(moved.drag(re, 0.1), math.exp(0.2) * cat.drag(math.exp(0.15) * re, 0.1), rtol=1e-12)
    assert not np.allclose(moved.drag(re, 0.1), cat.drag(re, 0.1))


def test_drag_crisis_position_is_compensated_by_independent_refits():
    # Source: invariant (central difference) - the image fit held on the catalogue rung compensates the drag
    # crisis position by refits at +-1 prior sigma; fitting the same pixels afresh with the law moved to +s and
    # -s (pinned_drag_model, full fits from scratch) must give the same launch-velocity column (theta+ - theta-) / 2s
    from balltraj.fitting.drag_law import pinned_drag_model
    from balltraj.fitting.nuisance import DRAG_LAW_SIGMAS

    t, xyz, truth = make_track("soccer", noise_m=0.0, seed=2)  # the soccer ball's catalogue law has a drag crisis
    cam = look_at_camera("side", [12, -18, 1.5], [12, 0, 2.0], 1400, (1280, 720))
    rng = np.random.default_rng(2)
    uv = cam.project(xyz) + rng.normal(0, 0.5, (len(t), 2))
    r = cam.focal_px * truth["model"].radius_m / cam.depth(xyz) + rng.normal(0, 0.3, len(t))
    c = ["side"] * len(t)
    opts = FitOptions(start_near=(0, 0, 0.11), start_sigma=0.1)
    fit = fit_flight_image(truth["model"], t, c, uv, [cam], radius_px=r, options=opts)
    assert fit.success, fit.message
    nu = fit.nuisance
    assert set(DRAG_LAW_SIGMAS) <= set(nu["names"]) and nu["compensation_method"].startswith("secant")
    j, s = nu["names"].index("log_re_shift"), DRAG_LAW_SIGMAS["log_re_shift"]
    speed = float(np.linalg.norm(fit.state0[3:6]))
    v = []
    for sign in (1.0, -1.0):
        moved = fit_flight_image(pinned_drag_model(truth["model"], {"log_re_shift": sign * s}, speed), t, c, uv, [cam],
                                 radius_px=r, options=opts)
        assert moved.success, moved.message
        v.append(np.asarray(moved.state0[3:6]))
    ref = (v[0] - v[1]) / (2 * s)
    col = np.asarray(nu["compensation"])[3:6, j]
    assert np.linalg.norm(ref) > 0.05  # the crisis is within reach: moving it moves the launch velocity
    assert np.linalg.norm(col - ref) < 0.2 * np.linalg.norm(ref)
