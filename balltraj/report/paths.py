"""Re-flying a flight record: measured (fitted) path, no-spin reference, and what-ifs.

Pure computation on records; no plotting here.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, replace

import numpy as np

from ..fitting.record import model_from_dict
from ..physics.air import ZERO_CELSIUS, air_viscosity, moist_air_density, standard_pressure_at_altitude
from ..physics.flight import FlightParameters
from ..physics.reference import plane_deflection


@dataclass(frozen=True)
class FlightPaths:
    t: np.ndarray
    spin_xyz: np.ndarray  # (T, 3)
    ref_xyz: np.ndarray  # (T, 3)
    target_x: float
    crossing: np.ndarray
    ref_crossing: np.ndarray


def spin_vector(rec: dict) -> np.ndarray:
    m = rec.get("model", {})
    if m.get("spin_vector_radps") is not None:
        return np.asarray(m["spin_vector_radps"], dtype=float)
    return np.zeros(3)


def record_paths(rec: dict, *, air_density: float | None = None, viscosity: float | None = None,
                 no_spin: bool = False) -> FlightPaths:
    model, params = model_from_dict(rec["model"])
    if air_density is not None:
        model = replace(model, air_density=air_density, air_viscosity=viscosity or model.air_viscosity)
    spin = np.zeros(3) if no_spin else spin_vector(rec)
    params = FlightParameters.make(1, spin=spin, drag_scale=params.drag_scale,
                                   lift_override=np.nan if no_spin else params.lift_override,
                                   spin_decay_s=params.spin_decay_s)
    L = rec["launch"]
    s0 = np.array(L["position_m"] + L["velocity_mps"], dtype=float)
    X = float(rec["deflection"]["target_x_m"])
    d = plane_deflection(model, float(L["t_s"]), s0, params, X, ground_z=None)
    t_end = max(d.time_s, d.reference_time_s)
    t = np.linspace(float(L["t_s"]), t_end, 200)
    t = t[t <= d.spin_path.t[-1]]
    return FlightPaths(t, d.spin_path.positions(t)[0], d.reference_path.positions(t)[0], X,
                       np.asarray(d.crossing_m), np.asarray(d.reference_crossing_m))


def what_if(rec: dict, *, altitude_m: float | None = None, temperature_c: float | None = None,
            no_spin: bool = False) -> dict:
    """The same launch re-flown in other air or without spin: crossing point and deflection."""
    air = rec.get("air", {})
    t = temperature_c if temperature_c is not None else (air.get("temperature_c") or 20.0)
    h = air.get("humidity_pct") if air.get("humidity_pct") is not None else 50.0
    if altitude_m is not None or temperature_c is not None:
        p = float(standard_pressure_at_altitude(altitude_m)) if altitude_m is not None else \
            (air.get("pressure_pa") or 101325.0)
        rho = float(moist_air_density(t, p, h))
        mu = float(air_viscosity(t + ZERO_CELSIUS))
    else:
        rho, mu = None, None
    fp = record_paths(rec, air_density=rho, viscosity=mu, no_spin=no_spin)
    label = []
    if altitude_m is not None:
        label.append(f"at {altitude_m:.0f} m altitude")
    if temperature_c is not None:
        label.append(f"at {temperature_c:.0f} degC")
    if no_spin:
        label.append("with no spin")
    return {"label": ", ".join(label) or "as measured", "air_density_kg_m3": rho or rec["model"]["air_density_kg_m3"],
            "crossing_m": fp.crossing.tolist(), "deflection_horizontal_m": float(fp.crossing[1] - fp.ref_crossing[1]),
            "deflection_vertical_m": float(fp.crossing[2] - fp.ref_crossing[2]),
            "time_s": float(fp.t[-1] - fp.t[0]) if len(fp.t) else math.nan}
