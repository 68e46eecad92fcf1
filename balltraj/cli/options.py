"""Option parsing at the edge: every value with a unit becomes an SI float here, once; the options
several commands share are declared once."""

from __future__ import annotations

import math
from pathlib import Path
from typing import Annotated, Optional

import typer

from ..errors import InputError
from ..units import parse_quantity, parse_vector


def ball_option(name: str, ball_file: Optional[Path]):
    """The ball named by ``--ball`` (and defined by ``--ball-file``); an ambiguous name (football)
    is said on stderr."""
    from ..commands.common import ball_note, load_ball

    ball = load_ball(name, ball_file)
    note = ball_note(name) if ball_file is None or ball.name != str(name).strip().lower() else None
    if note:
        typer.echo(note, err=True)
    return ball


def units_option(text: Optional[str]) -> str:
    """``--units`` case-insensitively: metric or imperial."""
    from ..record.words import unit_system

    return unit_system(text)


def si_list(texts, kind: str, option: str) -> list[float]:
    """A repeatable option's values in SI (e.g. ``--what-if-altitude 5280ft``)."""
    return [parse_quantity(t, kind, option) for t in (texts or [])]


def si(text: Optional[str], kind: str, option: str) -> Optional[float]:
    """An option's value in SI (bare numbers are SI; units such as 92mph are converted)."""
    return None if text is None else parse_quantity(text, kind, option)


def air_options(air_density, temperature, pressure, humidity, altitude):
    """The air from the air options: density, or weather and altitude (bare pressure is hPa)."""
    from ..commands.common import air_from

    rho = si(air_density, "density", "--air-density")
    if rho is not None and rho <= 0:
        raise InputError(f"--air-density must be positive, got {air_density}")
    p = None
    if pressure is not None:
        # the contract's bare pressure is hPa; a unit (Pa, kPa, inHg) may be given
        bare = str(pressure).strip().replace(".", "", 1).lstrip("+-").isdigit()
        p = si(pressure, "pressure", "--pressure") * (100.0 if bare else 1.0)
    return air_from(density=rho, temperature_c=si(temperature, "temperature", "--temperature"), pressure_pa=p,
                    humidity_pct=si(humidity, "temperature", "--humidity"),
                    altitude_m=si(altitude, "length", "--altitude"))


def vector(text: Optional[str], option: str, kind: str = "length"):
    """A vector option X,Y,Z in SI (each component may carry a unit)."""
    return None if text is None else parse_vector(text, option)


def fit_settings(ball, air, target_x, start_near, start_sigma, fit_drag=False, free_lift=False, aero_model="auto",
                 wind=None, force=False, wind_uncertainty=None):
    """The fit settings from the options, every unit in SI."""
    from ..pipeline import FitSettings

    if not (math.isfinite(start_sigma) and start_sigma > 0):
        raise InputError(f"--start-sigma must be a positive number of metres, got {start_sigma}")
    return FitSettings(ball=ball, air=air, target_x_m=si(target_x, "length", "--target-x"),
                       start_near_m=vector(start_near, "--start-near"), start_sigma_m=start_sigma,
                       fit_drag=fit_drag, free_lift=free_lift, aero_model=str(aero_model).strip().lower(),
                       wind_mps=vector(wind, "--wind", kind="speed"),
                       wind_sigma_mps=wind_sigma_option(wind_uncertainty), force=force)


def wind_sigma_option(text: Optional[str]) -> float:
    """``--wind-uncertainty`` in m/s (or 3mph); 0 when not given."""
    value = si(text, "speed", "--wind-uncertainty")
    if value is None:
        return 0.0
    if not (math.isfinite(value) and 0 <= value <= 30):
        raise InputError(f"--wind-uncertainty must be 0..30 m/s (or e.g. 5mph), got {text}")
    return value


# options shared by several commands, declared once
AirDensityOpt = Annotated[Optional[str], typer.Option("--air-density", help="Air density [kg/m^3]; or give "
                                                       "--temperature/--pressure/--humidity/--altitude.")]
TemperatureOpt = Annotated[Optional[str], typer.Option("--temperature", help="Air temperature [deg C].")]
PressureOpt = Annotated[Optional[str], typer.Option("--pressure", help="Station pressure [hPa] (or 101325pa).")]
HumidityOpt = Annotated[Optional[str], typer.Option("--humidity", help="Relative humidity [%].")]
AltitudeOpt = Annotated[Optional[str], typer.Option("--altitude", help="Altitude above sea level [m] (or 5280ft).")]
BallFileOpt = Annotated[Optional[Path], typer.Option("--ball-file", help="JSON file defining an extra ball.")]
StartNearOpt = Annotated[Optional[str], typer.Option("--start-near", help="Rough start point X,Y,Z [m] (release point, ball spot).")]
StartSigmaOpt = Annotated[float, typer.Option("--start-sigma", help="How rough --start-near is [m].")]
CaptureFpsOpt = Annotated[Optional[float], typer.Option("--capture-fps", help="True capture rate of a slow-motion file stored time-stretched.")]
UnitsOpt = Annotated[str, typer.Option("--units", help="metric or imperial (any case): the units numbers are "
                                        "printed in.")]
AeroModelOpt = Annotated[str, typer.Option("--aero-model", metavar="RUNG", help="Aerodynamic model: auto (the data "
                                           "choose a rung of the ladder, see docs/method.md) or a rung name to pin it.")]
WindOpt = Annotated[Optional[str], typer.Option("--wind", metavar="VX,VY,VZ", help="Constant wind [m/s] (or 5mph,0,0) "
                                                 "for the fit and the no-spin reference; default still air.")]
WindUncertaintyOpt = Annotated[Optional[str], typer.Option(
    "--wind-uncertainty", metavar="SPEED", help="How well the wind is known: one-sigma of each horizontal component "
    "[m/s] (or 3mph). The deflection's uncertainty then carries what such a wind could do; default 0 (as given).")]
ForceOpt = Annotated[bool, typer.Option("--force", help="Keep a fit whose numbers are impossible for the ball "
                                        "(a warning instead of an error).")]
