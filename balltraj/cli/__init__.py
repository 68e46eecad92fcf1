"""The balltraj command line: parse options (every unit into SI once), call a command, print.
No computation here. Heavy modules (scipy, matplotlib, cv2) load with the command that needs them,
so ``balltraj --help`` starts quickly."""

from __future__ import annotations

import sys

import typer

from . import flight, video, library, calibrate, workbench  # noqa: F401, I001  (each registers its commands, in this order)
from .app import app

__all__ = ["app", "main"]


def main() -> None:
    """Entry point: every way out is an exit status and at most one line on stderr."""
    try:  # typer ships its own copy of click in recent versions
        from typer import _click as click  # type: ignore[attr-defined]
    except ImportError:  # pragma: no cover - older typer uses click itself
        import click

    exc = click.exceptions
    abort = getattr(exc, "Abort", KeyboardInterrupt)
    try:
        rv = app(standalone_mode=False)
    except SystemExit:
        raise
    except getattr(exc, "NoArgsIsHelpError", ()) as e:  # bare `balltraj` or a bare group: its help, exit 0
        typer.echo(e.format_message())
        sys.exit(0)
    except exc.UsageError as e:
        cmd = e.ctx.command_path if e.ctx is not None else "balltraj"
        typer.echo(f"error: {' '.join(e.format_message().split())}; see '{cmd} --help'", err=True)
        sys.exit(2)
    except abort:
        typer.echo("error: interrupted; no partial output was left", err=True)
        sys.exit(130)
    except getattr(exc, "Exit", typer.Exit) as e:
        sys.exit(e.exit_code)
    except KeyboardInterrupt:
        typer.echo("error: interrupted; no partial output was left", err=True)
        sys.exit(130)
    except BrokenPipeError:
        sys.exit(0)
    except Exception as e:  # a bug: say so, briefly
        typer.echo(f"error: internal error ({type(e).__name__}: {' '.join(str(e).split())}); this is a bug in "
                   "balltraj, please report it with the command you ran", err=True)
        sys.exit(1)
    sys.exit(rv if isinstance(rv, int) else 0)
