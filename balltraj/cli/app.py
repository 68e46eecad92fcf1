"""The typer app and the one way a command is registered: it returns the text to print, and a
:class:`~balltraj.errors.BallTrajError` becomes one line on stderr and exit status 2.

Bare ``balltraj`` (or a bare group such as ``balltraj library``) prints its help on stdout and
exits 0. ``-h`` is ``--help``; ``--version`` prints the version. Every value placeholder in the
help is a word (``FILE``, ``X,Y,Z``, ``SPEED``), never a type name.
"""

from __future__ import annotations

import functools
import os

# quiet OpenCV's and FFmpeg's own console chatter (errors reach the user as one balltraj line)
os.environ.setdefault("OPENCV_LOG_LEVEL", "OFF")
os.environ.setdefault("OPENCV_FFMPEG_LOGLEVEL", "-8")
from typing import Optional

import typer
from typer.core import TyperCommand, TyperGroup

from .. import __version__
from ..errors import BallTrajError

CONTEXT = {"help_option_names": ["-h", "--help"]}

#: option name -> placeholder shown in the help (others: FILE for paths, N, NUMBER, TEXT)
METAVARS = {
    "--ball": "NAME", "--position": "X,Y,Z", "--start-near": "X,Y,Z", "--spin-axis": "X,Y,Z",
    "--speed": "SPEED", "--elevation": "DEG", "--azimuth": "DEG", "--spin-rpm": "RATE",
    "--target-x": "DISTANCE", "--altitude": "HEIGHT", "--what-if-altitude": "HEIGHT",
    "--temperature": "DEG_C", "--what-if-temperature": "DEG_C", "--pressure": "PRESSURE",
    "--humidity": "PERCENT", "--air-density": "KG/M3", "--units": "metric|imperial",
    "--format": "FORMAT", "--by": "session|athlete", "--cluster": "ADDRESS", "--athlete": "NAME",
    "--session": "NAME", "--name": "NAME", "--notes": "TEXT", "--template": "NAME", "--image-size": "WxH",
    "--lift-model": "NAME", "--start-sigma": "METRES", "--start": "SECONDS", "--end": "SECONDS",
    "--duration": "SECONDS", "--exposure": "SECONDS", "--spin-decay": "SECONDS", "--capture-fps": "FPS",
    "--fps": "FPS", "--square-mm": "MM", "--library": "FILE",
}
_BY_TYPE = {"path": "FILE", "int": "N", "float": "NUMBER", "str": "TEXT"}


def _type_word(p) -> str:
    try:
        name = p.bare_type()
    except Exception:  # noqa: BLE001 - only the help's wording depends on it
        name = getattr(getattr(p, "type", None), "name", "")
    name = str(name).lower()
    name = name[5:-1] if name.startswith("list[") else name
    return _BY_TYPE.get(name, "VALUE")


def _readable(params) -> None:
    for p in params:
        desc = getattr(p, "type_descriptor", None)
        if p.metavar is not None or getattr(p, "is_flag", False) or getattr(desc, "annotation", None) is bool:
            continue
        if p.param_type_name == "argument":  # CLIP, INPUTS... (click's own style, no braces or type names)
            word = (p.name or "value").upper()
            p.metavar = word
            shown = (word if p.required else f"[{word}]") + ("..." if p.nargs != 1 else "")
            p._usage_display_name = lambda shown=shown: shown
            p.display_type_rich = lambda ctx: None
            continue
        long = [o for o in p.opts if o.startswith("--")]
        word = METAVARS.get(long[0] if long else "", None)
        if word is None:
            word = _type_word(p)
            if word == "FILE" and long and long[0] == "--out" and "-o" not in p.opts:
                word = "FOLDER"
        p.metavar = word


class ReadableCommand(TyperCommand):
    """A command whose help names each value in words."""

    def __init__(self, *a, **k):
        super().__init__(*a, **k)
        _readable(self.params)


class ReadableGroup(TyperGroup):
    def __init__(self, *a, **k):
        super().__init__(*a, **k)
        _readable(self.params)


def _version(value: bool) -> None:
    if value:
        typer.echo(f"balltraj {__version__}")
        raise typer.Exit(0)


def new_group(**kw) -> typer.Typer:
    """A typer app (or sub-group) with -h, word placeholders and help on a bare call."""
    return typer.Typer(rich_markup_mode=None, add_completion=False, no_args_is_help=True, pretty_exceptions_enable=False,
                       context_settings=CONTEXT, cls=ReadableGroup, **kw)


app = new_group(
    help="balltraj: what a thrown, pitched, kicked or struck ball really did. "
    "Bare numbers are SI (m, s, m/s); units such as 92mph, 2300rpm, 60.5ft are accepted where noted. "
    "Keep people and cameras out of the ball's path; results are estimates, not officiating decisions.",
)


@app.callback()
def _root(version: bool = typer.Option(False, "--version", callback=_version, is_eager=True,
                                       help="Print the version and exit.")):
    """balltraj: what a thrown, pitched, kicked or struck ball really did. Bare numbers are SI (m, s, m/s);
    units such as 92mph, 2300rpm, 60.5ft are accepted where noted. Keep people and cameras out of the ball's
    path; results are estimates, not officiating decisions."""


def _echo(text: str = "") -> None:
    typer.echo(text)


#: the option that sets each input a low layer can complain about (BallTrajError.about)
OPTION_FOR = {"target_x": "--target-x", "start_near": "--start-near", "ball": "--ball", "ball_file": "--ball-file",
              "capture_fps": "--capture-fps", "flight": "--flight", "camera": "--camera", "lens": "--lens",
              "board_size": "--cols/--rows", "force": "--force", "square_mm": "--square-mm", "units": "--units", "aero_model": "--aero-model"}


def error_line(err: BallTrajError) -> str:
    """The one line a user sees for an error, naming the option it is about."""
    text = err.one_line()
    option = OPTION_FOR.get(err.about or "")
    return f"{text} (see {option})" if option and option not in text else text


def _fail(err: BallTrajError) -> None:
    typer.echo(f"error: {error_line(err)}", err=True)
    raise typer.Exit(2)


def _command(group: typer.Typer, name: Optional[str] = None):
    """Register a command whose function returns the text to print. A BallTrajError raised while it
    runs (reading its options included) becomes one line on stderr and exit status 2."""
    def register(fn):
        @functools.wraps(fn)
        def run(*args, **kwargs):
            try:
                text = fn(*args, **kwargs)
            except BallTrajError as e:
                _fail(e)
            _echo(text)

        return group.command(name, cls=ReadableCommand, context_settings=CONTEXT)(run)

    return register
