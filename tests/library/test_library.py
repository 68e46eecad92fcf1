import csv
import json
import signal
import sqlite3
import subprocess
import sys
import time
from pathlib import Path

import pytest
from typer.testing import CliRunner

from balltraj.cli import app
from balltraj.errors import InputError
from balltraj.library.store import SCHEMA_VERSION, open_library

ROOT = Path(__file__).resolve().parents[2]
CLIP = ROOT / "sample_clips" / "pitch-side.mp4"
CAM = ROOT / "calibration" / "pitch-side.json"
runner = CliRunner()


def clip_folder(d: Path, n: int, bad: bool = False) -> Path:
    d.mkdir(parents=True, exist_ok=True)
    data = CLIP.read_bytes()
    for i in range(n):  # distinct content (trailing bytes after the video data decode the same)
        (d / f"pitch {i:02d}.mp4").write_bytes(data + f"copy{i}".encode())
    if bad:
        (d / "broken.mp4").write_bytes(data[: len(data) // 4])
    return d


def batch_args(folder, lib, *extra):
    return [sys.executable, "-m", "balltraj", "batch", str(folder), "--camera", str(CAM), "--ball", "baseball",
            "--library", str(lib), "--start-near", "0,0.25,1.78", *extra]


def counts(lib):
    c = sqlite3.connect(str(lib))
    try:
        return (c.execute("SELECT count(*), count(DISTINCT content_hash) FROM clips").fetchone(),
                c.execute("SELECT count(*) FROM flights").fetchone()[0])
    except sqlite3.OperationalError:
        return (0, 0), 0
    finally:
        c.close()


def test_kill_and_resume_every_clip_exactly_once(tmp_path):
    folder = clip_folder(tmp_path / "clips", 7)
    lib = tmp_path / "lib.db"
    p = subprocess.Popen(batch_args(folder, lib), stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
    t0 = time.time()
    while time.time() - t0 < 120 and not (lib.exists() and counts(lib)[0][0] >= 2):
        time.sleep(0.1)
    p.send_signal(signal.SIGKILL)
    p.wait()
    (n_mid, _), _ = counts(lib)
    assert 2 <= n_mid < 7
    r = subprocess.run(batch_args(folder, lib), capture_output=True, text=True)
    assert r.returncode == 0, r.stderr
    (n, distinct), nf = counts(lib)
    assert n == distinct == 7 and nf == 7
    assert f"{n_mid} already in the library" in r.stdout


def test_concurrent_writers_and_a_corrupt_clip(tmp_path):
    folder = clip_folder(tmp_path / "clips", 4, bad=True)
    lib = tmp_path / "lib.db"
    procs = [subprocess.Popen(batch_args(folder, lib), stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
             for _ in range(2)]
    outs = [p.communicate(timeout=300) for p in procs]
    assert all(p.returncode == 0 for p in procs), outs
    (n, distinct), nf = counts(lib)
    assert n == distinct == 5 and nf == 4
    c = sqlite3.connect(str(lib))
    status = dict(c.execute("SELECT path, status FROM clips").fetchall())
    c.close()
    assert status[str(folder / "broken.mp4")] == "failed"


def test_export_round_trip_and_compare(tmp_path):
    folder = clip_folder(tmp_path / "a", 2)
    folder_b = clip_folder(tmp_path / "b", 0)
    (folder_b / "other.mp4").write_bytes(CLIP.read_bytes() + b"other")
    lib = tmp_path / "lib.db"
    assert subprocess.run(batch_args(folder, lib, "--session", "Tue", "--workers", "2")).returncode == 0
    assert subprocess.run(batch_args(folder_b, lib, "--session", "Thu")).returncode == 0
    out = tmp_path / "flights.csv"
    r = runner.invoke(app, ["library", "export", str(lib), "-o", str(out)])
    assert r.exit_code == 0, r.output
    rows = list(csv.DictReader(out.read_text().splitlines()))
    assert len(rows) == 3 and {row["status"] for row in rows} == {"ok"}
    with open_library(lib) as L:
        stored = {f["path"]: json.loads(f["record_json"]) for f in L.flights()}
    for row in rows:  # the export carries exactly what the library holds
        rec = stored[row["source"]]
        assert float(row["launch_speed_mps"]) == pytest.approx(rec["launch"]["speed_mps"], rel=1e-8)
        assert float(row["deflection_vertical_m"]) == pytest.approx(rec["deflection"]["vertical_m"], rel=1e-8)
    r = runner.invoke(app, ["library", "compare", str(lib), "Tue", "Thu"])
    assert r.exit_code == 0 and "Tue" in r.output and "Thu" in r.output
    pq = tmp_path / "flights.parquet"
    assert runner.invoke(app, ["library", "export", str(lib), "-o", str(pq), "--format", "parquet"]).exit_code == 0
    import pandas as pd

    assert len(pd.read_parquet(pq)) == 3


def test_dask_local_cluster_matches_local_pool(tmp_path):
    from distributed import LocalCluster

    folder = clip_folder(tmp_path / "clips", 2)
    lib_a, lib_b = tmp_path / "a.db", tmp_path / "b.db"
    assert subprocess.run(batch_args(folder, lib_a, "--workers", "2")).returncode == 0
    with LocalCluster(n_workers=1, threads_per_worker=1, processes=False, dashboard_address=None) as cluster:
        r = runner.invoke(app, ["batch", str(folder), "--camera", str(CAM), "--ball", "baseball", "--library",
                                str(lib_b), "--start-near", "0,0.25,1.78", "--cluster", cluster.scheduler_address])
    assert r.exit_code == 0, r.output
    def load(lib):
        with open_library(lib) as L:
            return {f["path"]: (f["launch_speed_mps"], f["deflection_vertical_m"]) for f in L.flights()}
    a, b = load(lib_a), load(lib_b)
    assert a.keys() == b.keys()
    for k in a:
        assert a[k] == pytest.approx(b[k], rel=1e-9)


def test_bad_libraries_and_folders(tmp_path):
    txt = tmp_path / "notes.db"
    txt.write_text("hello")
    with pytest.raises(InputError, match="not an SQLite library"):
        open_library(txt)
    newer = tmp_path / "newer.db"
    with open_library(newer) as L:
        L.conn.execute("UPDATE meta SET value = ? WHERE key = 'schema_version'", (str(SCHEMA_VERSION + 1),))
    with pytest.raises(InputError, match="newer than this balltraj"):
        open_library(newer)
    other = tmp_path / "other.db"
    c = sqlite3.connect(str(other))
    c.execute("CREATE TABLE x (a)")
    c.commit()
    c.close()
    with pytest.raises(InputError, match="not a balltraj library"):
        open_library(other)
    empty = tmp_path / "empty"
    empty.mkdir()
    noclips = tmp_path / "noclips"
    noclips.mkdir()
    (noclips / "readme.txt").write_text("x")
    for folder, needle in ((empty, "empty"), (noclips, "no clips"), (tmp_path / "missing", "no such folder")):
        r = subprocess.run(batch_args(folder, tmp_path / "l.db"), capture_output=True, text=True)
        assert r.returncode == 2 and needle in r.stderr and len(r.stderr.strip().splitlines()) == 1


def test_locked_library_is_reported(tmp_path):
    lib = tmp_path / "lib.db"
    open_library(lib).close()
    holder = sqlite3.connect(str(lib), isolation_level=None)
    holder.execute("BEGIN EXCLUSIVE")
    try:
        with open_library(lib) as L:
            L.conn.execute("PRAGMA busy_timeout=200")
            with pytest.raises(InputError, match="locked"):
                L.record(path="x", content_hash="h", opt_hash="o", options={}, camera_hash=None, ball="baseball",
                         records=None, error="e")
    finally:
        holder.rollback()
        holder.close()


def test_many_openers_of_a_new_library_all_see_one_schema(tmp_path):
    """Invariant: openers racing on a new file all get a library of the current schema. Threads, so
    the race is real (sqlite3 releases the GIL); the old code read "is there a meta table" and "is the
    file empty" in two statements and, under load, took another opener's just-made schema for a
    foreign SQLite file."""
    import threading

    for k in range(25):
        path = tmp_path / f"lib{k}.db"
        barrier = threading.Barrier(6)
        errors, versions = [], []

        def opener():
            barrier.wait()
            try:
                with open_library(path) as lib:
                    versions.append(int(lib.conn.execute(
                        "SELECT value FROM meta WHERE key='schema_version'").fetchone()[0]))
            except Exception as e:  # noqa: BLE001 - any failure is the defect under test
                errors.append(repr(e))

        threads = [threading.Thread(target=opener) for _ in range(6)]
        for t in threads:
            t.start()
        for t in threads:
            t.join()
        assert errors == [] and versions == [SCHEMA_VERSION] * 6, (k, errors)
