"""Batch runs and the flight library group."""

from __future__ import annotations

import sys
from pathlib import Path
from typing import Optional

import typer

from .app import _command, app, new_group
from .options import (AirDensityOpt, AltitudeOpt, BallFileOpt, CaptureFpsOpt, HumidityOpt, PressureOpt, StartNearOpt,
                      StartSigmaOpt, TemperatureOpt, air_options, ball_option, fit_settings)


@_command(app)
def batch(
    folder: Path = typer.Argument(..., help="Folder of clips."),
    camera: Path = typer.Option(..., "--camera", help="Camera file of the camera that filmed the clips."),
    ball: str = typer.Option(..., "--ball", help="Ball name."),
    library: Path = typer.Option(..., "--library", help="Library file (SQLite; created if missing)."),
    workers: int = typer.Option(1, "--workers", help="Local worker processes."),
    cluster: Optional[str] = typer.Option(None, "--cluster", help="Dask scheduler address (tcp://host:8786)."),
    target_x: Optional[str] = typer.Option(None, "--target-x", help="Target plane x [m]."),
    start_near: StartNearOpt = None,
    start_sigma: StartSigmaOpt = 0.3,
    capture_fps: CaptureFpsOpt = None,
    air_density: AirDensityOpt = None,
    temperature: TemperatureOpt = None,
    pressure: PressureOpt = None,
    humidity: HumidityOpt = None,
    altitude: AltitudeOpt = None,
    session: Optional[str] = typer.Option(None, "--session", help="Session name for these clips."),
    athlete: Optional[str] = typer.Option(None, "--athlete", help="Athlete name for these clips."),
    ball_file: BallFileOpt = None,
):
    """Analyse every clip in a folder into the flight library; resumable, never doubles a clip."""
    from ..commands.library import run_batch_cmd

    settings = fit_settings(ball_option(ball, ball_file), air_options(air_density, temperature, pressure, humidity, altitude),
                         target_x, start_near, start_sigma)
    return run_batch_cmd(folder=folder, camera=camera, settings=settings, library=library, workers=workers,
                         cluster=cluster, capture_fps=capture_fps, session=session, athlete=athlete,
                         show_progress=sys.stderr.isatty())


library_app = new_group(help="The flight library: list, show, remove, export and compare analysed clips.")
app.add_typer(library_app, name="library")


@_command(library_app, "list")
def library_list(library: Path = typer.Argument(..., help="Library file.")):
    """One line a clip: status, flights, session, athlete."""
    from ..commands.library import run_library_list

    return run_library_list(library)


@_command(library_app, "show")
def library_show(library: Path = typer.Argument(..., help="Library file."),
                 clip: str = typer.Argument(..., help="Clip id, path or file name.")):
    """The flights of one clip."""
    from ..commands.library import run_library_show

    return run_library_show(library, clip)


@_command(library_app, "export")
def library_export(
    library: Path = typer.Argument(..., help="Library file."),
    out: Path = typer.Option(..., "-o", "--out", help="CSV (or Parquet) file to write."),
    per_flight: bool = typer.Option(False, "--per-flight", help="One row a flight instead of one a clip."),
    fmt: str = typer.Option("csv", "--format", help="csv or parquet."),
):
    """Export the library: one row a clip with source, status and the headline results."""
    from ..commands.library import run_library_export

    return run_library_export(library, out, per_flight, fmt)


@_command(library_app, "compare")
def library_compare(
    library: Path = typer.Argument(..., help="Library file."),
    a: str = typer.Argument(..., help="First session or athlete."),
    b: str = typer.Argument(..., help="Second session or athlete."),
    by: str = typer.Option("session", "--by", help="session or athlete."),
):
    """Mean and spread of speed, transverse spin and deflection for two sessions or athletes."""
    from ..commands.library import run_library_compare

    return run_library_compare(library, by, a, b)
