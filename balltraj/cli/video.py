"""Commands of the video group: track, analyze, render."""

from __future__ import annotations

from pathlib import Path
from typing import List, Optional

import typer

from .app import _command, app
from .options import (AeroModelOpt, ForceOpt, WindOpt, WindUncertaintyOpt, AirDensityOpt, AltitudeOpt, BallFileOpt, CaptureFpsOpt, HumidityOpt, PressureOpt, StartNearOpt,
                      StartSigmaOpt, TemperatureOpt, UnitsOpt, air_options, ball_option, fit_settings,
                      units_option)


@_command(app)
def track(
    clip: Path = typer.Argument(..., help="Video clip."),
    camera: Optional[Path] = typer.Option(None, "--camera", help="Camera file (gates the ball's size in pixels)."),
    ball: str = typer.Option("baseball", "--ball", help="Ball name (its size gates detections)."),
    capture_fps: CaptureFpsOpt = None,
    overlay: Optional[Path] = typer.Option(None, "--overlay", help="Also write a video with detections and tracks drawn."),
    start: float = typer.Option(0.0, "--start", help="Skip the clip before this time [s] (decoded in order, never seeked)."),
    end: Optional[float] = typer.Option(None, "--end", help="Stop reading after this time [s]."),
    ball_file: BallFileOpt = None,
    out: Path = typer.Option(..., "-o", "--out", help="Observations CSV to write."),
):
    """Find and track the ball in a clip; write timed pixel observations, one flight id per throw."""
    from ..commands.video import run_track

    return run_track(clip=clip, camera=camera, ball=ball_option(ball, ball_file), capture_fps=capture_fps, out=out,
                     overlay=overlay, show_progress=True, start_s=start, end_s=end)


@_command(app)
def analyze(
    clip: List[Path] = typer.Argument(..., help="Video clip; or one clip per camera of a rig file, in its order."),
    camera: Path = typer.Option(..., "--camera", help="Camera file of the camera that filmed the clip (or a rig file)."),
    ball: str = typer.Option(..., "--ball", help="Ball name."),
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
    athlete: Optional[str] = typer.Option(None, "--athlete", help="Athlete name, kept in the flight files."),
    session: Optional[str] = typer.Option(None, "--session", help="Session name, kept in the flight files."),
    aero_model: AeroModelOpt = "auto",
    wind: WindOpt = None,
    wind_uncertainty: WindUncertaintyOpt = None,
    force: ForceOpt = False,
    ball_file: BallFileOpt = None,
    units: UnitsOpt = "metric",
    out: Path = typer.Option(..., "-o", "--out", help="Folder for observations.csv, flight.json and report.html."),
):
    """The whole job on one clip (or one clip per camera of a rig, unsynchronised): track, fit in image space, report."""
    from ..commands.video import run_analyze

    settings = fit_settings(ball_option(ball, ball_file), air_options(air_density, temperature, pressure, humidity, altitude),
                         target_x, start_near, start_sigma, aero_model=aero_model, wind=wind, force=force,
                         wind_uncertainty=wind_uncertainty)
    return run_analyze(clip=clip, camera=camera, settings=settings, capture_fps=capture_fps, out=out,
                       labels={"athlete": athlete, "session": session}, show_progress=True, units=units_option(units))


@_command(app)
def render(
    flight: Path = typer.Argument(..., help="Flight file (e.g. from simulate) whose flight to show."),
    camera: Path = typer.Option(..., "--camera", help="Camera file to film it with."),
    fps: float = typer.Option(240.0, "--fps", help="Frames per second."),
    duration: Optional[float] = typer.Option(None, "--duration", help="Clip length [s] (default: the flight plus margins)."),
    start: float = typer.Option(0.2, "--start", help="When the flight starts in the clip [s]."),
    exposure: float = typer.Option(0.001, "--exposure", help="Shutter time [s] (motion blur)."),
    noise: float = typer.Option(2.0, "--noise", help="Sensor noise (grey levels)."),
    seed: int = typer.Option(0, "--seed", help="Random seed of the scene."),
    out: Path = typer.Option(..., "-o", "--out", help="Clip to write (.mp4, mp4v codec); truth goes beside it."),
):
    """Render a synthetic practice clip of a flight, with its truth (for checks and demos)."""
    from ..commands.video import run_render

    return run_render(flight=flight, camera=camera, out=out, fps=fps, duration=duration, start=start,
                      exposure=exposure, noise=noise, seed=seed)
