"""Small pieces several commands share: progress bars on stderr, labels kept in flight files,
output folders written whole or not at all."""

from __future__ import annotations

import os
import shutil
import sys
import tempfile
import time
from contextlib import contextmanager
from dataclasses import replace
from pathlib import Path
from typing import Callable, Iterator, Optional

from ..errors import InputError
from ..formats import atomic_write_bytes, read_ball_file, write_csv
from ..record.targets import choose_plane
from ..physics.air import AirConditions, air_conditions
from ..physics.balls import Ball, get_ball

MAX_LABEL_CHARS = 500


@contextmanager
def progress_bar(label: str, show: bool, *, total: Optional[int] = None,
                 every_s: float = 5.0) -> Iterator[Optional[Callable]]:
    """Progress on stderr, as a callback ``(done, total)`` for library code; None when not shown
    (library code prints nothing itself). On a terminal a rich bar; otherwise (a log, a pipe) a
    plain line when it starts and every ``every_s`` seconds. ``total`` overrides the total the
    library reports (e.g. the frames up to ``--end`` rather than the whole clip)."""
    if not show:
        yield None
        return
    if not sys.stderr.isatty():
        state = {"last": time.monotonic(), "said": False}

        def plain(done, n):
            n = total or n
            now = time.monotonic()
            if not state["said"] or now - state["last"] >= every_s:
                state["said"], state["last"] = True, now
                of = f" of {n}" if n else ""
                print(f"{label}: {done}{of} done", file=sys.stderr, flush=True)

        yield plain
        return
    from rich.console import Console
    from rich.progress import BarColumn, MofNCompleteColumn, Progress, TextColumn, TimeRemainingColumn

    with Progress(TextColumn(label), BarColumn(), MofNCompleteColumn(), TimeRemainingColumn(), transient=True,
                  console=Console(stderr=True)) as bar:
        task = bar.add_task(label, total=total)
        yield lambda done, n: bar.update(task, completed=min(done, total or done), total=(total or n) or None)


def with_default_plane(settings, start_x_m: Optional[float]):
    """Settings with the game's natural target plane when ``--target-x`` was not given, and the
    words saying which plane is used (:mod:`balltraj.record.targets`)."""
    if settings.target_x_m is not None:
        return settings, f"x = {settings.target_x_m:.2f} m (given with --target-x)"
    x, words = choose_plane(settings.ball.name, start_x_m)
    return (settings if x is None else replace(settings, target_x_m=x)), words


def mark_plane(rec: dict, words: Optional[str]) -> dict:
    """Say in the record how its target plane was chosen."""
    if words:
        rec["deflection"]["target_plane"] = words
    return rec


def write_csv_sidecar(path: Path, header, rows, notes: str) -> Path:
    """A CSV that ``pandas.read_csv`` reads without options (no comment lines), with its notes
    (where it came from) in ``NAME.notes.txt`` beside it. Returns the notes file."""
    write_csv(path, header, rows)
    side = Path(path).with_suffix(".notes.txt")
    atomic_write_bytes(side, (notes.rstrip() + "\n").encode("utf-8"))
    return side


def add_labels(rec: dict, labels: Optional[dict]) -> dict:
    """Keep the user's labels (athlete, session, notes) in a record."""
    for k, v in (labels or {}).items():
        if v is not None:
            if len(v) > MAX_LABEL_CHARS:
                raise InputError(f"--{k} is longer than {MAX_LABEL_CHARS} characters")
            rec[k] = v
    return rec


def check_output_folder(out_dir: Path) -> Path:
    """The folder ``out_dir`` can be made: its parent exists (checked before any work)."""
    out_dir = Path(out_dir)
    parent = out_dir.parent if str(out_dir.parent) else Path(".")
    if not parent.is_dir():
        raise InputError("the folder that should hold --out does not exist", path=str(out_dir))
    if out_dir.exists() and not out_dir.is_dir():
        raise InputError("--out must be a folder", path=str(out_dir))
    return out_dir


@contextmanager
def folder_written_whole(out_dir: Path) -> Iterator[Path]:
    """Yield a temporary folder beside ``out_dir``; when the block ends without error its files
    are moved into ``out_dir`` (each by one rename), otherwise nothing is left behind."""
    out_dir = check_output_folder(out_dir)
    parent = out_dir.parent if str(out_dir.parent) else Path(".")
    tmp = Path(tempfile.mkdtemp(prefix=f".{out_dir.name}.", dir=parent))
    try:
        yield tmp
        out_dir.mkdir(exist_ok=True)
        for item in tmp.iterdir():
            os.replace(item, out_dir / item.name)
    finally:
        shutil.rmtree(tmp, ignore_errors=True)


#: names that mean different balls in different countries: which one balltraj takes
AMBIGUOUS_BALLS = {"football": "soccer ball (association football); for other codes define the ball with "
                               "--ball-file"}


def ball_note(name: str) -> Optional[str]:
    """A console note when ``--ball`` names a ball ambiguously (e.g. football)."""
    what = AMBIGUOUS_BALLS.get(str(name).strip().lower())
    return None if what is None else f"note: --ball {name} is taken as a {what}"


def load_ball(name: str, ball_file: Optional[Path] = None) -> Ball:
    """A ball from the catalogue, or defined by a ``--ball-file``."""
    extra = {}
    if ball_file is not None:
        b = read_ball_file(ball_file)
        extra[b.name] = b
    return get_ball(name, extra)


def air_from(*, density: Optional[float] = None, temperature_c: Optional[float] = None,
             pressure_pa: Optional[float] = None, humidity_pct: Optional[float] = None,
             altitude_m: Optional[float] = None) -> AirConditions:
    """The air from a density [kg/m^3] or from the weather [deg C, Pa, %] and altitude [m]."""
    return air_conditions(density=density, temperature_c=temperature_c, pressure_pa=pressure_pa,
                          humidity_pct=humidity_pct, altitude_m=altitude_m)
