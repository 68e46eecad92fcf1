"""Batch runs and the flight library group."""

from __future__ import annotations

from pathlib import Path
from typing import List, Optional

import typer

from .app import _command, app, new_group
from .options import (AeroModelOpt, ForceOpt, WindOpt, WindUncertaintyOpt, AirDensityOpt, AltitudeOpt, BallFileOpt, CaptureFpsOpt, HumidityOpt, PressureOpt, StartNearOpt,
                      StartSigmaOpt, TemperatureOpt, UnitsOpt, air_options, ball_option, fit_settings,
                      units_option)


@_command(app)
def batch(
    folder: Path = typer.Argument(..., help="Folder of clips."),
    camera: Path = typer.Option(..., "--camera", help="Camera file of the camera that filmed the clips."),
    ball: str = typer.Option(..., "--ball", help="Ball name."),
    library: Path = typer.Option(..., "--library", help="Library file (SQLite; created if missing)."),
    workers: int = typer.Option(1, "--workers", help="Local worker processes."),
    cluster: Optional[str] = typer.Option(None, "--cluster", help="Dask scheduler address (tcp://host:8786)."),
    target_x: Optional[str] = typer.Option(None, "--target-x", help="Target plane x [m] (default: the game's natural "
                                           "plane when --start-near is before it; else the last tracked x)."),
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
    aero_model: AeroModelOpt = "auto",
    wind: WindOpt = None,
    wind_uncertainty: WindUncertaintyOpt = None,
    force: ForceOpt = False,
    ball_file: BallFileOpt = None,
    replace: bool = typer.Option(False, "--replace", help="Analyse again clips already in the library with other "
                                 "options (camera, ball, air), replacing their results."),
):
    """Analyse every clip in a folder into the flight library; resumable, never doubles a clip. A clip
    analysed before with other options is kept as it was (say --replace to redo it); failed clips are retried."""
    from ..commands.library import run_batch_cmd

    settings = fit_settings(ball_option(ball, ball_file), air_options(air_density, temperature, pressure, humidity, altitude),
                         target_x, start_near, start_sigma, aero_model=aero_model, wind=wind, force=force,
                         wind_uncertainty=wind_uncertainty)
    return run_batch_cmd(folder=folder, camera=camera, settings=settings, library=library, workers=workers,
                         cluster=cluster, capture_fps=capture_fps, session=session, athlete=athlete,
                         show_progress=True, replace=replace)


library_app = new_group(help="The flight library: list, show, remove, export and compare analysed clips.")
app.add_typer(library_app, name="library")


@_command(library_app, "list")
def library_list(library: Path = typer.Argument(..., help="Library file."), units: UnitsOpt = "metric"):
    """One line a clip: status, ball, flights, session, athlete, the first flight's result."""
    from ..commands.library import run_library_list

    return run_library_list(library, units_option(units))


@_command(library_app, "show")
def library_show(library: Path = typer.Argument(..., help="Library file."),
                 clip: str = typer.Argument(..., help="Clip id, path or file name."), units: UnitsOpt = "metric"):
    """The flights of one clip, with their uncertainties and warnings."""
    from ..commands.library import run_library_show

    return run_library_show(library, clip, units_option(units))


@_command(library_app, "remove")
def library_remove(library: Path = typer.Argument(..., help="Library file."),
                   clips: List[str] = typer.Argument(..., help="Clip ids, paths or file names to delete.")):
    """Delete clips and their flights from the library (e.g. one analysed with the wrong ball)."""
    from ..commands.library import run_library_remove

    return run_library_remove(library, list(clips))


@_command(library_app, "export")
def library_export(
    library: Path = typer.Argument(..., help="Library file."),
    out: Path = typer.Option(..., "-o", "--out", help="CSV (or Parquet) file to write."),
    per_flight: bool = typer.Option(False, "--per-flight", help="One row a flight instead of one a clip."),
    fmt: str = typer.Option("csv", "--format", help="csv or parquet."),
):
    """Export the library: one row a clip with source, status and the headline results."""
    from ..commands.library import run_library_export

    return run_library_export(library, out, per_flight, fmt.lower())


@_command(library_app, "compare")
def library_compare(
    library: Path = typer.Argument(..., help="Library file."),
    a: str = typer.Argument(..., help="First session or athlete."),
    b: str = typer.Argument(..., help="Second session or athlete."),
    by: str = typer.Option("session", "--by", help="session or athlete."),
    units: UnitsOpt = "metric",
):
    """Mean and spread of speed, transverse spin and deflection for two sessions or athletes, one line
    per ball (different balls are never averaged together)."""
    from ..commands.library import run_library_compare

    return run_library_compare(library, by.lower(), a, b, units_option(units))
