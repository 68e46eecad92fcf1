"""The flight library: one SQLite file (WAL mode, transactions, a schema version with migrations).

Tables: ``meta`` (schema version), ``sessions``, ``athletes``, ``clips`` (path, content hash,
camera hash, ball, options, status ``ok``/``failed``, error, timings, provenance) and ``flights``
(every result of the flight file as JSON, plus the headline numbers as columns). A clip is
identified by its content hash and the hash of the options it was analysed with, so a clip
analysed again with the same content and options is skipped, and no result is ever stored twice.
Every clip and its flights are written in one transaction: a killed batch leaves the library
consistent, and the next run does what is missing.

One clip (one content hash) holds at most one analysis: a re-run with other options (another
camera, ball, air) is refused unless asked to replace it, so a clip is never stored as two
different balls; a failed analysis is retried on the next run. An identical copy of a stored
clip under another name is kept in ``copies`` (schema version 2) and listed beside it.
"""

from __future__ import annotations

import hashlib
import json
import sqlite3
import time
from contextlib import contextmanager
from pathlib import Path
from typing import Iterable

from .. import __version__
from ..errors import InputError
from ..formats import json_safe
from ..record.schema import HEADLINE_COLUMNS, headline_values

SCHEMA_VERSION = 2

MIGRATIONS = {
    1: [
        """CREATE TABLE IF NOT EXISTS meta (key TEXT PRIMARY KEY, value TEXT NOT NULL)""",
        """CREATE TABLE IF NOT EXISTS sessions (id INTEGER PRIMARY KEY, name TEXT NOT NULL UNIQUE)""",
        """CREATE TABLE IF NOT EXISTS athletes (id INTEGER PRIMARY KEY, name TEXT NOT NULL UNIQUE)""",
        """CREATE TABLE IF NOT EXISTS clips (
            id INTEGER PRIMARY KEY,
            path TEXT NOT NULL,
            content_hash TEXT NOT NULL,
            options_hash TEXT NOT NULL,
            camera_hash TEXT,
            ball TEXT NOT NULL,
            options_json TEXT NOT NULL,
            status TEXT NOT NULL CHECK (status IN ('ok', 'failed')),
            error TEXT,
            n_flights INTEGER NOT NULL DEFAULT 0,
            session_id INTEGER REFERENCES sessions(id),
            athlete_id INTEGER REFERENCES athletes(id),
            tool_version TEXT NOT NULL,
            started_at REAL, finished_at REAL,
            UNIQUE (content_hash, options_hash))""",
        # the headline columns of balltraj.record.schema.HEADLINE_COLUMNS, as they were at version 1
        """CREATE TABLE IF NOT EXISTS flights (
            id INTEGER PRIMARY KEY,
            clip_id INTEGER NOT NULL REFERENCES clips(id) ON DELETE CASCADE,
            flight_index INTEGER NOT NULL,
            launch_speed_mps REAL, elevation_deg REAL, azimuth_deg REAL,
            transverse_rate_rpm REAL, transverse_rate_sigma_rpm REAL,
            drag_coefficient REAL, lift_coefficient REAL,
            target_x_m REAL, deflection_horizontal_m REAL, deflection_vertical_m REAL,
            deflection_horizontal_sigma_m REAL, deflection_vertical_sigma_m REAL,
            record_json TEXT NOT NULL,
            UNIQUE (clip_id, flight_index))""",
        """CREATE INDEX IF NOT EXISTS clips_path ON clips(path)""",
    ],
    2: [
        """CREATE TABLE IF NOT EXISTS copies (
            id INTEGER PRIMARY KEY,
            clip_id INTEGER NOT NULL REFERENCES clips(id) ON DELETE CASCADE,
            path TEXT NOT NULL,
            UNIQUE (clip_id, path))""",
    ],
}


def file_hash(path, chunk: int = 1 << 20) -> str:
    h = hashlib.sha256()
    with open(path, "rb") as f:
        for b in iter(lambda: f.read(chunk), b""):
            h.update(b)
    return h.hexdigest()


def options_hash(options: dict) -> str:
    return hashlib.sha256(json.dumps(options, sort_keys=True, default=str).encode()).hexdigest()


class Library:
    """An open flight library. Use :func:`open_library`."""

    def __init__(self, path: str, conn: sqlite3.Connection):
        self.path = path
        self.conn = conn

    def close(self) -> None:
        self.conn.close()

    def __enter__(self):
        return self

    def __exit__(self, *exc):
        self.close()

    @contextmanager
    def transaction(self):
        try:
            self.conn.execute("BEGIN IMMEDIATE")
        except sqlite3.OperationalError as e:
            raise InputError(f"the library is locked by another program ({e})", path=self.path,
                             hint="wait for the other batch to finish, or use another library file") from None
        try:
            yield self.conn
        except BaseException:
            self.conn.rollback()
            raise
        else:
            self.conn.commit()

    # ------------------------------------------------------------------ writing
    def _named(self, table: str, name: str | None):
        if not name:
            return None
        self.conn.execute(f"INSERT OR IGNORE INTO {table}(name) VALUES (?)", (name,))
        return self.conn.execute(f"SELECT id FROM {table} WHERE name = ?", (name,)).fetchone()[0]

    def is_done(self, content_hash: str, opt_hash: str) -> bool:
        """An ``ok`` analysis of this content with these options is stored."""
        row = self.conn.execute("SELECT 1 FROM clips WHERE content_hash = ? AND options_hash = ? AND status = 'ok'",
                                (content_hash, opt_hash)).fetchone()
        return row is not None

    def analyses(self, content_hash: str) -> list[sqlite3.Row]:
        """Every stored analysis of one clip content (any name, any options)."""
        return self.conn.execute("SELECT * FROM clips WHERE content_hash = ? ORDER BY id", (content_hash,)).fetchall()

    def add_copy(self, clip_id: int, path: str) -> bool:
        """Note an identical copy of a stored clip under another name. False if already noted."""
        with self.transaction() as c:
            known = c.execute("SELECT 1 FROM clips WHERE id = ? AND path = ?", (clip_id, path)).fetchone()
            if known:
                return False
            cur = c.execute("INSERT OR IGNORE INTO copies(clip_id, path) VALUES (?, ?)", (clip_id, path))
            return cur.rowcount > 0

    def copies(self) -> dict[int, list[str]]:
        out: dict[int, list[str]] = {}
        for r in self.conn.execute("SELECT clip_id, path FROM copies ORDER BY id"):
            out.setdefault(r["clip_id"], []).append(r["path"])
        return out

    def remove(self, clip_ids) -> int:
        """Delete clips (their flights and copies go with them) in one transaction; how many went."""
        ids = [int(i) for i in clip_ids]
        with self.transaction() as c:
            n = 0
            for i in ids:
                n += c.execute("DELETE FROM clips WHERE id = ?", (i,)).rowcount
        return n

    def record(self, *, path: str, content_hash: str, opt_hash: str, options: dict, camera_hash: str | None,
               ball: str, records: list[dict] | None, error: str | None, session: str | None = None,
               athlete: str | None = None, started_at: float | None = None, replace: bool = False) -> bool:
        """Store one clip's outcome and its flights in one transaction. False if already stored.

        Earlier failed analyses of the same content are replaced; an earlier ``ok`` one with other
        options is replaced only with ``replace`` (otherwise False: it is kept)."""
        with self.transaction() as c:
            if self.is_done(content_hash, opt_hash):
                return False
            ok_other = c.execute("SELECT 1 FROM clips WHERE content_hash = ? AND status = 'ok'",
                                 (content_hash,)).fetchone()
            if ok_other and not replace:
                return False
            c.execute("DELETE FROM clips WHERE content_hash = ? AND (status = 'failed' OR ?)",
                      (content_hash, int(bool(replace))))
            sid, aid = self._named("sessions", session), self._named("athletes", athlete)
            status = "ok" if records else "failed"
            cur = c.execute(
                "INSERT INTO clips(path, content_hash, options_hash, camera_hash, ball, options_json, status, error, "
                "n_flights, session_id, athlete_id, tool_version, started_at, finished_at) "
                "VALUES (?,?,?,?,?,?,?,?,?,?,?,?,?,?)",
                (path, content_hash, opt_hash, camera_hash, ball, json.dumps(options, sort_keys=True, default=str),
                 status, error, len(records or []), sid, aid, __version__, started_at, time.time()))
            clip_id = cur.lastrowid
            cols = ", ".join(HEADLINE_COLUMNS)
            marks = ",".join("?" * (len(HEADLINE_COLUMNS) + 3))
            for i, rec in enumerate(records or []):
                head = headline_values(rec)
                c.execute(f"INSERT INTO flights(clip_id, flight_index, {cols}, record_json) VALUES ({marks})",
                          (clip_id, i + 1, *(head[k] for k in HEADLINE_COLUMNS),
                           json.dumps(json_safe(rec), allow_nan=False)))
        return True

    # ------------------------------------------------------------------ reading
    def clips(self) -> list[sqlite3.Row]:
        return self.conn.execute(
            "SELECT c.*, s.name AS session, a.name AS athlete FROM clips c LEFT JOIN sessions s ON s.id = c.session_id "
            "LEFT JOIN athletes a ON a.id = c.athlete_id ORDER BY c.id").fetchall()

    def flights(self, clip_id: int | None = None) -> list[sqlite3.Row]:
        q = ("SELECT f.*, c.path, c.status, c.ball, s.name AS session, a.name AS athlete FROM flights f JOIN clips c ON c.id = "
             "f.clip_id LEFT JOIN sessions s ON s.id = c.session_id LEFT JOIN athletes a ON a.id = c.athlete_id")
        if clip_id is None:
            return self.conn.execute(q + " ORDER BY f.clip_id, f.flight_index").fetchall()
        return self.conn.execute(q + " WHERE f.clip_id = ? ORDER BY f.flight_index", (clip_id,)).fetchall()


def _check_sqlite_file(path: Path) -> None:
    if path.exists():
        if path.is_dir():
            raise InputError("this is a folder, not a library file", path=str(path))
        if path.stat().st_size > 0:
            with open(path, "rb") as f:
                head = f.read(16)
            if head != b"SQLite format 3\x00":
                raise InputError("this file is not an SQLite library", path=str(path),
                                 hint="give a new file name to create a library")


def open_library(path, *, create: bool = True, wait_s: float = 15.0) -> Library:
    """Open (or create) a library, migrating an older schema; refuse a newer one. Another process
    opening or migrating the same file at that moment is waited for (up to ``wait_s``)."""
    deadline = time.monotonic() + wait_s
    while True:
        try:
            return _open_library(path, create=create)
        except _Busy as e:
            if time.monotonic() > deadline:
                raise InputError(f"the library is locked by another program ({e})", path=str(path),
                                 hint="wait for the other batch to finish, or use another library file") from None
            time.sleep(0.05)


class _Busy(Exception):
    pass


def _schema_version(conn: sqlite3.Connection, path) -> int:
    """The library's schema version, 0 for an empty file. One statement, so one snapshot: reading
    "is there a meta table" and "is the file empty" separately let another process's schema land in
    between, and a half-seen schema was taken for a foreign SQLite file."""
    names = {r[0] for r in conn.execute("SELECT name FROM sqlite_master")}
    if "meta" in names:
        # meta and its version row are written in one transaction, so a seen meta table has its row
        row = conn.execute("SELECT value FROM meta WHERE key='schema_version'").fetchone()
        return int(row[0]) if row else 0
    if names:
        conn.close()
        raise InputError("this SQLite file is not a balltraj library", path=str(path),
                         hint="give a new file name to create a library")
    return 0


def _open_library(path, *, create: bool) -> Library:
    p = Path(path)
    _check_sqlite_file(p)
    if not p.exists():
        if not create:
            raise InputError("no such library", path=str(path))
        if not (p.parent if str(p.parent) else Path(".")).is_dir():
            raise InputError("the folder for the library does not exist", path=str(path))
    conn = None
    try:
        conn = sqlite3.connect(str(p), timeout=10.0, isolation_level=None)
        conn.row_factory = sqlite3.Row
        conn.execute("PRAGMA journal_mode=WAL")
        conn.execute("PRAGMA foreign_keys=ON")
        conn.execute("PRAGMA busy_timeout=10000")
        version = _schema_version(conn, path)
    except sqlite3.DatabaseError as e:
        if conn is not None:
            conn.close()
        if isinstance(e, sqlite3.OperationalError) and ("locked" in str(e) or "busy" in str(e)):
            raise _Busy(str(e)) from None
        raise InputError(f"cannot open the library ({e})", path=str(path)) from None
    if version > SCHEMA_VERSION:
        conn.close()
        raise InputError(f"the library has schema version {version}, newer than this balltraj ({SCHEMA_VERSION})",
                         path=str(path), hint="upgrade balltraj to read it")
    if version < SCHEMA_VERSION:
        try:
            conn.execute("BEGIN IMMEDIATE")
            # Another process may have made or migrated the schema since the read above: read it again
            # inside the write transaction, which no other writer can enter.
            version = _schema_version(conn, path)
            for v in range(version + 1, SCHEMA_VERSION + 1):
                for stmt in MIGRATIONS[v]:
                    conn.execute(stmt)
            conn.execute("INSERT OR REPLACE INTO meta(key, value) VALUES ('schema_version', ?)", (str(SCHEMA_VERSION),))
            conn.execute("COMMIT")
        except sqlite3.OperationalError as e:
            conn.rollback()
            conn.close()
            if "locked" in str(e) or "busy" in str(e):
                raise _Busy(str(e)) from None
            raise InputError(f"the library is read-only or damaged ({e})", path=str(path)) from None
    return Library(str(p), conn)


def export_rows(lib: Library, per_flight: bool = False) -> tuple[list[str], Iterable[list]]:
    """Rows for export: one a clip (first flight's headline numbers) or one a flight."""
    header = ["source", "status", "session", "athlete", "ball", "n_flights", "flight", *HEADLINE_COLUMNS,
              "error", "content_hash", "tool_version"]
    flights = {}
    for f in lib.flights():
        flights.setdefault(f["clip_id"], []).append(f)
    cols = list(HEADLINE_COLUMNS)

    def rows():
        for c in lib.clips():
            fl = flights.get(c["id"], [])
            base = [c["path"], c["status"], c["session"] or "", c["athlete"] or "", c["ball"], c["n_flights"]]
            tail = [c["error"] or "", c["content_hash"], c["tool_version"]]
            if not fl:  # a failed clip: empty numbers (None), so every column keeps one type (Parquet)
                yield base + [None] + [None] * len(cols) + tail
                continue
            for f in (fl if per_flight else fl[:1]):
                yield base + [f["flight_index"]] + [f[k] for k in cols] + tail

    return header, rows()


def compare(lib: Library, by: str, a: str, b: str) -> list[dict]:
    """Mean and spread of speed, transverse spin and deflection for two sessions or athletes, one
    group per ball: flights of different balls are never averaged together."""
    import numpy as np

    key = {"session": "session", "athlete": "athlete"}[by]
    out = []
    rows = lib.flights()
    for name in (a, b):
        sel = [r for r in rows if (r[key] or "") == name and r["status"] == "ok"]
        if not sel:
            raise InputError(f"no flights of {by} {name!r} in the library", path=lib.path)
        for ball in sorted({r["ball"] for r in sel}):
            group = [r for r in sel if r["ball"] == ball]
            d = {"name": name, "ball": ball, "n": len(group)}
            for col in ("launch_speed_mps", "transverse_rate_rpm", "deflection_horizontal_m", "deflection_vertical_m"):
                v = np.array([np.nan if r[col] is None else r[col] for r in group], float)
                d[col] = (float(np.nanmean(v)) if np.isfinite(v).any() else float("nan"),
                          float(np.nanstd(v, ddof=1)) if np.isfinite(v).sum() > 1 else 0.0)
            out.append(d)
    return out
