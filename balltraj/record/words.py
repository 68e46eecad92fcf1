"""Record values in words a coach reads: model names instead of internal ids, the air in either
unit system, units names. Pure text formatting; no files, no printing.

>>> model_words("sawicki2003")
'baseball lift curve of Sawicki, Hubbard & Stronge (2003)'
>>> air_text({"density_kg_m3": 1.2, "temperature_c": 20.0, "pressure_pa": 101325.0}, "imperial")
'density 0.0749 lb/ft³, 68.0 °F, 29.92 inHg'
"""

from __future__ import annotations

import math

from ..errors import InputError

UNIT_SYSTEMS = ("metric", "imperial")

LB_PER_FT3 = 16.018463  # kg/m^3 in one lb/ft^3 (0.45359237 kg / 0.3048^3 m^3, exact definitions)
INHG = 3386.389  # Pa in one inch of mercury at 0 degC (common practice)

#: internal model id -> words (drag and lift laws of physics/aero.py)
MODEL_WORDS = {
    "constant": "constant coefficient",
    "crisis": "drag crisis (smooth step from subcritical to supercritical drag)",
    "morrison2013": "smooth-sphere drag of Morrison (2013)",
    "sawicki2003": "baseball lift curve of Sawicki, Hubbard & Stronge (2003)",
    "proportional": "lift in proportion to the spin parameter",
    "ideal_cylinder": "ideal rotating-cylinder bound",
}


def model_words(model_id: str | None) -> str:
    """A drag or lift model id in words (unknown ids are shown as they are)."""
    if not model_id:
        return "—"
    return MODEL_WORDS.get(str(model_id), str(model_id))


def source_words(text: str | None) -> str:
    """A record's ``drag_source``/``lift_source`` ('model crisis', 'fitted scale x model ...') in words."""
    if not text:
        return "—"
    out = str(text)
    if out in MODEL_WORDS:
        return MODEL_WORDS[out]
    for k in sorted(MODEL_WORDS, key=len, reverse=True):
        if out.endswith(f"model {k}"):
            return out[: -len(f"model {k}")] + MODEL_WORDS[k]
    return out


def unit_system(text: str | None) -> str:
    """``--units`` read case-insensitively: 'metric' or 'imperial'."""
    u = str(text or "metric").strip().lower()
    if u not in UNIT_SYSTEMS:
        raise InputError(f"the unit system must be metric or imperial, got {text!r}", about="units")
    return u


def _finite(x) -> bool:
    return isinstance(x, (int, float)) and not isinstance(x, bool) and math.isfinite(x)


def density_text(rho: float | None, units: str = "metric") -> str:
    if not _finite(rho):
        return "—"
    if units == "imperial":
        return f"{rho / LB_PER_FT3:.4f} lb/ft³"
    return f"{rho:.3f} kg/m³"


def temperature_text(tc: float | None, units: str = "metric") -> str:
    if not _finite(tc):
        return "—"
    return f"{tc * 9 / 5 + 32:.1f} °F" if units == "imperial" else f"{tc:.1f} °C"


def pressure_text(p: float | None, units: str = "metric") -> str:
    if not _finite(p):
        return "—"
    return f"{p / INHG:.2f} inHg" if units == "imperial" else f"{p / 100:.1f} hPa"


def air_text(air: dict, units: str = "metric") -> str:
    """Density, temperature and pressure of a record's air section, in the unit system."""
    parts = [f"density {density_text(air.get('density_kg_m3'), units)}"]
    if _finite(air.get("temperature_c")):
        parts.append(temperature_text(air["temperature_c"], units))
    if _finite(air.get("pressure_pa")):
        parts.append(pressure_text(air["pressure_pa"], units))
    return ", ".join(parts)


def transverse_share(spin: dict):
    """The transverse share of the spin (0..1), from a record's spin section; reads the older name
    ``spin_efficiency`` of files written before it was renamed."""
    v = spin.get("transverse_share")
    return spin.get("spin_efficiency") if v is None else v
