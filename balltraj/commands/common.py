"""Small pieces several commands share: progress bars on stderr, labels kept in flight files,
output folders written whole or not at all."""

from __future__ import annotations

import os
import shutil
import tempfile
from contextlib import contextmanager
from pathlib import Path
from typing import Callable, Iterator, Optional

from ..errors import InputError
from ..formats import read_ball_file
from ..physics.air import AirConditions, air_conditions
from ..physics.balls import Ball, get_ball

MAX_LABEL_CHARS = 500


@contextmanager
def progress_bar(label: str, show: bool) -> Iterator[Optional[Callable]]:
    """A rich progress bar on stderr, as a callback ``(done, total)`` for library code; None when
    not shown (library code prints nothing itself)."""
    if not show:
        yield None
        return
    from rich.console import Console
    from rich.progress import BarColumn, MofNCompleteColumn, Progress, TextColumn, TimeRemainingColumn

    with Progress(TextColumn(label), BarColumn(), MofNCompleteColumn(), TimeRemainingColumn(), transient=True,
                  console=Console(stderr=True)) as bar:
        task = bar.add_task(label, total=None)
        yield lambda done, total: bar.update(task, completed=done, total=total or None)


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
