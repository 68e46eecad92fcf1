"""What a new user meets in the first hour (issue 16): the quick start, help, units, default target
planes, console warnings, CSVs pandas reads, the calibration board page, the balls table."""

import json
import math
import re
import subprocess
import sys
from pathlib import Path

import pandas as pd
import pytest
from typer.testing import CliRunner

from balltraj.cli import app
from balltraj.commands.text import balls_table, tracking_lines
from balltraj.physics.balls import ball_names, get_ball
from balltraj.record.words import transverse_share

from synth import make_track, write_track

ROOT = Path(__file__).resolve().parents[2]
runner = CliRunner()
SIM = ["simulate", "--ball", "baseball", "--position", "0,0,1.8", "--elevation", "-1", "--spin-rpm", "2300",
       "--spin-axis", "0,-1,0", "--target-x", "60.5ft"]


def cli(*args):
    return subprocess.run([sys.executable, "-m", "balltraj", *map(str, args)], capture_output=True, text=True,
                          cwd=ROOT)


# ------------------------------------------------------------------ quick start and help
def test_readme_quick_start_is_two_commands_with_a_venv():
    text = (ROOT / "README.md").read_text()
    block = text.split("## Quick start", 1)[1].split("```", 2)[1]
    cmds = [ln for ln in block.strip().splitlines() if ln.strip() and not ln.strip().startswith("#")]
    assert len(cmds) == 2
    # a stock Debian python refuses `pip install` outside a virtual environment (PEP 668)
    assert cmds[0].startswith("python3 -m venv .venv && . .venv/bin/activate && pip install .")
    assert "balltraj demo" in cmds[0]


def test_bare_call_prints_help_and_exits_0():
    r = cli()
    assert r.returncode == 0 and "Usage:" in r.stdout and "simulate" in r.stdout
    r = cli("library")
    assert r.returncode == 0 and "remove" in r.stdout


def test_version_and_short_help():
    from balltraj import __version__

    r = cli("--version")
    assert r.returncode == 0 and r.stdout.strip() == f"balltraj {__version__}"
    r = runner.invoke(app, ["fit", "-h"])
    assert r.exit_code == 0 and "--target-x" in r.output


@pytest.mark.parametrize("cmd", [["fit"], ["analyze"], ["library", "show"], ["simulate"], ["batch"],
                                 ["calibrate", "lens"], ["report"]])
def test_help_placeholders_are_words(cmd):
    out = runner.invoke(app, [*cmd, "--help"]).output
    assert not re.search(r"<(list\[)?(path|str|int|float|Path)\]?>", out), out
    assert not re.search(r"\{[a-z_]+\}", out), out


def test_analyze_takes_short_o():
    out = runner.invoke(app, ["analyze", "--help"]).output
    assert re.search(r"-o, --out", out)


def test_football_is_said_to_be_soccer():
    r = cli("simulate", "--ball", "football", "--position", "0,0,0.11", "--speed", "25", "--elevation", "15",
            "--spin-rpm", "400", "--spin-axis", "0,0,1", "-o", "/dev/null")
    assert "football is taken as a soccer ball" in r.stderr


# ------------------------------------------------------------------ units
def test_simulate_echoes_the_speed_in_the_chosen_units(tmp_path):
    r = runner.invoke(app, [*SIM, "--speed", "92mph", "--units", "Imperial", "-o", str(tmp_path / "p.json")])
    assert r.exit_code == 0, r.output
    assert "92.0 mph" in r.output and "km/h" not in r.output
    # Source: 1 lb/ft^3 = 16.018463 kg/m^3; the standard atmosphere at sea level, 20 degC, 50 %: about 1.20 kg/m^3
    assert "lb/ft³" in r.output and "°F" in r.output and "inHg" in r.output and "kg/m" not in r.output
    r = runner.invoke(app, [*SIM, "--speed", "92mph", "--units", "METRIC", "-o", str(tmp_path / "p.json")])
    # Source: 1 mph = 0.44704 m/s exactly: 92 mph = 148.06 km/h
    assert "148.1 km/h" in r.output


def test_units_rejected_in_words():
    r = cli(*SIM, "--speed", "40", "--units", "furlongs", "-o", "/dev/null")
    assert r.returncode == 2 and "metric or imperial" in r.stderr


@pytest.mark.parametrize("cmd", [["simulate"], ["fit"], ["analyze"], ["report"], ["balls"], ["demo"],
                                 ["library", "list"], ["library", "show"], ["library", "compare"]])
def test_every_printing_command_takes_units(cmd):
    assert "--units" in runner.invoke(app, [*cmd, "--help"]).output


def test_what_if_altitude_takes_feet(tmp_path):
    f = tmp_path / "p.json"
    assert runner.invoke(app, [*SIM, "--speed", "40", "-o", str(f)]).exit_code == 0
    out = tmp_path / "r.html"
    r = runner.invoke(app, ["report", str(f), "--what-if-altitude", "5280ft", "--what-if-altitude", "1609.344",
                            "--units", "imperial", "-o", str(out)])
    assert r.exit_code == 0, r.output
    rows = re.findall(r"<tr><td>at 5280 ft altitude</td><td>([^<]+)</td>", out.read_text())
    # the same altitude given in feet and in metres (1 ft = 0.3048 m exactly) gives the same air
    assert len(rows) == 2 and rows[0] == rows[1] and "lb/ft³" in rows[0]
    page = out.read_text()
    assert "kg/m³" not in page and "°C" not in page


# ------------------------------------------------------------------ default target planes
def test_default_target_plane_is_the_front_of_home_plate(tmp_path):
    t, xyz, _ = make_track("baseball", seed=3)
    p = tmp_path / "pitch.csv"
    write_track(p, t, xyz)
    r = runner.invoke(app, ["fit", str(p), "--ball", "baseball", "-o", str(tmp_path / "f.json")])
    assert r.exit_code == 0, r.output
    rec = json.loads((tmp_path / "f.json").read_text())
    # Source: Official Baseball Rules 2.01-2.02 (from memory): 60 ft 6 in to the rear point of home plate,
    # the plate 17 in deep (8.5 in sides, 12 in back edges): 60.5 ft - 16.97 in = 18.009 m
    assert rec["deflection"]["target_x_m"] == pytest.approx(60.5 * 0.3048 - (8.5 + math.sqrt(12**2 - 8.5**2)) * 0.0254)
    assert "front edge of home plate" in r.output and "front edge of home plate" in rec["deflection"]["target_plane"]


def test_no_natural_plane_says_so(tmp_path):
    t, xyz, _ = make_track("soccer", seed=3)
    p = tmp_path / "kick.csv"
    write_track(p, t, xyz)
    r = runner.invoke(app, ["fit", str(p), "--ball", "soccer", "-o", str(tmp_path / "f.json")])
    assert r.exit_code == 0, r.output
    rec = json.loads((tmp_path / "f.json").read_text())
    assert rec["deflection"]["target_x_m"] == pytest.approx(xyz[-1, 0], abs=0.05)
    assert "last tracked x" in r.output and "--target-x" in r.output


# ------------------------------------------------------------------ fit and analyze print sigmas and warnings
def test_fit_prints_sigmas_and_warnings(tmp_path):
    t, xyz, _ = make_track("baseball", seed=5, noise_m=0.05)
    p = tmp_path / "noisy.csv"
    write_track(p, t[:25], xyz[:25])  # short and noisy: the spin cannot be told from noise
    r = runner.invoke(app, ["fit", str(p), "--ball", "baseball", "-o", str(tmp_path / "f.json")])
    assert r.exit_code == 0, r.output
    rec = json.loads((tmp_path / "f.json").read_text())
    assert rec["warnings"]
    for w in rec["warnings"]:
        assert f"warning: {w}" in r.output
    s = rec["uncertainty"]["launch"]["speed_mps"] * 3.6
    assert f"± {s:.1f} km/h" in r.output


@pytest.fixture(scope="module")
def analyzed(tmp_path_factory):
    out = tmp_path_factory.mktemp("an") / "pitch"
    meta = json.loads((ROOT / "sample_clips" / "pitch-side.truth.json").read_text())
    r = runner.invoke(app, ["analyze", str(ROOT / "sample_clips" / "pitch-side.mp4"), "--camera",
                            str(ROOT / meta["camera"]), "--ball", "baseball", "--start-near",
                            ",".join(map(str, meta["start_near"])), "-o", str(out)])
    assert r.exit_code == 0, r.output
    return out, r.output


def test_analyze_prints_sigmas_and_every_warning(analyzed):
    out, text = analyzed
    rec = json.loads((out / "flight.json").read_text())
    sig = rec["uncertainty"]["spin"]["transverse_rate_rpm"]
    assert f"{rec['spin']['transverse_rate_rpm']:.0f} ± {sig:.0f} rpm" in text
    assert rec["warnings"] and all(f"warning: {w}" in text for w in rec["warnings"])
    assert "target plane" in text


def test_video_flight_tracked_points_project_back_onto_the_detections(analyzed):
    from balltraj.formats import read_cameras

    out, _ = analyzed
    rec = json.loads((out / "flight.json").read_text())
    pts = rec["fit"]["points"]
    meta = json.loads((ROOT / "sample_clips" / "pitch-side.truth.json").read_text())
    cam = read_cameras(ROOT / meta["camera"])[0]
    import numpy as np

    # round trip: each placed point lies on its detection's camera ray
    uv = cam.project(np.asarray(pts["tracked_m"], float))
    assert np.max(np.abs(uv - np.asarray(pts["observed_px"]))) < 1e-3


def test_observations_csv_reads_with_pandas_and_old_files_still_read(analyzed, tmp_path):
    out, _ = analyzed
    df = pd.read_csv(out / "observations.csv")  # no options
    assert list(df.columns[:4]) == ["t", "camera", "u", "v"] and len(df) > 20
    assert (out / "observations.notes.txt").read_text().startswith("observations tracked by balltraj")
    # a file in the old form (leading # comment lines) is still read by fit
    old = tmp_path / "old.csv"
    old.write_text("# tracked from somewhere\n# flight 1: ...\n" + (out / "observations.csv").read_text())
    meta = json.loads((ROOT / "sample_clips" / "pitch-side.truth.json").read_text())
    r = runner.invoke(app, ["fit", str(old), "--camera", str(ROOT / meta["camera"]), "--ball", "baseball",
                            "--start-near", ",".join(map(str, meta["start_near"])), "-o", str(tmp_path / "f.json")])
    assert r.exit_code == 0, r.output


# ------------------------------------------------------------------ track
def test_track_end_progress_counts_to_the_end_time(tmp_path):
    clip = ROOT / "sample_clips" / "pitch-side.mp4"
    r = cli("track", clip, "--ball", "baseball", "--end", "0.25", "-o", tmp_path / "o.csv")
    assert r.returncode == 0, r.stderr
    from balltraj.vision.clip import clip_info

    fps = clip_info(clip).nominal_fps
    m = re.search(r"tracking pitch-side.mp4 \(frames\): \d+ of (\d+) done", r.stderr)
    assert m, r.stderr  # a plain progress line when stderr is not a terminal
    assert int(m.group(1)) == round(0.25 * fps)


class _F:
    def __init__(self, reason, bounce):
        import numpy as np

        self.flight, self.t, self.end_reason, self.bounce = 1, np.array([0.0, 0.1]), reason, bounce


class _R:
    n_frames, fps_measured, warnings = 10, 240.0, []


def test_ended_by_a_bounce_is_said_once():
    res = _R()
    res.flights = [_F("bounce", True)]
    line = tracking_lines(res)[1]
    assert line.endswith("ended: bounce") and line.count("bounce") == 1


# ------------------------------------------------------------------ calibration board
def _pdf_page_mm(data: bytes):
    m = re.search(rb"/MediaBox\s*\[\s*0 0 ([\d.]+) ([\d.]+)\s*\]", data)
    return float(m.group(1)) / 72 * 25.4, float(m.group(2)) / 72 * 25.4


def test_board_pdf_fits_a4_and_letter(tmp_path):
    r = runner.invoke(app, ["calibrate", "board", "-o", str(tmp_path / "board.png")])
    assert r.exit_code == 0, r.output
    w, h = _pdf_page_mm((tmp_path / "board.pdf").read_bytes())
    # Source: ISO 216 A4 is 210 x 297 mm; US Letter is 8.5 x 11 in (215.9 x 279.4 mm)
    assert w <= 210.0 + 0.1 and h <= 279.4 + 0.1
    r = cli("calibrate", "board", "--square-mm", "40", "-o", tmp_path / "big.png")
    assert r.returncode == 2 and "does not fit" in r.stderr and "--square-mm" in r.stderr


# ------------------------------------------------------------------ balls
def test_balls_columns_are_aligned_and_checks_stated():
    text = balls_table([get_ball(n) for n in ball_names()])
    head, *rows = text.splitlines()[: 1 + len(ball_names())]
    ends = {m.end() for r in rows for m in [re.search(r"\S+\s+\S+\s+\S+", r)]}
    # the diameter column ends at one place on every row, under its heading
    assert ends == {head.index("diameter (mm)") + len("diameter (mm)")}
    assert "Not checked" in text and "from memory" in text
    r = runner.invoke(app, ["balls", "--units", "imperial"])
    # Source: Official Baseball Rules 3.01: 5 to 5 1/4 oz
    assert re.search(r"baseball\s+5\.00-5\.25", r.output)


# ------------------------------------------------------------------ plain words in the flight file
def test_transverse_share_replaces_spin_efficiency(tmp_path):
    f = tmp_path / "p.json"
    assert runner.invoke(app, [*SIM, "--speed", "40", "--spin-axis", "1,-1,0", "-o", str(f)]).exit_code == 0
    spin = json.loads(f.read_text())["spin"]
    assert "spin_efficiency" not in spin
    # the axis is 45 degrees off the flight direction (+x): the transverse share is sin(45 deg) for a
    # launch 1 degree down (cos(1 deg) of the axis's x part is along the flight)
    assert spin["transverse_share"] == pytest.approx(math.sqrt(1 - (math.cos(math.radians(1)) / math.sqrt(2)) ** 2),
                                                     rel=1e-6)
    assert transverse_share({"spin_efficiency": 0.7}) == 0.7  # older files


def test_report_repeats_the_flight_files_warnings(analyzed, tmp_path):
    out, _ = analyzed
    rec = json.loads((out / "flight.json").read_text())
    r = runner.invoke(app, ["report", str(out / "flight.json"), "-o", str(tmp_path / "r.html")])
    assert r.exit_code == 0 and rec["warnings"]
    assert all(w in r.output for w in rec["warnings"])


def test_console_angles_in_words(tmp_path):
    r = runner.invoke(app, ["simulate", "--ball", "baseball", "--position", "0,0,1.8", "--speed", "40",
                            "--elevation", "-1", "--azimuth", "-2", "--spin-rpm", "2200", "--spin-axis", "0,-1,0",
                            "-o", str(tmp_path / "s.json")])
    # azimuth is counted from +x toward +y (left): -2 degrees is 2 degrees to the right
    assert "1.00 deg down, 2.00 deg right" in r.output
