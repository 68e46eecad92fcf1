"""The typer app and the one way a command is registered: it returns the text to print, and a
:class:`~balltraj.errors.BallTrajError` becomes one line on stderr and exit status 2."""

from __future__ import annotations

import functools
import os

# quiet OpenCV's and FFmpeg's own console chatter (errors reach the user as one balltraj line)
os.environ.setdefault("OPENCV_LOG_LEVEL", "OFF")
os.environ.setdefault("OPENCV_FFMPEG_LOGLEVEL", "-8")
from typing import Optional

import typer

from ..errors import BallTrajError

app = typer.Typer(
    rich_markup_mode=None,
    add_completion=False,
    no_args_is_help=True,
    pretty_exceptions_enable=False,
    help="balltraj: what a thrown, pitched, kicked or struck ball really did. "
    "Bare numbers are SI (m, s, m/s); units such as 92mph, 2300rpm, 60.5ft are accepted where noted. "
    "Keep people and cameras out of the ball's path; results are estimates, not officiating decisions.",
)


def _echo(text: str = "") -> None:
    typer.echo(text)


#: the option that sets each input a low layer can complain about (BallTrajError.about)
OPTION_FOR = {"target_x": "--target-x", "start_near": "--start-near", "ball": "--ball", "ball_file": "--ball-file",
              "capture_fps": "--capture-fps", "flight": "--flight", "camera": "--camera", "lens": "--lens",
              "board_size": "--cols/--rows"}


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

        return group.command(name)(run)

    return register
