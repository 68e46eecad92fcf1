"""Batch re-runs, deleting records, copies, Parquet with failed clips, comparing balls (issue 16)."""

import shutil
import sqlite3
import subprocess
import sys
from pathlib import Path

import pandas as pd
import pytest

ROOT = Path(__file__).resolve().parents[2]
CLIP = ROOT / "sample_clips" / "pitch-side.mp4"
CAM = ROOT / "calibration" / "pitch-side.json"


def bt(*args):
    return subprocess.run([sys.executable, "-m", "balltraj", *map(str, args)], capture_output=True, text=True)


def batch(folder, lib, ball="baseball", *extra):
    return bt("batch", folder, "--camera", CAM, "--ball", ball, "--library", lib, "--start-near", "0,0.25,1.78",
              *extra)


def rows(lib, q):
    c = sqlite3.connect(str(lib))
    try:
        return c.execute(q).fetchall()
    finally:
        c.close()


@pytest.fixture(scope="module")
def library(tmp_path_factory):
    d = tmp_path_factory.mktemp("lib")
    folder = d / "clips"
    folder.mkdir()
    shutil.copy(CLIP, folder / "pitch.mp4")
    (folder / "broken.mp4").write_bytes(CLIP.read_bytes()[:5000])
    lib = d / "club.db"
    r = batch(folder, lib, "baseball", "--session", "Tue")
    assert r.returncode == 0, r.stderr
    assert "1 analysed, 1 failed" in r.stdout
    return d, folder, lib


def test_rerun_with_another_ball_keeps_one_ok_record(library):
    d, folder, lib = library
    r = batch(folder, lib, "soccer", "--session", "Tue")
    assert r.returncode == 0, r.stderr
    assert "already analysed" in r.stdout and "--replace" in r.stdout
    ok = rows(lib, "SELECT path, ball FROM clips WHERE status = 'ok'")
    assert ok == [(str(folder / "pitch.mp4"), "baseball")]


def test_failed_clip_is_retried_not_skipped(library):
    d, folder, lib = library
    r = batch(folder, lib, "baseball", "--session", "Tue")
    assert "1 failed" in r.stdout  # it was analysed again (and failed again), not counted as stored
    assert rows(lib, "SELECT count(*) FROM clips WHERE status = 'failed'") == [(1,)]


def test_parquet_export_with_a_failed_clip(library, tmp_path):
    d, folder, lib = library
    out = tmp_path / "x.parquet"
    r = bt("library", "export", lib, "--format", "Parquet", "-o", out)
    assert r.returncode == 0, r.stderr
    df = pd.read_parquet(out)
    assert set(df["status"]) == {"ok", "failed"}
    failed = df[df["status"] == "failed"].iloc[0]
    assert pd.isna(failed["launch_speed_mps"]) and pd.isna(failed["flight"])
    ok = df[df["status"] == "ok"].iloc[0]
    assert ok["launch_speed_mps"] > 30  # a pitch (the sample's truth is about 37.5 m/s)


def test_identical_copy_under_another_name_is_listed(library):
    d, folder, lib = library
    copies = d / "copies"
    copies.mkdir()
    shutil.copy(CLIP, copies / "same pitch, other name.mp4")
    r = batch(copies, lib, "baseball", "--session", "Tue")
    assert r.returncode == 0 and "listed as a copy" in r.stdout
    listing = bt("library", "list", lib).stdout
    assert "same pitch, other name.mp4" in listing and str(folder / "pitch.mp4") in listing


def test_list_shows_ball_and_result(library):
    d, folder, lib = library
    out = bt("library", "list", lib, "--units", "imperial").stdout
    line = next(ln for ln in out.splitlines() if ln.endswith(str(folder / "pitch.mp4")))
    assert " baseball " in line and "mph" in line and "rpm" in line


def test_replace_then_remove(library, tmp_path):
    d, folder, lib = library
    work = tmp_path / "lib.db"
    shutil.copy(lib, work)
    r = batch(folder, work, "softball", "--replace", "--session", "Tue")
    assert r.returncode == 0, r.stderr
    assert "replaced" in r.stdout
    assert rows(work, "SELECT ball FROM clips WHERE status = 'ok'") == [("softball",)]
    cid = rows(work, "SELECT id FROM clips WHERE status = 'ok'")[0][0]
    r = bt("library", "remove", work, cid)
    assert r.returncode == 0 and "removed 1 clip" in r.stdout
    assert rows(work, "SELECT count(*) FROM clips WHERE status = 'ok'") == [(0,)]
    assert rows(work, f"SELECT count(*) FROM flights WHERE clip_id = {cid}") == [(0,)]
    r = bt("library", "remove", work, "no-such-clip")
    assert r.returncode == 2 and "no clip" in r.stderr


def test_compare_never_averages_two_balls(tmp_path):
    from balltraj.library.store import compare, open_library

    lib = open_library(tmp_path / "l.db")
    base = {"launch": {"speed_mps": 0}, "spin": {"transverse_rate_rpm": 0}, "deflection": {}}
    for i, (ball, speed) in enumerate([("baseball", 40.0), ("baseball", 38.0), ("soccer", 25.0)]):
        rec = {**base, "launch": {"speed_mps": speed}, "spin": {"transverse_rate_rpm": 1000.0},
               "deflection": {"horizontal_m": 0.1, "vertical_m": 0.2, "target_x_m": 18.0}}
        assert lib.record(path=f"c{i}.mp4", content_hash=f"h{i}", opt_hash="o", options={}, camera_hash=None,
                          ball=ball, records=[rec], error=None, session="Tue")
    res = compare(lib, "session", "Tue", "Tue")
    lib.close()
    by_ball = {d["ball"]: d for d in res[:2]}
    # the baseball line is the mean of the two pitches only; the kick is on its own line
    assert by_ball["baseball"]["launch_speed_mps"][0] == pytest.approx(39.0)
    assert by_ball["soccer"]["launch_speed_mps"][0] == pytest.approx(25.0) and by_ball["soccer"]["n"] == 1
