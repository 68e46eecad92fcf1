"""Building flight records (the flight-file contract, DESIGN section 4) from computed results.

Pure: dicts in, dicts out. :mod:`balltraj.formats` writes them.
"""

from __future__ import annotations

import math
from typing import Any

import numpy as np

from .. import __version__
from ..physics.air import AirConditions
from ..physics.balls import Ball
from ..physics.flight import FlightModel, FlightParameters, velocity_angles
from ..physics.reference import Deflection, plane_deflection
from ..units import RPM

SCHEMA = "balltraj.flight/1"


def _unit(v) -> list[float] | None:
    v = np.asarray(v, dtype=float)
    n = float(np.linalg.norm(v))
    return None if n == 0 else [float(x) for x in v / n]


def aero_at(model: FlightModel, velocity, spin, lift_override: float = float("nan")) -> dict:
    """Coefficients at one instant: C_D, C_L, S (transverse), Re."""
    v = np.asarray(velocity, dtype=float) - np.asarray(model.wind_mps)
    speed = float(np.linalg.norm(v))
    w = np.asarray(spin, dtype=float)
    w_perp = w - np.dot(w, v) / speed**2 * v
    S = model.radius_m * float(np.linalg.norm(w_perp)) / speed
    Re = float(model.reynolds(speed))
    cd = float(model.drag(np.array([Re]), np.array([S]))[0])
    cl = float(lift_override) if math.isfinite(lift_override) else float(model.lift(np.array([S]), np.array([Re]))[0])
    return {"drag_coefficient": cd, "lift_coefficient": cl, "spin_parameter": S, "reynolds_number": Re}


def model_dict(model: FlightModel, drag_scale: float = 1.0, lift_override: float = float("nan"),
               spin_decay_s: float = float("inf"), spin_vector=None) -> dict:
    """Everything needed to re-fly the flight (report what-ifs, reference paths)."""
    return {
        "mass_kg": model.mass_kg, "diameter_m": model.diameter_m, "air_density_kg_m3": model.air_density,
        "air_viscosity_pa_s": model.air_viscosity, "gravity_mps2": model.gravity,
        "wind_mps": list(model.wind_mps), "drag_model": model.drag_model,
        "drag_params": dict(model.drag_params), "lift_model": model.lift_model,
        "lift_params": dict(model.lift_params), "drag_scale": drag_scale,
        "lift_coefficient_override": None if not math.isfinite(lift_override) else lift_override,
        "spin_decay_s": None if not math.isfinite(spin_decay_s) else spin_decay_s,
        "spin_vector_radps": None if spin_vector is None else [float(x) for x in spin_vector],
    }


def model_from_dict(d: dict) -> tuple[FlightModel, FlightParameters]:
    """Inverse of :func:`model_dict` (spin comes from the record's spin section)."""
    m = FlightModel(
        mass_kg=d["mass_kg"], diameter_m=d["diameter_m"], air_density=d["air_density_kg_m3"],
        air_viscosity=d["air_viscosity_pa_s"], gravity=d["gravity_mps2"], wind_mps=tuple(d["wind_mps"]),
        drag_model=d["drag_model"], drag_params=d["drag_params"], lift_model=d["lift_model"],
        lift_params=d["lift_params"],
    )
    lo = d.get("lift_coefficient_override")
    tau = d.get("spin_decay_s")
    p = FlightParameters.make(1, drag_scale=d.get("drag_scale", 1.0),
                              lift_override=np.nan if lo is None else lo,
                              spin_decay_s=np.inf if tau is None else tau)
    return m, p


def launch_dict(t0: float, state) -> dict:
    s = np.asarray(state, dtype=float)
    sp, el, az = velocity_angles(s[3:])
    return {"t_s": float(t0), "position_m": [float(x) for x in s[:3]], "velocity_mps": [float(x) for x in s[3:]],
            "speed_mps": sp, "elevation_deg": math.degrees(el), "azimuth_deg": math.degrees(az)}


def spin_dict(spin, velocity, *, gyro_observed: bool) -> dict:
    w = np.asarray(spin, dtype=float)
    v = np.asarray(velocity, dtype=float)
    vhat = v / np.linalg.norm(v)
    w_perp = w - np.dot(w, vhat) * vhat
    rate = float(np.linalg.norm(w))
    trate = float(np.linalg.norm(w_perp))
    return {
        "rate_rpm": (rate if gyro_observed else trate) / RPM,
        "transverse_rate_rpm": trate / RPM,
        "transverse_axis": _unit(w_perp) or [0.0, 0.0, 0.0],
        "axis": _unit(w) if gyro_observed else None,
        "gyro_observed": bool(gyro_observed),
        "gyro_rate_rpm": float(np.dot(w, vhat)) / RPM if gyro_observed else None,
        "spin_efficiency": (trate / rate if rate > 0 else None) if gyro_observed else None,
        "note": ("full spin vector known (given as input)" if gyro_observed else
                 "only the transverse spin can be recovered from a trajectory; rate_rpm is the "
                 "transverse rate and the gyro (bullet) spin along the flight direction is unknown"),
    }


def deflection_dict(d: Deflection) -> dict:
    return {"target_x_m": d.target_x_m, "horizontal_m": d.horizontal_m, "vertical_m": d.vertical_m,
            "time_at_target_s": d.time_s, "reference_time_at_target_s": d.reference_time_s,
            "crossing_m": list(d.crossing_m), "reference_crossing_m": list(d.reference_crossing_m),
            "speed_at_target_mps": d.speed_at_plane_mps}


def ball_dict(ball: Ball, model: FlightModel) -> dict:
    return {"name": ball.name, "title": ball.title, "mass_kg": model.mass_kg,
            "diameter_m": model.diameter_m, "rule": ball.rule}


def simulate_record(ball: Ball, air: AirConditions, model: FlightModel, state0, spin, *, t0: float = 0.0,
                    target_x: float | None = None, spin_decay_s: float = float("inf"),
                    max_step: float = 0.005) -> tuple[dict, Deflection]:
    """A flight record of a predicted (simulated) flight, and its deflection result.

    ``target_x`` defaults to where the spinning flight comes down to z = 0.
    """
    from ..errors import PhysicsError
    from ..physics.flight import fly

    s0 = np.asarray(state0, dtype=float)
    params = FlightParameters.make(1, spin=np.asarray(spin, dtype=float), spin_decay_s=spin_decay_s)
    if target_x is None:
        tr = fly(model, t0, s0[None], params, ground_z=0.0, max_step=max_step)
        tg, sg = tr.first_crossing(2, 0.0, -1)
        if not np.isfinite(tg[0]) or sg[0, 0] <= s0[0]:
            raise PhysicsError("the flight does not come down ahead of the launch point within 30 s",
                               hint="give --target-x")
        target_x = float(sg[0, 0])
    d = plane_deflection(model, t0, s0, params, target_x, max_step=max_step)
    rec: dict[str, Any] = {
        "schema": SCHEMA, "source": "simulate", "tool_version": __version__, "ball": ball.name,
        "ball_properties": ball_dict(ball, model), "air": air.to_dict(),
        "model": model_dict(model, spin_decay_s=spin_decay_s, spin_vector=spin),
        "launch": launch_dict(t0, s0),
        "spin": spin_dict(spin, s0[3:], gyro_observed=True),
        "aero": aero_at(model, s0[3:], spin),
        "deflection": deflection_dict(d),
        "drop": d.drop_summary(),
        "uncertainty": {},
        "fit": {"n_points": 0, "n_outliers": 0, "rms_residual": 0.0, "residual_unit": "m",
                "method": "prediction (no data fitted)"},
        "warnings": [],
    }
    return rec, d
