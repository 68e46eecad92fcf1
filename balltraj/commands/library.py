"""Commands of the library group: ``batch`` and ``library list|show|export|compare``."""

from __future__ import annotations

import io
import json
from pathlib import Path
from typing import Optional

from .. import __version__
from ..pipeline import FitSettings
from ..errors import InputError
import pandas as pd

from ..formats import atomic_write_bytes, check_output_path, read_cameras, write_csv
from ..library.batch import BatchTask, find_clips, run_batch
from ..library.store import compare, export_rows, file_hash, open_library, options_hash
from .common import progress_bar, with_default_plane
from .text import comparison_table, flight_line, library_clips_table


def run_batch_cmd(*, folder: Path, camera: Path, settings: FitSettings, library: Path, workers: int,
                  cluster: Optional[str], capture_fps: Optional[float], session: Optional[str],
                  athlete: Optional[str], show_progress: bool, replace: bool = False) -> str:
    """Analyse every clip of a folder into the library (clips already there are skipped; one
    analysed with other options is kept unless ``replace``; failed ones are retried)."""
    if workers < 1 or workers > 64:
        raise InputError(f"--workers must be 1..64, got {workers}")
    if capture_fps is not None and not (1 <= capture_fps <= 10000):
        raise InputError(f"--capture-fps must be 1..10000, got {capture_fps}")
    clips = find_clips(folder)
    settings, plane_words = with_default_plane(settings, None if settings.start_near_m is None
                                               else settings.start_near_m[0])
    cams = read_cameras(camera)
    if len(cams) != 1:
        raise InputError("batch takes one camera file (the camera that filmed the clips)", path=str(camera))
    ball, air = settings.ball, settings.air
    options = {"ball": ball.name, "ball_properties": ball.to_dict(), "air_density": air.density,
               "camera": cams[0].to_dict(), "target_x": settings.target_x_m, "start_near": settings.start_near_m,
               "start_sigma": settings.start_sigma_m, "aero_model": settings.aero_model,
               "wind_mps": settings.wind_mps, "capture_fps": capture_fps}
    if settings.wind_sigma_mps:  # only when set, so libraries made before the option keep their hashes
        options["wind_sigma_mps"] = settings.wind_sigma_mps
    opt_hash = options_hash({**options, "tool_version": __version__})
    camera_hash = file_hash(camera)
    lib = open_library(library)
    try:
        hashes = {str(c): file_hash(c) for c in clips}
        tasks = [BatchTask(clip=str(c), camera_file=str(camera), settings=settings, capture_fps=capture_fps)
                 for c in clips]
        with progress_bar("clips", show_progress) as progress:
            summ = run_batch(lib, tasks, hashes, opt_hash, options, camera_hash, workers=workers, cluster=cluster,
                             session=session, athlete=athlete, progress=progress, replace=replace)
    finally:
        lib.close()
    lines = [f"{len(clips)} clips: {summ.done} analysed, {summ.failed} failed, {summ.skipped} already in the library"
             + (f", {summ.replaced} earlier result(s) replaced" if summ.replaced else "")]
    lines += [f"  failed: {m}" for m in summ.messages]
    lines += [f"  note: {m}" for m in summ.notes]
    lines += [f"  warning: {w}" for w in summ.warnings]
    if plane_words:
        lines.append(f"target plane: {plane_words}")
    lines.append(f"library: {library}")
    return "\n".join(lines)


def run_library_list(library: Path, units: str = "metric") -> str:
    """One line a clip with its ball and first result; identical copies listed under it."""
    with open_library(library, create=False) as lib:
        first = {}
        for f in lib.flights():
            first.setdefault(f["clip_id"], f)
        text = library_clips_table(lib.clips(), first, units)
        copies = lib.copies()
    lines = [text] + [f"  copy of clip {cid}: {p}" for cid, ps in copies.items() for p in ps]
    return "\n".join(lines)


def _find(lib, library: Path, clip: str):
    rows = [r for r in lib.clips() if str(r["id"]) == clip or r["path"] == clip or Path(r["path"]).name == clip]
    if not rows:
        raise InputError(f"no clip {clip!r} in the library", path=str(library), hint="see balltraj library list")
    return rows


def run_library_show(library: Path, clip: str, units: str = "metric") -> str:
    with open_library(library, create=False) as lib:
        out = []
        for c in _find(lib, library, clip):
            out.append(f"clip {c['id']}: {c['path']} ({c['status']}, {c['ball']}, {c['n_flights']} flights, balltraj "
                       f"{c['tool_version']})" + (f": {c['error']}" if c["error"] else ""))
            for f in lib.flights(c["id"]):
                rec = json.loads(f["record_json"])
                out.append(f"  flight {f['flight_index']}: {flight_line(rec, units)}")
                out += [f"    warning: {w}" for w in rec.get("warnings", [])]
    return "\n".join(out)


def run_library_remove(library: Path, clips: list[str]) -> str:
    """Delete clips (by id, path or file name) and their flights from the library."""
    with open_library(library, create=False) as lib:
        ids = sorted({r["id"] for c in clips for r in _find(lib, library, c)})
        n = lib.remove(ids)
    return f"removed {n} clip{'s' if n != 1 else ''} ({', '.join(map(str, ids))}) and their flights from {library}"


def run_library_export(library: Path, out: Path, per_flight: bool, fmt: str) -> str:
    out_p = check_output_path(out, [library])
    with open_library(library, create=False) as lib:
        header, rows = export_rows(lib, per_flight=per_flight)
        rows = list(rows)
    if fmt == "parquet":
        try:
            buf = io.BytesIO()
            pd.DataFrame(rows, columns=header).to_parquet(buf, index=False)
        except ImportError:
            raise InputError("Parquet export needs pyarrow", hint="pip install pyarrow, or export CSV") from None
        atomic_write_bytes(out_p, buf.getvalue())
    elif fmt == "csv":
        write_csv(out_p, header, rows)
    else:
        raise InputError(f"--format must be csv or parquet, got {fmt!r}")
    return f"wrote {len(rows)} rows to {out_p}"


def run_library_compare(library: Path, by: str, a: str, b: str, units: str = "metric") -> str:
    if by not in ("session", "athlete"):
        raise InputError(f"--by must be session or athlete, got {by!r}")
    with open_library(library, create=False) as lib:
        res = compare(lib, by, a, b)
    return comparison_table(by, res, units)
