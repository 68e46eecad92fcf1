"""Building flight records (the flight-file contract, :mod:`balltraj.record.schema`) from a fit
or a prediction. Pure: results in, JSON-ready dicts out; :mod:`balltraj.formats` writes them.
"""

from __future__ import annotations

import math
from typing import Any

import numpy as np

from .. import __version__
from ..errors import FitError, PhysicsError
from ..fitting.analysis import (aero_at, derived_uncertainties, derived_values, effective_spin, gravity_check,
                                launch_time, spin_axis_words, states_at)
from ..fitting.baseline import baseline_summary, fit_constant_acceleration
from ..fitting.flight_fit import FlightFit
from ..fitting.quality import fit_quality_record
from ..physics.air import AirConditions
from ..physics.balls import Ball
from ..physics.flight import FlightModel, FlightParameters, fly, velocity_angles
from ..physics.potential_flow import MAX_IDEAL_LIFT_COEFFICIENT, ideal_lift_bound
from ..physics.reference import Deflection, plane_deflection
from ..units import RPM
from .schema import SCHEMA


def _unit(v) -> list[float] | None:
    v = np.asarray(v, dtype=float)
    n = float(np.linalg.norm(v))
    return None if n == 0 else [float(x) for x in v / n]


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
        "transverse_share": (trate / rate if rate > 0 else None) if gyro_observed else None,
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
    s0 = np.asarray(state0, dtype=float)
    params = FlightParameters.make(1, spin=np.asarray(spin, dtype=float), spin_decay_s=spin_decay_s)
    if target_x is None:
        tr = fly(model, t0, s0[None], params, ground_z=0.0, max_step=max_step)
        tg, sg = tr.first_crossing(2, 0.0, -1)
        if not np.isfinite(tg[0]) or sg[0, 0] <= s0[0]:
            raise PhysicsError("the flight does not come down ahead of the launch point within 30 s",
                               hint="give a target plane", about="target_x")
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


def fit_record(fit: FlightFit, ball: Ball, air: AirConditions, model: FlightModel, *,
               target_x: float | None = None, source: str | None = None,
               start_source: str = "start hint") -> tuple[dict, Deflection]:
    """The flight record of a fitted flight, and its :class:`Deflection` (the measured path and the
    no-spin reference, for the report and ``--path-csv``).

    Parameters
    ----------
    fit : FlightFit
        A successful track fit (residuals in m) or image fit (residuals in px).
    ball, air, model
        The ball, the air and the flight model the fit used.
    target_x : float, optional
        Target plane x = X [m]; default: the last inlier's fitted x.
    source : str, optional
        Where the data came from (a file name), kept in the record.
    start_source : str
        What gave the fit's start point, in words (the user's hint, a ball at rest...).
    """
    if not fit.success:
        raise FitError(f"the fit failed: {fit.message}",
                       hint="check the track (units, time column) or give more points")
    inl = ~fit.outliers
    xyz_fit = fit.fitted_xyz if fit.fitted_xyz is not None else fit.observed
    if target_x is None:
        target_x = float(xyz_fit[inl][-1, 0])
    if fit.model is not None:  # the aerodynamic rung the data chose (drag and lift shape, wind)
        model = fit.model
    params = fit.flight_parameters()
    t_launch = launch_time(fit, model)
    state_l = states_at(model, fit.t0, fit.state0[None], params, t_launch)[0]
    d = plane_deflection(model, t_launch, state_l, params, target_x, ground_z=None)
    sig, dcov = derived_uncertainties(fit, model, target_x, t_launch)
    val = derived_values(state_l[None], params, fit.basis, model)[0]
    v0 = state_l[3:]
    spin = spin_dict(np.nan_to_num(effective_spin(fit.spin, fit.lift_override, v0, model)), v0, gyro_observed=False)
    free = math.isfinite(fit.lift_override)
    aero = {
        "drag_coefficient": val[5], "lift_coefficient": val[6], "spin_parameter": val[7],
        "reynolds_number": float(model.reynolds(np.linalg.norm(v0 - np.asarray(model.wind_mps)))),
        "evaluated_at": "launch",
        "drag_source": ("fitted scale x " if fit.options.fit_drag else "") + f"model {model.drag_model}",
        "lift_source": "fitted free constant" if free else f"model {model.lift_model}",
        "drag_scale": fit.drag_scale,
    }
    rate, srate = spin["transverse_rate_rpm"], sig["transverse_rate_rpm"]
    # told apart from noise: judged without the lift law's part, which scales the rate but cannot make it zero
    s_law = float(sig.get("transverse_rate_from_lift_law_rpm", 0.0) or 0.0)
    spin["observable"] = bool(math.isfinite(rate) and math.sqrt(max(srate**2 - s_law**2, 0.0)) < 0.5 * max(rate, 1e-9))
    spin["axis_in_words"] = spin_axis_words(spin["transverse_axis"], v0)
    if free:
        spin["note"] += f"; the rate is inferred from the fitted lift through the {model.lift_model} model"
    if s_law > 0 and not spin.get("gyro_observed"):
        spin["note"] += (f"; the rate is read through the ball's {model.lift_model} lift law, and its uncertainty "
                         f"includes ± {s_law:.0f} rpm for that law (published lift laws for one kind of ball differ "
                         "by about 30 %)")
    warnings = _fit_warnings(fit, ball, model, val, rate, srate, spin["observable"]) + _prior_warnings(sig)
    baseline, notes = _baseline(fit, model, target_x, start_source)
    rec = {
        "schema": SCHEMA, "source": source or "fit", "tool_version": __version__, "ball": ball.name,
        "ball_properties": ball_dict(ball, model), "air": air.to_dict(),
        "model": model_dict(model, drag_scale=fit.drag_scale, lift_override=fit.lift_override,
                            spin_decay_s=fit.spin_decay_s, spin_vector=fit.spin),
        "launch": {**launch_dict(t_launch, state_l),
                   "at": "the start hint's plane" if t_launch != fit.t0 else "the first used observation",
                   "first_observation_t_s": fit.t0},
        "spin": spin, "aero": aero, "deflection": deflection_dict(d), "drop": d.drop_summary(),
        "uncertainty": _uncertainty_section(fit, sig, dcov),
        "fit": _fit_section(fit),
        "baseline": baseline,
        "warnings": warnings + notes,
    }
    quality = fit_quality_record(fit, ball, spin_measured=spin["observable"])  # the rung chosen and why, misfit, wind, plausibility
    rec["warnings"] += [w for w in quality.pop("warnings") if w not in rec["warnings"]]
    rec["warnings"] += [i["message"] if i["severity"] == "warning" else f"{i['severity']}: {i['message']}"
                        for i in quality.get("plausibility", [])]
    rec.update(quality)
    rec["uncertainty"]["method"] = fit.covariance_method
    return rec, d


def _fit_warnings(fit: FlightFit, ball: Ball, model: FlightModel, val, rate: float, srate: float,
                  spin_observable: bool) -> list[str]:
    """Observability and plausibility warnings of a fit, in words a coach reads."""
    warnings: list[str] = []
    if not spin_observable:
        warnings.append(f"the transverse spin ({rate:.0f} ± {srate:.0f} rpm) cannot be told apart from noise: the "
                        "flight is too short or the track too noisy; its rate and axis are not reliable")
    if math.isfinite(fit.lift_override):
        if not math.isfinite(rate):
            warnings.append(f"the fitted lift coefficient {fit.lift_override:.3f} is beyond what the "
                            f"{model.lift_model} model gives for any spin: likely a tracking error")
        bound = float(ideal_lift_bound(val[7])) if math.isfinite(val[7]) else MAX_IDEAL_LIFT_COEFFICIENT
        if fit.lift_override > min(bound, MAX_IDEAL_LIFT_COEFFICIENT) or fit.lift_override > ball.lift_envelope[1] + 0.2:
            warnings.append(f"the fitted lift coefficient {fit.lift_override:.3f} is far above the published range "
                            f"for a {ball.title.lower()} (up to about {ball.lift_envelope[1]:.2f}) or the ideal-flow "
                            "bound: likely a tracking or calibration error")
    elif val[7] > 1.0:
        warnings.append(f"spin parameter {val[7]:.2f} is implausibly high for a {ball.title.lower()}: likely a "
                        "tracking error")
    if fit.options.fit_drag and not 0.05 <= val[5] <= 1.2:
        warnings.append(f"the fitted drag coefficient {val[5]:.3f} is outside 0.05..1.2: likely a tracking or "
                        "calibration error, or the wrong ball")
    if fit.n_outliers > 0.2 * fit.n_points:
        warnings.append(f"{fit.n_outliers} of {fit.n_points} points were flagged as outliers")
    return warnings


# why one flight cannot tell each prior's unknown (fitting/nuisance.py), in words for the warning
_PRIOR_REASONS = {
    "drag_spin_split": "how much of the ball's drag comes from its spin (the no-spin reference needs the drag "
                       "without it; published slopes dC_D/dS run from 0 to about 0.5)",
    "wind_x": "the head or tail wind, known only to the stated uncertainty (it changes the drop)",
    "wind_y": "the crosswind, known only to the stated uncertainty (from one track it looks like sidespin)",
    "log_drag_scale": "the ball's drag level (the catalogue law's coefficient is known to about 20 %)",
    "log_re_shift": "where the ball's drag crisis falls (the speed at which its drag drops)",
    "drag_re_exponent": "how the ball's drag changes with speed",
    "log_lift_scale": "the ball's lift level (a spin rate read from the flight is one of the lift law assumed; published "
                      "laws for one kind of ball differ by about 30 %)",
    "lift_tilt": "how the ball's lift grows with its spin (linear or saturating)",
}


def _prior_warnings(sig: dict) -> list[str]:
    """A warning for each deflection component whose variance comes mostly from a prior on what one
    flight cannot tell (fitting/nuisance.py)."""
    out = []
    for i, (comp, key) in enumerate((("sideways", "deflection_horizontal_m"), ("up-down", "deflection_vertical_m"))):
        total = sig[key]
        for name, part in sig.get("deflection_from_priors_m", {}).items():
            if total > 0 and part[i] ** 2 > 0.5 * total**2:
                why = _PRIOR_REASONS.get(name, name.replace("_", " "))
                out.append(f"the {comp} deflection's uncertainty (± {100 * total:.1f} cm) is mostly what one flight "
                           f"cannot tell: {why}")
    return out


def _baseline(fit: FlightFit, model: FlightModel, target_x: float, start_source: str) -> tuple[dict, list[str]]:
    """The published constant-acceleration (nine-parameter) estimate on the same data, fitted in
    the same space as the full fit, and notes about what that space can and cannot pin."""
    inl = ~fit.outliers
    if fit.residual_unit != "px":
        notes = [w for w in [gravity_check(fit, model)] if w]
        ca = fit_constant_acceleration(fit.t[inl], fit.observed[inl], fit.sigma[inl], t_ref=fit.t0,
                                       reject_outliers=False)
        return baseline_summary(ca, model, target_x), notes
    from ..fitting.image_fit import constant_acceleration_image_fit

    ca = constant_acceleration_image_fit(fit, fit.extra["camera_objects"], model, fit.extra.get("radius_px"))
    baseline = baseline_summary(ca, model, target_x)
    baseline["fitted_in"] = "image space (same observations, cameras, radius and hint as the full fit)"
    notes = []
    depth = fit.extra.get("launch_depth_sigma_m", {})
    if len(fit.extra["cameras"]) == 1:
        name = fit.extra["cameras"][0]
        notes.append(
            f"one camera: depth along its line of sight is pinned "
            f"{f'by the {start_source}, ' if fit.options.start_near is not None else 'only by '}the ball's apparent "
            "size and drag; "
            f"launch depth uncertainty ± {depth.get(name, float('nan')):.2f} m. Speed, spin and deflection "
            "inherit it (see their uncertainties)")
    return baseline, notes


def _uncertainty_section(fit: FlightFit, sig: dict, dcov) -> dict:
    return {
        "launch": {"position_m": fit.sigmas()[:3].tolist(), "velocity_mps": fit.sigmas()[3:6].tolist(),
                   "note": "position and velocity sigmas are at the first observation",
                   "speed_mps": sig["speed_mps"], "elevation_deg": sig["elevation_deg"],
                   "azimuth_deg": sig["azimuth_deg"]},
        "spin": {"rate_rpm": sig["transverse_rate_rpm"], "transverse_rate_rpm": sig["transverse_rate_rpm"],
                 "transverse_axis_deg": sig["axis_angle_deg"],
                 "from_lift_law_rpm": sig.get("transverse_rate_from_lift_law_rpm", 0.0)},
        "aero": {"drag_coefficient": sig["drag_coefficient"], "lift_coefficient": sig["lift_coefficient"],
                 "spin_parameter": sig["spin_parameter"]},
        "deflection": {"horizontal_m": sig["deflection_horizontal_m"], "vertical_m": sig["deflection_vertical_m"],
                       "correlation": sig["deflection_correlation"], "covariance_m2": dcov.tolist(),
                       "from_priors_m": sig.get("deflection_from_priors_m", {}),
                       "same_drag_sigma_m": sig.get("deflection_same_drag_sigma_m")},
        "method": "linearised (Jacobian) covariance scaled by the residual variance",
    }


def tracked_positions(fit: FlightFit):
    """Each pixel observation of an image-space fit placed in the world: the point of its camera ray
    nearest the fitted position at that time (the detection itself, at the fitted depth), shape
    (N, 3) [m]; None without the cameras. For the report's path plots."""
    cams = fit.extra.get("camera_objects")
    idx = fit.extra.get("camera_index")
    if not cams or idx is None or fit.fitted_xyz is None:
        return None
    idx = np.asarray(idx, int)
    out = np.full((len(fit.t), 3), np.nan)
    for k, cam in enumerate(cams):
        m = idx == k
        if not m.any():
            continue
        origin, d = cam.rays(np.asarray(fit.observed, float)[m])
        along = np.einsum("ij,ij->i", np.asarray(fit.fitted_xyz, float)[m] - origin, d)
        out[m] = origin + along[:, None] * d
    return out


def _fit_section(fit: FlightFit) -> dict:
    image = fit.residual_unit == "px"
    points = {"t": fit.t.tolist(), "residual": fit.residuals.tolist(), "outlier": fit.outliers.tolist()}
    if image:
        points.update(observed_px=fit.observed.tolist(), fitted_m=fit.fitted_xyz.tolist())
        tracked = tracked_positions(fit)
        if tracked is not None:
            points["tracked_m"] = tracked.tolist()
    else:
        points.update(observed=fit.observed.tolist())
    return {
        "n_points": fit.n_points, "n_outliers": fit.n_outliers, "rms_residual": fit.rms_residual,
        "residual_unit": fit.residual_unit, "residual_scale": fit.residual_scale, "message": fit.message,
        "evaluations": fit.nfev, "unknowns": list(fit.names),
        "options": {"fit_drag": fit.options.fit_drag, "free_lift": fit.options.free_lift,
                    "start_near": fit.options.start_near, "start_sigma": fit.options.start_sigma},
        "points": points,
        "cameras": {k: v for k, v in fit.extra.items() if k not in ("camera_objects", "radius_px", "camera_index")}
        if image else None,
    }
