"""Hostile inputs, command by command: each answers with exit status 2 and one line
`error: ...` (no traceback) and leaves no output behind."""
import json
import subprocess
import sys
import time
from pathlib import Path

import pytest

from synth import make_track, write_track

ROOT = Path(__file__).resolve().parents[2]


def run(*args, cwd=None):
    return subprocess.run([sys.executable, "-m", "balltraj", *map(str, args)], capture_output=True, text=True,
                          cwd=cwd, timeout=300)


def assert_rejected(r, needle=None):
    assert r.returncode == 2, (r.returncode, r.stdout, r.stderr)
    lines = r.stderr.strip().splitlines()
    assert len(lines) == 1 and lines[0].startswith("error: "), r.stderr
    assert "Traceback" not in r.stderr
    if needle:
        assert needle in lines[0], lines[0]


@pytest.fixture(scope="module")
def track(tmp_path_factory):
    d = tmp_path_factory.mktemp("h")
    t, xyz, _ = make_track("baseball", seed=8)
    p = d / "träck ünïcode with spaces.csv"  # non-ASCII and spaces in the name
    write_track(p, t, xyz)
    return p


def test_non_ascii_paths_work(track, tmp_path):
    out = tmp_path / "résultat vol.json"
    r = run("fit", track, "--ball", "baseball", "-o", out)
    assert r.returncode == 0, r.stderr
    assert json.loads(out.read_text())["schema"] == "balltraj.flight/1"


@pytest.mark.parametrize("cmd", ["fit", "report"])
def test_output_folder_missing_or_unwritable(track, tmp_path, cmd):
    blocker = tmp_path / "a file"
    blocker.write_text("x")
    target = blocker / "out.json"  # a path under a file can never be written
    if cmd == "fit":
        r = run("fit", track, "--ball", "baseball", "-o", target)
    else:
        flight = tmp_path / "f.json"
        assert run("fit", track, "--ball", "baseball", "-o", flight).returncode == 0
        r = run("report", flight, "-o", target)
    assert_rejected(r, "folder")


def test_output_equal_to_input_is_refused_everywhere(track, tmp_path):
    before = track.read_bytes()
    assert_rejected(run("fit", track, "--ball", "baseball", "-o", track), "same as an input")
    assert track.read_bytes() == before
    flight = tmp_path / "f.json"
    run("fit", track, "--ball", "baseball", "-o", flight)
    assert_rejected(run("report", flight, "-o", flight), "same as an input")
    clip = ROOT / "sample_clips" / "pitch-side.mp4"
    assert_rejected(run("track", clip, "-o", clip), "same as an input")


def test_extremely_long_track_is_refused(tmp_path):
    p = tmp_path / "long.csv"
    with open(p, "w") as f:
        f.write("t,x,y,z\n")
        for i in range(25_000):
            f.write(f"{i * 1e-3:.6f},{i * 0.03:.4f},0,1\n")
    assert_rejected(run("fit", p, "--ball", "baseball", "-o", tmp_path / "o.json"), "more than one flight")


@pytest.mark.parametrize("rows,needle", [
    ("0,0,0,1\n0.01,0,0,1\n0.02,0,0,1\n0.03,0,0,1\n0.04,0,0,1\n0.05,0,0,1\n", "barely move"),
    ("0,0,0,1\n0.01,0.4,0,1\n0.02,0.8,0,1\n", "too few"),
])
def test_degenerate_flights(tmp_path, rows, needle):
    p = tmp_path / "d.csv"
    p.write_text("t,x,y,z\n" + rows)
    out = tmp_path / "o.json"
    assert_rejected(run("fit", p, "--ball", "baseball", "-o", out), needle)
    assert not out.exists()


@pytest.mark.parametrize("change,needle", [
    (["--speed", "0"], "speed"),
    (["--elevation", "90"], "does not move toward +x"),
    (["--elevation", "91"], "elevation"),
    (["--spin-rpm", "-5"], "spin"),
    (["--drag-coefficient", "-1"], "drag"),
    (["--pressure", "5hpa"], "pressure"),
    (["--temperature", "500"], "temperature"),
])
def test_simulate_edges(tmp_path, change, needle):
    args = {"--ball": "baseball", "--position": "0,0,1.8", "--speed": "40", "--elevation": "0",
            "--spin-rpm": "2000", "--spin-axis": "0,-1,0", "--target-x": "18"}
    args.update(dict(zip(change[::2], change[1::2])))
    flat = [x for kv in args.items() for x in kv]
    assert_rejected(run("simulate", *flat, "-o", tmp_path / "o.json"), needle)


def test_spin_along_the_flight_makes_no_deflection(tmp_path):
    out = tmp_path / "o.json"
    r = run("simulate", "--ball", "baseball", "--position", "0,0,1.8", "--speed", "40", "--elevation", "0",
            "--spin-rpm", "2000", "--spin-axis", "1,0,0", "--target-x", "15", "-o", out)
    assert r.returncode == 0, r.stderr
    d = json.loads(out.read_text())
    assert d["spin"]["transverse_rate_rpm"] < 1e-6 and d["aero"]["lift_coefficient"] < 1e-12
    # only as gravity turns the path does part of the gyro spin become transverse: a small sideways
    # movement (about 2 cm here), against about 60 cm of lift from the same spin as backspin
    assert abs(d["deflection"]["horizontal_m"]) < 0.05 and abs(d["deflection"]["vertical_m"]) < 0.005


@pytest.mark.parametrize("argv,needle", [
    (["fit"], "Missing argument"),
    (["nope"], "No such command"),
    (["simulate", "--ball", "baseball"], "Missing option"),
    (["report", "x.json", "--units", "furlongs", "-o", "r.html"], None),
    (["calibrate", "scene", "-o", "c.json"], "--landmarks"),
    (["calibrate", "scene", "--template", "croquet", "--points", "p.csv", "--image-size", "10x10", "-o", "c.json"],
     "template"),
    (["library", "list", "missing.db"], "no such library"),
    (["triangulate", "missing.csv", "--camera", "missing.json", "-o", "t.csv"], "no such file"),
])
def test_usage_errors_are_one_line(tmp_path, argv, needle):
    assert_rejected(run(*argv, cwd=tmp_path), needle)


def test_render_rejects_bad_flight_file(tmp_path):
    f = tmp_path / "f.json"
    f.write_text('{"schema": "nope"}')
    cam = tmp_path / "c.json"
    cam.write_text((ROOT / "calibration" / "pitch-side.json").read_text())
    assert_rejected(run("render", f, "--camera", cam, "-o", tmp_path / "r.mp4"), "schema")
    assert not (tmp_path / "r.mp4").exists()


def test_analyze_leaves_nothing_half_written(tmp_path):
    out = tmp_path / "result"
    bad = tmp_path / "clip.mp4"
    bad.write_bytes((ROOT / "sample_clips" / "pitch-side.mp4").read_bytes()[:5000])
    r = run("analyze", bad, "--camera", ROOT / "calibration" / "pitch-side.json", "--ball", "baseball", "--out", out)
    assert r.returncode == 2 and r.stderr.startswith("error: ")
    assert not out.exists()
    assert not [p for p in tmp_path.iterdir() if p.name.startswith(".result")]


def test_atomic_write_survives_a_kill(tmp_path):
    """A process killed while rewriting a file leaves the old file or the new one, never a mix."""
    target = tmp_path / "big.json"
    old = b"a" * 30_000_000
    new = b"b" * 30_000_000
    target.write_bytes(old)
    code = ("import sys; from balltraj.formats import atomic_write_bytes\n"
            "data = b'b' * 30_000_000\n"
            "while True:\n    atomic_write_bytes(sys.argv[1], data)\n")
    for delay in (0.05, 0.2, 0.45, 0.8):
        p = subprocess.Popen([sys.executable, "-c", code, str(target)])
        time.sleep(delay)
        p.kill()
        p.wait()
        content = target.read_bytes()
        assert content in (old, new)
    for part in tmp_path.glob(".big.json.*.part"):  # a killed writer may leave its temporary file
        assert part.stat().st_size <= len(new)
