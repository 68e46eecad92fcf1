"""The ``workbench`` command: serve the coach's workbench for a folder on this computer."""

from __future__ import annotations

from pathlib import Path
from typing import Optional

import typer

from ..errors import InputError
from .app import _command, app

LOOPBACK = {"127.0.0.1", "localhost", "::1"}


@_command(app)
def workbench(
    folder: Path = typer.Argument(..., help="Folder of clips (camera files are saved beside them)."),
    port: int = typer.Option(8765, "--port", help="Port to listen on."),
    host: str = typer.Option("127.0.0.1", "--host", help="Interface to listen on; other than 127.0.0.1 only on "
                             "purpose (anyone who can reach it can read the folder's clips)."),
    library: Optional[Path] = typer.Option(None, "--library", help="Flight library file "
                                           "(default: balltraj-library.sqlite in FOLDER)."),
):
    """The coach's workbench in the browser: calibrate by clicking, run the analysis, review and re-fit, history."""
    if not 1 <= port <= 65535:
        raise InputError(f"--port must be 1..65535, got {port}")
    import uvicorn

    from ..workbench import create_app

    hosts = ["127.0.0.1", "localhost"] if host in LOOPBACK else ["127.0.0.1", "localhost", host]
    web = create_app(folder, library=library, allowed_hosts=hosts)
    if host not in LOOPBACK:
        typer.echo(f"warning: listening on {host}: anyone who can reach this address can see the clips in {folder} "
                   "and write camera files there; use 127.0.0.1 unless you mean it", err=True)
    shown = f"[{host}]" if ":" in host else host
    typer.echo(f"balltraj workbench for {folder}: open http://{shown}:{port}/ in a browser (Ctrl+C stops it)")
    uvicorn.run(web, host=host, port=port, log_level="warning")
    return "workbench stopped"
