import csv
import json
import subprocess
import sys

import numpy as np
import pytest
from typer.testing import CliRunner

from balltraj.cli import app

from synth import make_track, write_track

runner = CliRunner()


@pytest.fixture
def track(tmp_path):
    t, xyz, truth = make_track("baseball", seed=4)
    p = tmp_path / "pitch one.csv"  # a space in the name
    write_track(p, t, xyz)
    return p, truth


def test_fit_one_file(track, tmp_path):
    p, truth = track
    out = tmp_path / "flight.json"
    r = runner.invoke(app, ["fit", str(p), "--ball", "baseball", "--target-x", "17", "-o", str(out),
                            "--path-csv", str(tmp_path / "path.csv")])
    assert r.exit_code == 0, r.output
    d = json.loads(out.read_text())
    for sec in ("launch", "spin", "aero", "deflection", "uncertainty", "fit", "baseline"):
        assert sec in d
    assert d["fit"]["n_points"] == len(p.read_text().splitlines()) - 1
    assert d["launch"]["speed_mps"] == pytest.approx(np.linalg.norm(truth["state0"][3:]), rel=2e-3)
    text = (tmp_path / "path.csv").read_text().splitlines()
    rows = list(csv.reader(line for line in text if not line.startswith("#")))
    assert rows[0][:4] == ["t", "x", "y", "z"] and len(rows) > 10
    # the difference columns are the fitted minus the reference columns
    last = [float(v) for v in rows[-1]]
    assert last[8] == pytest.approx(last[2] - last[5], abs=1e-8)


def test_fit_many_files_writes_summary(tmp_path):
    paths = []
    for i, ball in enumerate(["baseball", "baseball"]):
        t, xyz, _ = make_track(ball, seed=10 + i)
        p = tmp_path / f"p{i}.csv"
        write_track(p, t, xyz)
        paths.append(str(p))
    bad = tmp_path / "bad.csv"
    bad.write_text("t,x,y,z\n")
    out = tmp_path / "out"
    r = runner.invoke(app, ["fit", *paths, str(bad), "--ball", "baseball", "-o", str(out)])
    assert r.exit_code == 0, r.output
    rows = list(csv.DictReader((out / "summary.csv").read_text().splitlines()))
    assert [row["status"] for row in rows] == ["ok", "ok", "failed"]
    assert "no data rows" in rows[2]["message"]
    assert (out / "p0.json").exists() and (out / "p1.json").exists()


def test_fit_air_from_conditions_is_written(track, tmp_path):
    p, _ = track
    out = tmp_path / "f.json"
    r = runner.invoke(app, ["fit", str(p), "--ball", "baseball", "--temperature", "30", "--pressure", "898.7629",
                            "--humidity", "50", "-o", str(out)])
    assert r.exit_code == 0, r.output
    # Source: CIPM-2007 check value, docs/references.md 5.5 (30 degC, 50 %, 89876.29 Pa -> 1.023880)
    assert json.loads(out.read_text())["air"]["density_kg_m3"] == pytest.approx(1.023880, abs=2e-6)


BAD = {
    "empty.csv": "",
    "header_only.csv": "t,x,y,z\n",
    "few.csv": "t,x,y,z\n0,0,0,1\n0.01,0.4,0,1\n0.02,0.8,0,1\n",
    "nan.csv": "t,x,y,z\n0,0,0,1\n0.01,nan,0,1\n",
    "text.csv": "t,x,y,z\n0,0,0,1\n0.01,abc,0,1\n",
    "missing.csv": "t,x,y\n0,0,0\n",
    "backwards.csv": "t,x,y,z\n0,0,0,1\n0.02,0.4,0,1\n0.01,0.8,0,1\n",
    "duplicate.csv": "t,x,y,z\n0,0,0,1\n0.01,0.4,0,1\n0.01,0.8,0,1\n",
    "absurd.csv": "t,x,y,z\n0,0,0,1\n0.01,1e7,0,1\n",
    "ragged.csv": "t,x,y,z\n0,0,0,1\n0.01,0,4,0,1\n",
}


@pytest.mark.parametrize("name", sorted(BAD))
def test_bad_tracks_exit_2_naming_the_file(tmp_path, name):
    p = tmp_path / name
    p.write_text(BAD[name])
    out = tmp_path / "f.json"
    r = subprocess.run([sys.executable, "-m", "balltraj", "fit", str(p), "--ball", "baseball", "-o", str(out)],
                       capture_output=True, text=True)
    assert r.returncode == 2, r.stderr
    line = r.stderr.strip()
    assert len(line.splitlines()) == 1 and line.startswith("error: ") and name in line, r.stderr
    assert not out.exists()
    assert not list(tmp_path.glob("*.part"))


def test_unknown_ball_and_bad_air(track, tmp_path):
    p, _ = track
    for extra, needle in ((["--ball", "quoit"], "unknown ball"), (["--ball", "baseball", "--air-density", "0"], "density"),
                          (["--ball", "baseball", "--target-x", "400"], "never reaches")):
        r = subprocess.run([sys.executable, "-m", "balltraj", "fit", str(p), *extra, "-o", str(tmp_path / "o.json")],
                           capture_output=True, text=True)
        assert r.returncode == 2 and needle in r.stderr, r.stderr


def test_output_equal_to_input_is_refused(track):
    p, _ = track
    before = p.read_text()
    r = runner.invoke(app, ["fit", str(p), "--ball", "baseball", "-o", str(p)])
    assert r.exit_code == 2
    assert p.read_text() == before


def test_a_track_in_feet_is_refused_and_can_be_forced(tmp_path):
    # a 40 m/s pitch written in feet reads as 131 m/s: beyond any baseball (docs/references.md §1 ball rules;
    # pitch speeds up to about 50 m/s (common practice))
    t, xyz, _ = make_track("baseball", seed=3)
    p = tmp_path / "feet.csv"
    write_track(p, t, xyz / 0.3048)
    r = subprocess.run([sys.executable, "-m", "balltraj", "fit", str(p), "--ball", "baseball", "-o",
                        str(tmp_path / "f.json")], capture_output=True, text=True)
    assert r.returncode == 2 and "in feet it would be 40.0 m/s" in r.stderr and "(see --force)" in r.stderr
    assert not (tmp_path / "f.json").exists()
    r = runner.invoke(app, ["fit", str(p), "--ball", "baseball", "--force", "-o", str(tmp_path / "f.json")])
    assert r.exit_code == 0 and "warning: impossible: launch speed" in r.output


def test_aero_model_can_be_pinned_and_wind_is_kept(track, tmp_path):
    out = tmp_path / "f.json"
    r = runner.invoke(app, ["fit", str(track[0]), "--ball", "baseball", "--aero-model", "drag_scale",
                            "--wind", "0,2,0", "-o", str(out)])
    assert r.exit_code == 0, r.output
    rec = json.loads(out.read_text())
    assert rec["aero_model"]["chosen"] == "drag_scale"
    assert rec["wind_mps"] == [0.0, 2.0, 0.0] and rec["model"]["wind_mps"] == [0.0, 2.0, 0.0]
    r = runner.invoke(app, ["fit", str(track[0]), "--ball", "baseball", "--aero-model", "nope", "-o", str(out)])
    assert r.exit_code == 2 and "(see --aero-model)" in r.output


def test_wind_uncertainty_widens_the_sideways_deflection(track, tmp_path):
    """--wind-uncertainty adds a marginalised horizontal wind: the same data, a larger sideways sigma
    with a named wind share; a bad value is a one-line error, exit 2."""
    p, _ = track
    sig = {}
    for name, extra in (("still", []), ("windy", ["--wind-uncertainty", "4.5mph"])):
        out = tmp_path / f"{name}.json"
        r = runner.invoke(app, ["fit", str(p), "--ball", "baseball", "--target-x", "17", "-o", str(out), *extra])
        assert r.exit_code == 0, r.output
        sig[name] = json.loads(out.read_text())["uncertainty"]["deflection"]
    side = "horizontal_m"
    assert sig["windy"][side] > sig["still"][side]
    from_wind = sig["windy"]["from_priors_m"]
    assert "wind" not in " ".join(sig["still"].get("from_priors_m", {}))
    # Source: (common practice) a crosswind over a pitch pushes the ball sideways by centimetres; the fit, free to
    # read it as sidespin, must carry it: the crosswind is most of the sideways sigma
    assert from_wind["wind_y"][0] > 0.7 * sig["windy"][side] and from_wind["wind_y"][0] > 0.02
    r = runner.invoke(app, ["fit", str(p), "--ball", "baseball", "-o", str(tmp_path / "x.json"),
                            "--wind-uncertainty", "-1"])
    assert r.exit_code == 2 and "--wind-uncertainty" in r.output and "Traceback" not in r.output
