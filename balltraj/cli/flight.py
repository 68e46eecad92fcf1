"""Commands of the flight group: simulate, fit, report, balls, demo."""

from __future__ import annotations

from pathlib import Path
from typing import List, Optional

import typer

from ..errors import InputError
from .app import _command, app
from .options import (AeroModelOpt, ForceOpt, WindOpt, WindUncertaintyOpt, AirDensityOpt, AltitudeOpt, BallFileOpt, HumidityOpt, PressureOpt, StartNearOpt,
                      StartSigmaOpt, TemperatureOpt, UnitsOpt, air_options, ball_option, fit_settings, si, si_list,
                      units_option, vector)


@_command(app)
def simulate(
    ball: str = typer.Option(..., "--ball", help="Ball name (see `balltraj balls`)."),
    position: str = typer.Option(..., "--position", help="Launch point X,Y,Z [m]."),
    speed: str = typer.Option(..., "--speed", help="Launch speed [m/s], or e.g. 92mph, 150kmh."),
    elevation: str = typer.Option(..., "--elevation", help="Launch angle above horizontal [deg]."),
    azimuth: str = typer.Option("0", "--azimuth", help="Launch direction from +x toward +y (left) [deg]."),
    spin_rpm: str = typer.Option(..., "--spin-rpm", help="Spin rate [rpm] (or 230rad/s, 38rps)."),
    spin_axis: str = typer.Option(..., "--spin-axis",
                                  help="Spin axis X,Y,Z, right-hand rule (backspin toward +x: 0,-1,0)."),
    drag_coefficient: Optional[float] = typer.Option(None, "--drag-coefficient", help="Constant C_D instead of the ball's model."),
    lift_model: Optional[str] = typer.Option(None, "--lift-model", help="Lift model name (see `balltraj balls --models`)."),
    lift_coefficient: Optional[float] = typer.Option(None, "--lift-coefficient", help="Constant C_L instead of a model."),
    spin_decay: Optional[float] = typer.Option(None, "--spin-decay", help="Spin decay time constant [s]."),
    air_density: AirDensityOpt = None,
    temperature: TemperatureOpt = None,
    pressure: PressureOpt = None,
    humidity: HumidityOpt = None,
    altitude: AltitudeOpt = None,
    target_x: Optional[str] = typer.Option(None, "--target-x", help="Target plane x [m] (default: landing point)."),
    ball_file: BallFileOpt = None,
    path_csv: Optional[Path] = typer.Option(None, "--path-csv", help="Also write the sampled path (t,x,y,z,vx,vy,vz)."),
    units: UnitsOpt = "metric",
    out: Path = typer.Option(..., "-o", "--out", help="Flight file to write (JSON)."),
):
    """Predict a flight from a launch state and spin; write a flight file."""
    import math

    from ..commands.fit import run_simulate
    from ..pipeline import Launch
    from ..units import RPM

    rate = si(spin_rpm, "spin", "--spin-rpm")
    bare = str(spin_rpm).strip().lstrip("+-").replace(".", "", 1).isdigit()
    rate = rate * RPM if bare else rate  # a bare --spin-rpm is rpm
    if not math.isfinite(rate) or rate < 0:
        raise InputError(f"--spin-rpm must be zero or positive, got {spin_rpm}")
    el = si(elevation, "angle", "--elevation")
    if abs(el) > math.pi / 2:
        raise InputError(f"--elevation must be within -90..90 degrees, got {elevation}")
    launch = Launch(position_m=vector(position, "--position"), speed_mps=si(speed, "speed", "--speed"),
                    elevation_rad=el, azimuth_rad=si(azimuth, "angle", "--azimuth"), spin_radps=rate,
                    spin_axis=vector(spin_axis, "--spin-axis"))
    return run_simulate(
        ball=ball_option(ball, ball_file), air=air_options(air_density, temperature, pressure, humidity, altitude), launch=launch,
        drag_coefficient=drag_coefficient, lift_model=lift_model, lift_coefficient=lift_coefficient,
        spin_decay_s=spin_decay, target_x_m=si(target_x, "length", "--target-x"), path_csv=path_csv, out=out,
        units=units_option(units),
    )


@_command(app)
def fit(
    inputs: List[Path] = typer.Argument(..., help="Track CSV(s) (t,x,y,z[,sigma])."),
    ball: str = typer.Option(..., "--ball", help="Ball name (see `balltraj balls`)."),
    target_x: Optional[str] = typer.Option(None, "--target-x", help="Target plane x [m] (default: the game's natural "
                                           "plane, e.g. the front of home plate, when the track starts before it; "
                                           "else the last tracked x)."),
    camera: Optional[Path] = typer.Option(None, "--camera", help="Camera or rig file: fit pixel observations (t,camera,u,v) in image space."),
    flight: Optional[int] = typer.Option(None, "--flight", help="Which flight of an observations file with a flight column."),
    start_near: StartNearOpt = None,
    start_sigma: StartSigmaOpt = 0.3,
    fit_drag: bool = typer.Option(False, "--fit-drag", help="Also fit a scale on the drag model."),
    free_lift: bool = typer.Option(False, "--free-lift", help="Fit a free constant lift coefficient instead of the ball's lift model."),
    air_density: AirDensityOpt = None,
    temperature: TemperatureOpt = None,
    pressure: PressureOpt = None,
    humidity: HumidityOpt = None,
    altitude: AltitudeOpt = None,
    aero_model: AeroModelOpt = "auto",
    wind: WindOpt = None,
    wind_uncertainty: WindUncertaintyOpt = None,
    force: ForceOpt = False,
    ball_file: BallFileOpt = None,
    athlete: Optional[str] = typer.Option(None, "--athlete", help="Athlete name, kept in the flight file."),
    session: Optional[str] = typer.Option(None, "--session", help="Session name, kept in the flight file."),
    notes: Optional[str] = typer.Option(None, "--notes", help="Free text kept in the flight file."),
    path_csv: Optional[Path] = typer.Option(None, "--path-csv", help="Write fitted and no-spin paths and their difference."),
    units: UnitsOpt = "metric",
    out: Path = typer.Option(..., "-o", "--out", help="Flight file (one input) or folder (several)."),
):
    """Fit the flight model to tracked positions: launch state, transverse spin, deflection."""
    from ..commands.fit import run_fit

    settings = fit_settings(ball_option(ball, ball_file), air_options(air_density, temperature, pressure, humidity, altitude),
                         target_x, start_near, start_sigma, fit_drag, free_lift, aero_model=aero_model, wind=wind, force=force,
                         wind_uncertainty=wind_uncertainty)
    return run_fit(inputs=inputs, settings=settings, path_csv=path_csv, out=out,
                   labels={"athlete": athlete, "session": session, "notes": notes}, camera=camera, flight=flight,
                   units=units_option(units))


@_command(app)
def report(
    flights: List[Path] = typer.Argument(..., help="Flight file(s) (JSON) from fit, simulate or analyze."),
    units: UnitsOpt = "metric",
    fmt: str = typer.Option("html", "--format", help="html (any number of flights), png or pdf (one flight)."),
    what_if_altitude: List[str] = typer.Option([], "--what-if-altitude", help="Also re-fly at this altitude [m] "
                                               "(or 5280ft); repeatable."),
    what_if_temperature: List[str] = typer.Option([], "--what-if-temperature", help="Also re-fly at this temperature "
                                                  "[deg C] (or 90F); repeatable."),
    out: Path = typer.Option(..., "-o", "--out", help="Report file to write."),
):
    """Write a report a coach can read: headline numbers, paths with and without spin, fit quality."""
    from ..commands.report import run_report

    return run_report(flights=flights, units=units_option(units), out=out, fmt=fmt.lower(),
                      altitudes=si_list(what_if_altitude, "length", "--what-if-altitude"),
                      temperatures=si_list(what_if_temperature, "temperature", "--what-if-temperature"))


@_command(app)
def balls(models: bool = typer.Option(False, "--models", help="Also list the aerodynamic models."),
          units: UnitsOpt = "metric"):
    """List the ball catalogue (sizes from each game's rules), what is checked, and the aerodynamic models."""
    from ..commands.fit import run_balls

    return run_balls(models, units_option(units))


@_command(app)
def demo(out: Path = typer.Option(Path("balltraj-demo"), "-o", "--out", help="Folder for the results."),
         units: UnitsOpt = "metric"):
    """Run the whole job on the bundled sample session and print a summary."""
    from ..commands.demo import run_demo

    return run_demo(out, show_progress=True, units=units_option(units))
