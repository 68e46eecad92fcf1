"""Air properties: moist-air density (CIPM-2007), standard-atmosphere pressure, viscosity.

All inputs and outputs SI except where the name says otherwise (``temperature_c`` in degrees
Celsius, ``humidity_pct`` in percent).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from ..errors import InputError

STANDARD_GRAVITY = 9.80665  # m/s^2, CGPM 1901 (common practice)
STANDARD_PRESSURE = 101325.0  # Pa, ISO 2533 / USSA-1976 sea level
ZERO_CELSIUS = 273.15  # K

# USSA-1976 troposphere (ISO 2533): T0, lapse rate, molar mass of air, gas constant
_USSA_T0 = 288.15  # K
_USSA_LAPSE = 0.0065  # K/m
_USSA_M = 0.0289644  # kg/mol
_USSA_R = 8.31432  # J/(mol K) as used by USSA-1976

_EARTH_R0 = 6356766.0  # m, USSA-1976 effective earth radius for geopotential altitude

# Sutherland's law, USSA-1976 form
SUTHERLAND_BETA = 1.458e-6  # kg m^-1 s^-1 K^-1/2
SUTHERLAND_S = 110.4  # K


def saturation_vapour_pressure(temperature_k):
    """Saturation vapour pressure of water over a plane surface, CIPM-2007 form [Pa].

    Notes
    -----
    p_sv = exp(A T^2 + B T + C + D/T) with A = 1.2378847e-5 K^-2, B = -1.9121316e-2 K^-1,
    C = 33.93711047, D = -6.3431645e3 K.

    References
    ----------
    Picard, Davis, Glaser & Fujii 2008, Metrologia 45:149-155, doi:10.1088/0026-1394/45/2/004.

    >>> round(float(saturation_vapour_pressure(293.15)), 1)
    2339.2
    """
    T = np.asarray(temperature_k, dtype=float)
    return np.exp(1.2378847e-5 * T**2 - 1.9121316e-2 * T + 33.93711047 - 6.3431645e3 / T)


def moist_air_density(temperature_c, pressure_pa, humidity_pct=0.0, co2_fraction=4e-4):
    """Density of moist air by the CIPM-2007 formula [kg/m^3].

    Parameters
    ----------
    temperature_c : air temperature [deg C], valid 15..27 deg C by the formula's statement and
        used here for -20..50 deg C (outside the stated range the error grows slowly)
    pressure_pa : station pressure [Pa]
    humidity_pct : relative humidity [%], 0..100
    co2_fraction : CO2 mole fraction [-]

    Notes
    -----
    rho = p M_a / (Z R T) [1 - x_v (1 - M_v/M_a)], with the enhancement factor, the saturation
    vapour pressure and the compressibility Z of the paper.

    References
    ----------
    Picard et al. 2008, Metrologia 45:149, eq. 1 and appendix A.

    >>> round(float(moist_air_density(20.0, 101325.0, 50.0)), 6)
    1.199314
    """
    t = np.asarray(temperature_c, dtype=float)
    p = np.asarray(pressure_pa, dtype=float)
    h = np.asarray(humidity_pct, dtype=float) / 100.0
    T = t + ZERO_CELSIUS
    R = 8.314472
    Ma = (28.96546 + 12.011 * (co2_fraction - 0.0004)) * 1e-3
    Mv = 18.01528e-3
    f = 1.00062 + 3.14e-8 * p + 5.6e-7 * t**2
    xv = h * f * saturation_vapour_pressure(T) / p
    a0, a1, a2 = 1.58123e-6, -2.9331e-8, 1.1043e-10
    b0, b1 = 5.707e-6, -2.051e-8
    c0, c1 = 1.9898e-4, -2.376e-6
    d, e = 1.83e-11, -0.765e-8
    Z = (1 - (p / T) * (a0 + a1 * t + a2 * t**2 + (b0 + b1 * t) * xv + (c0 + c1 * t) * xv**2)
         + (p / T) ** 2 * (d + e * xv**2))
    return p * Ma / (Z * R * T) * (1 - xv * (1 - Mv / Ma))


def standard_pressure_at_altitude(altitude_m):
    """Pressure of the standard atmosphere at a geometric altitude above sea level [Pa].

    Notes
    -----
    H = r0 h / (r0 + h) (geopotential altitude, r0 = 6356766 m), then
    p = p0 (1 - L H / T0)^(g0 M / (R* L)); troposphere, valid for -600 m .. 11 km.

    References
    ----------
    U.S. Standard Atmosphere 1976 (NOAA/NASA/USAF), eq. 33a; ISO 2533:1975.

    >>> round(float(standard_pressure_at_altitude(1000.0)), 0)
    89876.0
    """
    z = np.asarray(altitude_m, dtype=float)
    h = _EARTH_R0 * z / (_EARTH_R0 + z)
    expo = STANDARD_GRAVITY * _USSA_M / (_USSA_R * _USSA_LAPSE)
    return STANDARD_PRESSURE * (1 - _USSA_LAPSE * h / _USSA_T0) ** expo


def air_viscosity(temperature_k):
    """Dynamic viscosity of air by Sutherland's law [Pa s].

    mu = beta T^(3/2) / (T + S), beta = 1.458e-6 kg/(m s K^1/2), S = 110.4 K.

    References
    ----------
    U.S. Standard Atmosphere 1976, eq. 51.

    >>> round(float(air_viscosity(293.15)) * 1e5, 5)
    1.81341
    """
    T = np.asarray(temperature_k, dtype=float)
    return SUTHERLAND_BETA * T**1.5 / (T + SUTHERLAND_S)


def reynolds_number(speed_mps, diameter_m, air_density, air_viscosity_pa_s):
    """Reynolds number Re = rho v d / mu [-]."""
    return np.asarray(air_density) * np.asarray(speed_mps) * diameter_m / air_viscosity_pa_s


@dataclass(frozen=True)
class AirConditions:
    """The air a flight moves through. Build with :func:`air_conditions`."""

    density: float  # kg/m^3
    viscosity: float  # Pa s
    temperature_c: float | None
    pressure_pa: float | None
    humidity_pct: float | None
    altitude_m: float | None
    source: str  # how density was obtained, in words

    def to_dict(self) -> dict:
        return {
            "density_kg_m3": self.density,
            "viscosity_pa_s": self.viscosity,
            "temperature_c": self.temperature_c,
            "pressure_pa": self.pressure_pa,
            "humidity_pct": self.humidity_pct,
            "altitude_m": self.altitude_m,
            "source": self.source,
        }


DEFAULT_TEMPERATURE_C = 20.0
DEFAULT_HUMIDITY_PCT = 50.0


def _finite(name: str, value: float, lo: float, hi: float, unit: str) -> float:
    if value is None:
        return value
    v = float(value)
    if not math.isfinite(v):
        raise InputError(f"{name} must be a finite number, got {value}")
    if not lo <= v <= hi:
        raise InputError(f"{name} = {v:g} {unit} is outside the accepted range {lo:g}..{hi:g} {unit}")
    return v


def air_conditions(
    *,
    density: float | None = None,
    temperature_c: float | None = None,
    pressure_pa: float | None = None,
    humidity_pct: float | None = None,
    altitude_m: float | None = None,
) -> AirConditions:
    """Air from a given density, or from temperature, pressure, humidity and altitude.

    Unset values take defaults (20 deg C, 50 % humidity, standard pressure at the altitude, sea
    level); the result says which were defaulted. ``pressure_pa`` is station pressure; when only
    the altitude is known, the standard-atmosphere pressure there is used.
    """
    t = _finite("temperature", temperature_c, -40.0, 60.0, "degC")
    h = _finite("humidity", humidity_pct, 0.0, 100.0, "%")
    alt = _finite("altitude", altitude_m, -500.0, 6000.0, "m")
    p = _finite("pressure", pressure_pa, 30000.0, 110000.0, "Pa")
    if density is not None:
        rho = _finite("air density", density, 0.3, 2.0, "kg/m^3")
        if rho <= 0:
            raise InputError("air density must be positive")
        tt = DEFAULT_TEMPERATURE_C if t is None else t
        return AirConditions(
            density=rho, viscosity=float(air_viscosity(tt + ZERO_CELSIUS)),
            temperature_c=tt, pressure_pa=p, humidity_pct=h, altitude_m=alt,
            source=f"air density given ({rho:.4f} kg/m^3); viscosity at {tt:g} degC",
        )
    said = []
    if t is None:
        t = DEFAULT_TEMPERATURE_C
        said.append(f"temperature {t:g} degC (default)")
    if h is None:
        h = DEFAULT_HUMIDITY_PCT
        said.append(f"humidity {h:g} % (default)")
    if p is None:
        alt_used = 0.0 if alt is None else alt
        p = float(standard_pressure_at_altitude(alt_used))
        said.append(f"pressure {p:.0f} Pa (standard atmosphere at {alt_used:g} m)")
    rho = float(moist_air_density(t, p, h))
    src = "CIPM-2007 moist air"
    if said:
        src += "; " + ", ".join(said)
    return AirConditions(
        density=rho, viscosity=float(air_viscosity(t + ZERO_CELSIUS)), temperature_c=t,
        pressure_pa=p, humidity_pct=h, altitude_m=alt, source=src,
    )
