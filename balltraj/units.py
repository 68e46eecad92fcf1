"""Unit conversion at the edges: parse ``92mph``, ``2300rpm``, ``150ft``; format for reports.

Bare numbers are SI. Everything inside balltraj is SI (m, s, kg, rad, rad/s).
"""

from __future__ import annotations

import math
import re

from .errors import InputError

MPH = 0.44704  # m/s, exact (1 mi = 1609.344 m)
KMH = 1 / 3.6
FOOT = 0.3048  # m, exact
INCH = 0.0254  # m, exact
YARD = 0.9144  # m, exact
RPM = 2 * math.pi / 60  # rad/s
RPS = 2 * math.pi

_SPEED = {"": 1.0, "m/s": 1.0, "mps": 1.0, "ms": 1.0, "mph": MPH, "kmh": KMH, "km/h": KMH,
          "kph": KMH, "ft/s": FOOT, "fps": FOOT}
_LENGTH = {"": 1.0, "m": 1.0, "cm": 0.01, "mm": 0.001, "ft": FOOT, "in": INCH, "yd": YARD}
_SPIN = {"": 1.0, "rad/s": 1.0, "rpm": RPM, "rps": RPS, "rev/s": RPS, "hz": RPS}
_ANGLE = {"": math.pi / 180, "deg": math.pi / 180, "rad": 1.0}
_DENSITY = {"": 1.0, "kg/m3": 1.0, "kg/m^3": 1.0}
_TEMPERATURE = {"": 1.0, "c": 1.0, "degc": 1.0}
_PRESSURE = {"": 1.0, "pa": 1.0, "hpa": 100.0, "mbar": 100.0, "kpa": 1000.0, "inhg": 3386.389}

KINDS = {"speed": _SPEED, "length": _LENGTH, "spin": _SPIN, "angle": _ANGLE,
         "density": _DENSITY, "temperature": _TEMPERATURE, "pressure": _PRESSURE}

_NUM = re.compile(r"^\s*([-+]?(?:\d+\.?\d*|\.\d+)(?:[eE][-+]?\d+)?)\s*([a-zA-Z/^0-9]*)\s*$")


def parse_quantity(text: str | float, kind: str, option: str = "value") -> float:
    """Parse a number with an optional unit into SI. Angles: bare numbers are degrees.

    >>> round(parse_quantity("92mph", "speed"), 4)
    41.1277
    >>> round(parse_quantity("2300rpm", "spin"), 3)
    240.855
    """
    if isinstance(text, (int, float)):
        value, unit = float(text), ""
    else:
        m = _NUM.match(str(text))
        if not m:
            raise InputError(f"{option}: cannot read {text!r} as a number",
                             hint=f"write e.g. {_example(kind)}")
        value, unit = float(m.group(1)), m.group(2).lower()
    table = KINDS[kind]
    if kind == "temperature" and unit in ("f", "degf"):
        return (value - 32) * 5 / 9
    if unit not in table:
        raise InputError(f"{option}: unknown unit {unit!r} in {text!r}",
                         hint=f"use one of: {', '.join(u for u in table if u) } or a bare SI number")
    out = value * table[unit]
    if not math.isfinite(out):
        raise InputError(f"{option}: {text!r} is not a finite number")
    return out


def _example(kind: str) -> str:
    return {"speed": "40 or 92mph", "length": "18.44 or 60.5ft", "spin": "230 or 2200rpm",
            "angle": "-1.5 (degrees)", "density": "1.2", "temperature": "20",
            "pressure": "101325 or 1013hpa"}[kind]


def parse_vector(text: str, option: str = "vector", kind: str = "length") -> tuple[float, float, float]:
    """Parse ``X,Y,Z`` (each optionally with a unit of ``kind``)."""
    parts = [p for p in str(text).replace(";", ",").split(",")]
    if len(parts) != 3:
        raise InputError(f"{option}: expected three comma-separated numbers X,Y,Z, got {text!r}")
    return tuple(parse_quantity(p, kind, option) for p in parts)  # type: ignore[return-value]


# ------------------------------------------------------------------------------ output units
SYSTEMS = ("metric", "imperial")


def speed_text(v_mps: float, system: str = "metric", sigma: float | None = None) -> str:
    if v_mps is None or not math.isfinite(v_mps):
        return "—"
    if system == "imperial":
        return _pm(v_mps / MPH, sigma and sigma / MPH, "mph", 1)
    return _pm(v_mps * 3.6, sigma and sigma * 3.6, "km/h", 1) + f" ({v_mps:.2f} m/s)"


def length_text(x_m: float, system: str = "metric", sigma: float | None = None, small: bool = True) -> str:
    if x_m is None or not math.isfinite(x_m):
        return "—"
    if system == "imperial":
        if small:
            return _pm(x_m / INCH, sigma and sigma / INCH, "in", 1)
        return _pm(x_m / FOOT, sigma and sigma / FOOT, "ft", 1)
    if small:
        return _pm(x_m * 100, sigma and sigma * 100, "cm", 1)
    return _pm(x_m, sigma, "m", 2)


def spin_text(w_rad_s: float, sigma: float | None = None) -> str:
    if w_rad_s is None or not math.isfinite(w_rad_s):
        return "—"
    return _pm(w_rad_s / RPM, sigma and sigma / RPM, "rpm", 0)


def _pm(x, s, unit, digits):
    if x is None or not math.isfinite(x):
        return "—"
    if s is None or not math.isfinite(s) or s == 0:
        return f"{x:.{digits}f} {unit}"
    return f"{x:.{digits}f} ± {s:.{digits}f} {unit}"
