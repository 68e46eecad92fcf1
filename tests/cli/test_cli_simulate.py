import json
import math
import subprocess
import sys

import pytest
from typer.testing import CliRunner

from balltraj.cli import app

runner = CliRunner()
BASE = ["simulate", "--ball", "baseball", "--position", "0,0,1.8", "--speed", "40", "--elevation", "-1",
        "--spin-rpm", "2200", "--spin-axis", "0,-1,0", "--target-x", "18.44"]


def test_simulate_writes_flight_file(tmp_path):
    out = tmp_path / "f.json"
    r = runner.invoke(app, BASE + ["-o", str(out), "--path-csv", str(tmp_path / "p.csv")])
    assert r.exit_code == 0, r.output
    d = json.loads(out.read_text())
    assert d["schema"] == "balltraj.flight/1"
    assert d["launch"]["speed_mps"] == pytest.approx(40.0)
    assert d["spin"]["rate_rpm"] == pytest.approx(2200.0)
    assert d["deflection"]["vertical_m"] > 0.3  # backspin holds the pitch up
    assert abs(d["deflection"]["horizontal_m"]) < 1e-9
    lines = (tmp_path / "p.csv").read_text().splitlines()
    assert lines[0] == "t,x,y,z,vx,vy,vz" and len(lines) > 50
    assert "deflection" in r.output


def test_units_at_the_edge_agree_with_si(tmp_path):
    # Source: 1 mph = 0.44704 m/s, 1 ft = 0.3048 m (exact definitions)
    a, b = tmp_path / "a.json", tmp_path / "b.json"
    args = ["simulate", "--ball", "baseball", "--position", "0,0,1.8", "--elevation", "0", "--spin-axis", "0,-1,0"]
    assert runner.invoke(app, args + ["--speed", "90mph", "--spin-rpm", "2000", "--target-x", "60.5ft",
                                      "-o", str(a)]).exit_code == 0
    assert runner.invoke(app, args + ["--speed", str(90 * 0.44704), "--spin-rpm", f"{2000 * 2 * math.pi / 60}rad/s",
                                      "--target-x", str(60.5 * 0.3048), "-o", str(b)]).exit_code == 0
    da, db = json.loads(a.read_text()), json.loads(b.read_text())
    assert da["deflection"]["vertical_m"] == pytest.approx(db["deflection"]["vertical_m"], rel=1e-9)


@pytest.mark.parametrize("change,needle", [
    (["--ball", "rugby"], "unknown ball"),
    (["--speed", "-3"], "speed"),
    (["--speed", "nan"], "speed"),
    (["--spin-axis", "0,0,0"], "zero length"),
    (["--humidity", "130"], "humidity"),
    (["--target-x", "500"], "never reaches"),
    (["--position", "1,2"], "three"),
    (["--air-density", "-1"], "density"),
    (["--speed", "40furlongs"], "unit"),
])
def test_bad_input_exits_2_with_one_line(tmp_path, change, needle):
    args = list(BASE)
    for i in range(0, len(change), 2):
        if change[i] in args:
            args[args.index(change[i]) + 1] = change[i + 1]
        else:
            args += change[i:i + 2]
    out = tmp_path / "f.json"
    r = subprocess.run([sys.executable, "-m", "balltraj", *args, "-o", str(out)], capture_output=True, text=True)
    assert r.returncode == 2, r.stderr
    lines = r.stderr.strip().splitlines()
    assert len(lines) == 1 and lines[0].startswith("error: ") and needle in lines[0], r.stderr
    assert "Traceback" not in r.stderr
    assert not out.exists()


def test_balls_lists_catalogue():
    r = runner.invoke(app, ["balls", "--models"])
    assert r.exit_code == 0
    for name in ("baseball", "soccer", "table-tennis", "sawicki2003", "morrison2013"):
        assert name in r.output
