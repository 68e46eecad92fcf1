"""The one re-fly of a flight record: the measured (fitted) path, the no-spin reference, what-ifs
in other air, the sampled path rows of ``--path-csv``, and the flight to render. The report,
``render`` and ``--path-csv`` all use these. Pure computation on records; no plotting, no files.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, replace

import numpy as np

from ..physics.air import ZERO_CELSIUS, air_viscosity, moist_air_density, standard_pressure_at_altitude
from ..physics.flight import FlightModel, FlightParameters, Trajectory, fly
from ..physics.reference import Deflection, plane_deflection
from .build import model_from_dict


@dataclass(frozen=True)
class FlightPaths:
    t: np.ndarray
    spin_xyz: np.ndarray  # (T, 3)
    ref_xyz: np.ndarray  # (T, 3)
    target_x: float
    crossing: np.ndarray
    ref_crossing: np.ndarray


def spin_vector(rec: dict) -> np.ndarray:
    """The spin vector [rad/s] the record's flight was flown with (zeros if none)."""
    m = rec.get("model", {})
    if m.get("spin_vector_radps") is not None:
        return np.asarray(m["spin_vector_radps"], dtype=float)
    return np.zeros(3)


def record_paths(rec: dict, *, air_density: float | None = None, viscosity: float | None = None,
                 no_spin: bool = False) -> FlightPaths:
    """The record's flight and its no-spin reference, sampled at 200 times up to the target plane."""
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


PATH_HEADER = ["t", "x", "y", "z", "ref_x", "ref_y", "ref_z", "dx", "dy", "dz"]


def path_rows(d: Deflection):
    """Rows of the fitted path, the no-spin reference at the same times and their difference [s, m],
    from the launch to the later of the two target-plane crossings (``--path-csv``)."""
    keep = d.spin_path.t <= max(d.time_s, d.reference_time_s) + 1e-12
    t = d.spin_path.t[keep]
    t = t[t >= d.spin_path.t[0]]
    a = d.spin_path.positions(t)[0]
    b = d.reference_path.positions(t)[0]
    for ti, pa, pb in zip(t, a, b):
        yield [float(ti), *map(float, pa), *map(float, pb), *map(float, pa - pb)]


SIMULATED_PATH_HEADER = ["t", "x", "y", "z", "vx", "vy", "vz"]


def simulated_path_rows(d: Deflection):
    """Rows (t, position, velocity) of a predicted flight up to its target-plane crossing [s, m, m/s]."""
    tr = d.spin_path
    keep = tr.t <= d.time_s + 1e-12
    for t, s in zip(tr.t[keep], tr.state[0, keep]):
        yield [float(t), *map(float, s)]


def ground_flight(rec: dict) -> tuple[FlightModel, Trajectory, float]:
    """The record's flight from its launch down to the ground (z = 0), spin included.

    Returns the model, the trajectory starting at t = 0 and the time in the air [s] (the whole
    integration span when it never comes down within 10 s).
    """
    model, params = model_from_dict(rec["model"])
    params = FlightParameters.make(1, spin=spin_vector(rec), drag_scale=params.drag_scale,
                                   lift_override=params.lift_override, spin_decay_s=params.spin_decay_s)
    L = rec["launch"]
    s0 = np.array(L["position_m"] + L["velocity_mps"], float)
    tr = fly(model, 0.0, s0, params, ground_z=0.0, t_max=10.0)
    tg, _ = tr.first_crossing(2, 0.0, -1)
    return model, tr, float(tg[0]) if np.isfinite(tg[0]) else float(tr.t[-1])
