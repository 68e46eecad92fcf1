"""Reading and validating every input file; writing every output file atomically.

Readers turn files into typed objects or raise :class:`~balltraj.errors.InputError` naming the
file and the problem. Writers write to a temporary file in the destination folder and rename it,
so an interrupted command leaves the old file or the new one, never a partial one.
"""

from __future__ import annotations

import csv
import io
import json
import math
import os
import tempfile
from dataclasses import dataclass
from pathlib import Path
from typing import Any, Iterable, Mapping, Sequence

import numpy as np

from .errors import BallTrajError, InputError
from .camera.model import Camera, cameras_from_json
from .physics.balls import Ball, ball_from_dict
from .record.schema import SCHEMA, missing_keys

MAX_INPUT_BYTES = 200 * 1024 * 1024
_UMASK = os.umask(0o022)
os.umask(_UMASK)
MAX_ROWS = 2_000_000
MAX_TRACK_POINTS = 20_000  # 10 s at 2000 Hz: more is not one flight
ABSURD_COORDINATE_M = 10_000.0


# ------------------------------------------------------------------------------------ writing
def atomic_write_bytes(path: str | os.PathLike, data: bytes) -> None:
    path = Path(path)
    folder = path.parent if str(path.parent) else Path(".")
    if not folder.is_dir():
        raise InputError("the output folder does not exist", path=str(path), hint="create it or choose another path")
    try:
        fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", suffix=".part", dir=folder)
    except OSError as e:
        raise InputError(f"cannot write here ({e.strerror})", path=str(path),
                         hint="choose a writable output path") from None
    try:
        with os.fdopen(fd, "wb") as f:
            f.write(data)
            f.flush()
            os.fsync(f.fileno())
        os.chmod(tmp, 0o666 & ~_UMASK)  # mkstemp makes 0600 files; give the usual permissions
        os.replace(tmp, path)
    except OSError as e:
        _silent_unlink(tmp)
        raise InputError(f"cannot write the file ({e.strerror})", path=str(path),
                         hint="choose a writable output path") from None
    except BaseException:
        _silent_unlink(tmp)
        raise


def _silent_unlink(p) -> None:
    try:
        os.unlink(p)
    except OSError:
        pass


def _clean(obj: Any) -> Any:
    """JSON-safe copy: numpy scalars and arrays to Python, non-finite floats to None."""
    if isinstance(obj, Mapping):
        return {str(k): _clean(v) for k, v in obj.items()}
    if isinstance(obj, (list, tuple)):
        return [_clean(v) for v in obj]
    if isinstance(obj, np.ndarray):
        return _clean(obj.tolist())
    if isinstance(obj, (np.floating, float)):
        f = float(obj)
        return f if math.isfinite(f) else None
    if isinstance(obj, (np.integer,)):
        return int(obj)
    if isinstance(obj, np.bool_):
        return bool(obj)
    return obj


json_safe = _clean


def write_json(path, obj: Mapping[str, Any]) -> None:
    """Write JSON atomically; NaN and infinities become null (never NaN in a flight file)."""
    text = json.dumps(_clean(obj), indent=2, allow_nan=False, ensure_ascii=False) + "\n"
    atomic_write_bytes(path, text.encode("utf-8"))


def write_csv(path, header: Sequence[str], rows: Iterable[Sequence[Any]], comment: str | None = None) -> None:
    buf = io.StringIO()
    if comment:
        for line in comment.splitlines():
            buf.write(f"# {line}\n")
    w = csv.writer(buf, lineterminator="\n")
    w.writerow(header)
    for r in rows:
        w.writerow(["" if (isinstance(v, float) and not math.isfinite(v)) else
                    (f"{v:.9g}" if isinstance(v, (float, np.floating)) else v) for v in r])
    atomic_write_bytes(path, buf.getvalue().encode("utf-8"))


def check_output_path(out, inputs: Sequence[str | os.PathLike] = ()) -> Path:
    """Refuse an output path that is one of the inputs or sits in a missing folder."""
    p = Path(out)
    for i in inputs:
        try:
            if Path(i).resolve() == p.resolve():
                raise InputError("the output path is the same as an input file", path=str(out),
                                 hint="choose another output name")
        except OSError:
            pass
    parent = p.parent if str(p.parent) else Path(".")
    if not parent.is_dir():
        raise InputError("the output folder does not exist", path=str(out), hint="create it first")
    if p.is_dir():
        raise InputError("the output path is a folder", path=str(out), hint="give a file name")
    return p


# ------------------------------------------------------------------------------------ reading
def _read_text(path) -> str:
    p = Path(path)
    if not p.exists():
        raise InputError("no such file", path=str(path))
    if p.is_dir():
        raise InputError("this is a folder, not a file", path=str(path))
    try:
        size = p.stat().st_size
        if size > MAX_INPUT_BYTES:
            raise InputError(f"the file is {size / 1e6:.0f} MB, more than the {MAX_INPUT_BYTES / 1e6:.0f} MB "
                             "accepted", path=str(path), hint="split it into one file per flight")
        raw = p.read_bytes()
    except OSError as e:
        raise InputError(f"cannot read the file ({e.strerror})", path=str(path)) from None
    if b"\x00" in raw[:65536]:
        raise InputError("this is a binary file, not text", path=str(path))
    try:
        return raw.decode("utf-8-sig")
    except UnicodeDecodeError:
        raise InputError("the file is not UTF-8 text", path=str(path), hint="save it as UTF-8 CSV") from None


def read_json(path) -> Any:
    text = _read_text(path)
    try:
        return json.loads(text, parse_constant=_reject_constant)
    except json.JSONDecodeError as e:
        raise InputError(f"not valid JSON (line {e.lineno}, column {e.colno}: {e.msg})", path=str(path)) from None
    except ValueError as e:
        raise InputError(str(e), path=str(path)) from None
    except RecursionError:
        raise InputError("the JSON is nested too deeply", path=str(path)) from None


def _reject_constant(name):
    raise ValueError(f"the JSON holds {name}, which is not a number")


@dataclass(frozen=True)
class CsvTable:
    path: str
    columns: dict[str, list[str]]
    n_rows: int
    line_numbers: list[int]


def read_csv_table(path, required: Sequence[str], optional: Sequence[str] = ()) -> CsvTable:
    """Read a CSV with a header row (lines starting with # are comments)."""
    text = _read_text(path)
    lines = [(i + 1, ln) for i, ln in enumerate(text.splitlines()) if ln.strip() and not ln.lstrip().startswith("#")]
    if not lines:
        raise InputError("the file is empty", path=str(path), hint=f"expected a header row {','.join(required)}")
    if len(lines) > MAX_ROWS:
        raise InputError(f"{len(lines)} rows is more than the {MAX_ROWS} accepted", path=str(path))
    try:
        dialect = csv.excel
        if ";" in lines[0][1] and "," not in lines[0][1]:
            dialect = csv.excel
            dialect = type("semi", (csv.excel,), {"delimiter": ";"})
        rows = list(csv.reader([ln for _, ln in lines], dialect))
    except csv.Error as e:
        raise InputError(f"cannot parse CSV ({e})", path=str(path)) from None
    header = [h.strip().lower() for h in rows[0]]
    missing = [c for c in required if c not in header]
    if missing:
        raise InputError(f"missing column(s) {', '.join(missing)} (header is {','.join(rows[0])})", path=str(path),
                         hint=f"the header row must name {','.join(required)}")
    if len(set(header)) != len(header):
        raise InputError("a column name appears twice in the header", path=str(path))
    if len(rows) == 1:
        raise InputError("the file has a header but no data rows", path=str(path))
    idx = {c: header.index(c) for c in list(required) + [c for c in optional if c in header]}
    cols: dict[str, list[str]] = {c: [] for c in idx}
    for (lineno, _), r in zip(lines[1:], rows[1:]):
        if len(r) != len(header):
            raise InputError(f"line {lineno} has {len(r)} fields, the header has {len(header)}", path=str(path),
                             hint="check for commas inside numbers (use . as the decimal mark)")
        for c, j in idx.items():
            cols[c].append(r[j].strip())
    return CsvTable(str(path), cols, len(rows) - 1, [ln for ln, _ in lines[1:]])


def csv_columns(path) -> list[str]:
    """Lower-cased header names of a CSV (first non-comment line)."""
    text = _read_text(path)
    for ln in text.splitlines():
        if ln.strip() and not ln.lstrip().startswith("#"):
            sep = ";" if (";" in ln and "," not in ln) else ","
            return [h.strip().lower() for h in ln.split(sep)]
    raise InputError("the file is empty", path=str(path), hint="expected a header row such as t,x,y,z")


def numeric_column(table: CsvTable, name: str, *, allow_empty: bool = False) -> np.ndarray:
    out = np.empty(table.n_rows)
    for k, s in enumerate(table.columns[name]):
        if s == "" and allow_empty:
            out[k] = np.nan
            continue
        try:
            v = float(s)
        except ValueError:
            raise InputError(f"line {table.line_numbers[k]}: column {name!r} holds {s[:30]!r}, not a number",
                             path=table.path, hint="use . as the decimal mark and no units in cells") from None
        if not math.isfinite(v):
            raise InputError(f"line {table.line_numbers[k]}: column {name!r} is {s!r}, not a finite number",
                             path=table.path)
        out[k] = v
    return out


def _check_times(t: np.ndarray, table: CsvTable) -> None:
    d = np.diff(t)
    bad = np.nonzero(d <= 0)[0]
    if bad.size:
        k = bad[0] + 1
        what = "repeats" if d[bad[0]] == 0 else "goes back"
        raise InputError(f"line {table.line_numbers[k]}: time {what} ({t[k - 1]:g} s then {t[k]:g} s)",
                         path=table.path, hint="times must increase strictly; sort the rows or remove duplicates")


@dataclass(frozen=True)
class Track:
    """A tracked 3D flight: times [s], positions (N, 3) [m], optional per-point sigma [m]."""

    path: str
    t: np.ndarray
    xyz: np.ndarray
    sigma: np.ndarray | None

    def __len__(self) -> int:
        return len(self.t)


def read_track_csv(path) -> Track:
    """Read a 3D track CSV (columns t,x,y,z; optional sigma)."""
    table = read_csv_table(path, ["t", "x", "y", "z"], ["sigma"])
    t = numeric_column(table, "t")
    xyz = np.column_stack([numeric_column(table, c) for c in "xyz"])
    sigma = numeric_column(table, "sigma") if "sigma" in table.columns else None
    _check_times(t, table)
    if len(t) > MAX_TRACK_POINTS:
        raise InputError(f"{len(t)} points are more than one flight ({MAX_TRACK_POINTS} at most)", path=str(path),
                         hint="split the track into one file per flight")
    if np.abs(xyz).max() > ABSURD_COORDINATE_M:
        k = int(np.argmax(np.abs(xyz).max(axis=1)))
        raise InputError(f"line {table.line_numbers[k]}: a coordinate of {np.abs(xyz[k]).max():g} m is absurd "
                         "for a ball flight", path=str(path), hint="positions must be in metres")
    if sigma is not None and not np.all(sigma > 0):
        k = int(np.argmax(~(sigma > 0)))
        raise InputError(f"line {table.line_numbers[k]}: sigma must be positive", path=str(path))
    if np.ptp(t) > 60:
        raise InputError(f"the track spans {np.ptp(t):.0f} s, longer than any ball flight", path=str(path),
                         hint="times must be seconds; split several flights into several files")
    return Track(str(path), t, xyz, sigma)


def read_ball_file(path) -> Ball:
    d = read_json(path)
    try:
        return ball_from_dict(d)
    except BallTrajError as e:
        raise e.with_path(str(path)) from None


def read_flight_file(path) -> dict:
    """Read and check a flight file (:data:`balltraj.record.schema.SCHEMA`, its required keys)."""
    d = read_json(path)
    if not isinstance(d, dict):
        raise InputError("a flight file must hold a JSON object", path=str(path))
    if d.get("schema") != SCHEMA:
        raise InputError(f"schema is {d.get('schema')!r}, expected {SCHEMA!r}", path=str(path),
                         hint="write it again with this version of balltraj")
    missing = missing_keys(d)
    if missing:
        what = "section" if "." not in missing[0] else "key"
        raise InputError(f"missing {what} {missing[0]!r}" if what == "section" else f"missing key {missing[0]}",
                         path=str(path))
    for k in ("position_m", "velocity_mps"):
        v = d["launch"][k]
        if not (isinstance(v, list) and len(v) == 3 and all(isinstance(x, (int, float)) and not isinstance(x, bool)
                                                             for x in v)):
            raise InputError(f"launch.{k} must be a list of three numbers", path=str(path))
    if "uncertainty" not in d or not isinstance(d["uncertainty"], dict):
        raise InputError("missing section 'uncertainty'", path=str(path))
    return d


@dataclass(frozen=True)
class Observations:
    """Pixel observations: times [s], camera names, u, v [px], optional radius [px], flight ids."""

    path: str
    t: np.ndarray
    camera: list[str]
    uv: np.ndarray
    radius_px: np.ndarray | None
    quality: np.ndarray | None
    flight: np.ndarray | None

    def __len__(self) -> int:
        return len(self.t)

    def one_flight(self, flight: int | None = None) -> "Observations":
        """The observations of one flight: the only one, or flight number ``flight``."""
        if self.flight is None:
            return self
        ids = sorted(set(self.flight.tolist()))
        if flight is None:
            if len(ids) > 1:
                raise InputError(f"the file holds {len(ids)} flights ({', '.join(f'{i:g}' for i in ids)})",
                                 path=self.path, hint="choose one flight by its number", about="flight")
            return self
        if flight not in ids:
            raise InputError(f"there is no flight {flight} (flights: {', '.join(f'{i:g}' for i in ids)})",
                             path=self.path)
        return self.select(self.flight == flight)

    def select(self, mask) -> "Observations":
        m = np.asarray(mask, bool)
        return Observations(self.path, self.t[m], [c for c, k in zip(self.camera, m) if k], self.uv[m],
                            None if self.radius_px is None else self.radius_px[m],
                            None if self.quality is None else self.quality[m],
                            None if self.flight is None else self.flight[m])


def read_observations_csv(path) -> Observations:
    """Read an observations CSV (columns t,camera,u,v; optional radius_px, quality, flight)."""
    table = read_csv_table(path, ["t", "camera", "u", "v"], ["radius_px", "quality", "flight"])
    t = numeric_column(table, "t")
    uv = np.column_stack([numeric_column(table, "u"), numeric_column(table, "v")])
    cams = table.columns["camera"]
    for k, c in enumerate(cams):
        if not c:
            raise InputError(f"line {table.line_numbers[k]}: the camera name is empty", path=str(path))
    radius = numeric_column(table, "radius_px", allow_empty=True) if "radius_px" in table.columns else None
    if radius is not None and np.any(radius[np.isfinite(radius)] <= 0):
        raise InputError("radius_px must be positive", path=str(path))
    quality = numeric_column(table, "quality", allow_empty=True) if "quality" in table.columns else None
    flight = numeric_column(table, "flight") if "flight" in table.columns else None
    if np.abs(uv).max() > 1e5:
        raise InputError("a pixel coordinate beyond 100000 is absurd", path=str(path))
    # time must increase within each camera (and flight)
    keys = [(c, None if flight is None else flight[k]) for k, c in enumerate(cams)]
    last: dict = {}
    for k, key in enumerate(keys):
        if key in last and t[k] <= t[last[key]]:
            raise InputError(f"line {table.line_numbers[k]}: time does not increase for camera {key[0]!r}",
                             path=str(path), hint="sort the rows by time; remove duplicates")
        last[key] = k
    if np.ptp(t) > 3600:
        raise InputError("the observations span more than an hour", path=str(path), hint="times must be seconds")
    return Observations(str(path), t, list(cams), uv, radius, quality, flight)


def read_cameras(path) -> list[Camera]:
    """Read a camera file or a rig file into a list of cameras."""
    try:
        return cameras_from_json(read_json(path))
    except BallTrajError as e:
        raise e.with_path(str(path)) from None


@dataclass(frozen=True)
class CameraObservations:
    """Pixel observations of one flight together with the cameras that made them."""

    observations: Observations
    cameras: list[Camera]

    @property
    def path(self) -> str:
        return self.observations.path


def read_fit_input(path, cameras: list[Camera] | None = None, flight: int | None = None) -> Track | CameraObservations:
    """Read what ``fit`` fits: a 3D track (columns t,x,y,z) or, with cameras, pixel observations
    (columns t,camera,u,v) of one flight. The header decides which."""
    cols = set(csv_columns(path))
    if {"u", "v", "camera"} <= cols:
        if cameras is None:
            raise InputError("this file holds pixel observations (t,camera,u,v); they are fitted through the "
                             "camera file of the camera that made them", path=str(path), about="camera")
        return CameraObservations(read_observations_csv(path).one_flight(flight), list(cameras))
    return read_track_csv(path)
