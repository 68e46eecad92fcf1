"""From a flight fit to a flight record: derived quantities, their uncertainties, deflection,
the baseline, observability and plausibility warnings. Pure computation."""

from __future__ import annotations

import math

import numpy as np

from .. import __version__
from ..errors import FitError
from ..physics.aero import invert_lift
from ..physics.air import AirConditions
from ..physics.balls import Ball
from ..physics.flight import FlightModel, FlightParameters, integrate, velocity_angles
from ..physics.potential_flow import MAX_IDEAL_LIFT_COEFFICIENT, ideal_lift_bound
from ..physics.reference import batch_deflections, plane_deflection
from ..units import RPM
from .baseline import baseline_summary, fit_constant_acceleration
from .flight_fit import FlightFit, batch_unpack, typical_scales
from .record import SCHEMA, aero_at, ball_dict, deflection_dict, launch_dict, model_dict, spin_dict

DERIVED = ["speed_mps", "elevation_deg", "azimuth_deg", "transverse_rate_rpm", "axis_angle_deg",
           "drag_coefficient", "lift_coefficient", "spin_parameter"]


def _effective_spin(fit_spin, lift_override, v0, model: FlightModel):
    """Spin vector [rad/s] implied by the fit: the spin itself, or (free lift) the direction with
    the rate that the ball's lift model needs for the fitted C_L."""
    if not math.isfinite(lift_override):
        return np.asarray(fit_spin, dtype=float)
    speed = float(np.linalg.norm(v0))
    S = float(invert_lift(lift_override, model.lift_model, reynolds=model.reynolds(speed), **model.lift_params)[0])
    n = np.linalg.norm(fit_spin)
    if n == 0 or not math.isfinite(S):
        return np.zeros(3) if n == 0 else np.asarray(fit_spin) / n * math.nan
    return np.asarray(fit_spin) / n * S * speed / model.radius_m


def _derived(states, params: FlightParameters, basis, model: FlightModel) -> np.ndarray:
    out = np.empty((states.shape[0], len(DERIVED)))
    for i in range(states.shape[0]):
        v0 = states[i, 3:]
        sp, el, az = velocity_angles(v0)
        lo = float(params.lift_override[i])
        w = _effective_spin(params.spin[i], lo, v0, model)
        vhat = v0 / sp
        wp = w - np.dot(w, vhat) * vhat
        comp = params.spin[i]
        angle = math.degrees(math.atan2(comp @ basis[1], comp @ basis[0]))
        a = aero_at(model, v0, params.spin[i], lift_override=lo)
        out[i] = [sp, math.degrees(el), math.degrees(az), np.linalg.norm(wp) / RPM, angle,
                  a["drag_coefficient"] * float(params.drag_scale[i]), a["lift_coefficient"],
                  model.radius_m * np.linalg.norm(wp) / sp if math.isfinite(lo) else a["spin_parameter"]]
    return out


def _wrap_deg(d):
    return (d + 180.0) % 360.0 - 180.0


def states_at(model: FlightModel, t0: float, states, params: FlightParameters, t_new: float) -> np.ndarray:
    """Batched states (B, 6) moved from t0 to t_new along their flights."""
    if t_new == t0:
        return np.asarray(states, float)
    tr = integrate(model, t0, states, params, (min(t0, t_new), max(t0, t_new)), max_step=0.01)
    return tr.sample([t_new])[:, 0, :]


def launch_time(fit: FlightFit, model: FlightModel) -> float:
    """The first observation, or, with a start hint, where the fitted path passes the hint's plane
    x = X (when that is before the first observation): the release point the user named."""
    if fit.options.start_near is None:
        return fit.t0
    hx = float(fit.options.start_near[0])
    if hx >= fit.state0[0] or fit.state0[3] <= 0:
        return fit.t0
    params = FlightParameters.make(1, spin=fit.spin, drag_scale=fit.drag_scale, lift_override=fit.lift_override)
    back = min(3.0, 2.0 * (fit.state0[0] - hx) / fit.state0[3] + 0.05)
    tr = integrate(model, fit.t0, fit.state0[None], params, (fit.t0 - back, fit.t0), max_step=0.01)
    tc, _ = tr.first_crossing(0, hx, +1)
    return float(tc[0]) if np.isfinite(tc[0]) and tc[0] < fit.t0 else fit.t0


def derived_uncertainties(fit: FlightFit, model: FlightModel, target_x: float,
                          t_launch: float | None = None) -> tuple[dict, np.ndarray]:
    """One-sigma uncertainties of the derived quantities and of the deflection (delta method,
    central differences, one batched integration for all deflections)."""
    p = fit.params
    k = len(p)
    typ = typical_scales(fit.options)
    typ = np.concatenate([typ, np.full(k - len(typ), 0.01)])  # extra unknowns: time offsets [s]
    h = 1e-5 * np.maximum(np.abs(p), typ)
    P = np.vstack([p + np.diag(h), p - np.diag(h)])
    states, params = batch_unpack(fit, model, P)
    tl = fit.t0 if t_launch is None else t_launch
    states = states_at(model, fit.t0, states, params, tl)
    D = _derived(states, params, fit.basis, model)
    dfl = batch_deflections(model, tl, states, params, target_x)
    vals = np.concatenate([D, dfl], axis=1)
    diff = vals[:k] - vals[k:]
    diff[:, 4] = _wrap_deg(diff[:, 4])
    G = (diff / (2 * h[:, None])).T
    cov = G @ fit.covariance @ G.T
    sig = np.sqrt(np.clip(np.diag(cov), 0, None))
    names = DERIVED + ["deflection_horizontal_m", "deflection_vertical_m"]
    out = dict(zip(names, sig))
    corr = cov[-2, -1] / (sig[-2] * sig[-1]) if sig[-2] > 0 and sig[-1] > 0 else 0.0
    out["deflection_correlation"] = float(corr)
    return out, cov[-2:, -2:]


def fit_record(fit: FlightFit, ball: Ball, air: AirConditions, model: FlightModel, *,
               target_x: float | None = None, source: str | None = None) -> tuple[dict, object]:
    """The flight record of a fitted flight and its Deflection (paths for the report and CSV)."""
    if not fit.success:
        raise FitError(f"the fit failed: {fit.message}",
                       hint="check the track (units, time column) or give more points")
    inl = ~fit.outliers
    xyz_fit = fit.fitted_xyz if fit.fitted_xyz is not None else fit.observed
    if target_x is None:
        target_x = float(xyz_fit[inl][-1, 0])
    params = FlightParameters.make(1, spin=fit.spin, drag_scale=fit.drag_scale, lift_override=fit.lift_override)
    t_launch = launch_time(fit, model)
    state_l = states_at(model, fit.t0, fit.state0[None], params, t_launch)[0]
    d = plane_deflection(model, t_launch, state_l, params, target_x, ground_z=None)
    sig, dcov = derived_uncertainties(fit, model, target_x, t_launch)
    val = _derived(state_l[None], params, fit.basis, model)[0]
    v0 = state_l[3:]
    w_eff = _effective_spin(fit.spin, fit.lift_override, v0, model)
    spin = spin_dict(np.nan_to_num(w_eff), v0, gyro_observed=False)
    free = math.isfinite(fit.lift_override)
    aero = {
        "drag_coefficient": val[5], "lift_coefficient": val[6], "spin_parameter": val[7],
        "reynolds_number": float(model.reynolds(np.linalg.norm(v0 - np.asarray(model.wind_mps)))),
        "evaluated_at": "launch",
        "drag_source": ("fitted scale x " if fit.options.fit_drag else "") + f"model {model.drag_model}",
        "lift_source": "fitted free constant" if free else f"model {model.lift_model}",
        "drag_scale": fit.drag_scale,
    }
    warnings: list[str] = []
    rate, srate = spin["transverse_rate_rpm"], sig["transverse_rate_rpm"]
    spin_observable = bool(math.isfinite(rate) and srate < 0.5 * max(rate, 1e-9))
    if not spin_observable:
        warnings.append(f"the transverse spin ({rate:.0f} ± {srate:.0f} rpm) cannot be told apart from noise: the "
                        "flight is too short or the track too noisy; its rate and axis are not reliable")
    if free:
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
    image = fit.residual_unit == "px"
    if not image:
        g_check = _gravity_check(fit, model)
        if g_check:
            warnings.append(g_check)
        ca = fit_constant_acceleration(fit.t[inl], fit.observed[inl], fit.sigma[inl], t_ref=fit.t0,
                                       reject_outliers=False)
        baseline = baseline_summary(ca, model, target_x)
    else:
        from .image_fit import constant_acceleration_image_fit

        ca = constant_acceleration_image_fit(fit, fit.extra["camera_objects"], model, fit.extra.get("radius_px"))
        baseline = baseline_summary(ca, model, target_x)
        baseline["fitted_in"] = "image space (same observations, cameras, radius and hint as the full fit)"
        depth = fit.extra.get("launch_depth_sigma_m", {})
        if len(fit.extra["cameras"]) == 1:
            name = fit.extra["cameras"][0]
            warnings.append(
                f"one camera: depth along its line of sight is pinned only by "
                f"{'the start hint, ' if fit.options.start_near is not None else ''}the ball's apparent size and drag; "
                f"launch depth uncertainty ± {depth.get(name, float('nan')):.2f} m. Speed, spin and deflection "
                "inherit it (see their uncertainties)")
    defl = deflection_dict(d)
    dcov_list = dcov.tolist()
    unc = {
        "launch": {"position_m": fit.sigmas()[:3].tolist(), "velocity_mps": fit.sigmas()[3:6].tolist(),
                   "note": "position and velocity sigmas are at the first observation",
                   "speed_mps": sig["speed_mps"], "elevation_deg": sig["elevation_deg"],
                   "azimuth_deg": sig["azimuth_deg"]},
        "spin": {"rate_rpm": srate, "transverse_rate_rpm": srate, "transverse_axis_deg": sig["axis_angle_deg"]},
        "aero": {"drag_coefficient": sig["drag_coefficient"], "lift_coefficient": sig["lift_coefficient"],
                 "spin_parameter": sig["spin_parameter"]},
        "deflection": {"horizontal_m": sig["deflection_horizontal_m"], "vertical_m": sig["deflection_vertical_m"],
                       "correlation": sig["deflection_correlation"], "covariance_m2": dcov_list},
        "method": "linearised (Jacobian) covariance scaled by the residual variance",
    }
    spin["observable"] = spin_observable
    spin["axis_in_words"] = spin_axis_words(spin["transverse_axis"], v0)
    if free:
        spin["note"] += f"; the rate is inferred from the fitted lift through the {model.lift_model} model"
    rec = {
        "schema": SCHEMA, "source": source or "fit", "tool_version": __version__, "ball": ball.name,
        "ball_properties": ball_dict(ball, model), "air": air.to_dict(),
        "model": model_dict(model, drag_scale=fit.drag_scale, lift_override=fit.lift_override,
                            spin_vector=fit.spin),
        "launch": {**launch_dict(t_launch, state_l),
                   "at": "the start hint's plane" if t_launch != fit.t0 else "the first used observation",
                   "first_observation_t_s": fit.t0},
        "spin": spin, "aero": aero, "deflection": defl, "drop": d.drop_summary(),
        "uncertainty": unc,
        "fit": {
            "n_points": fit.n_points, "n_outliers": fit.n_outliers, "rms_residual": fit.rms_residual,
            "residual_unit": fit.residual_unit, "residual_scale": fit.residual_scale, "message": fit.message,
            "evaluations": fit.nfev, "unknowns": list(fit.names),
            "options": {"fit_drag": fit.options.fit_drag, "free_lift": fit.options.free_lift,
                        "start_near": fit.options.start_near, "start_sigma": fit.options.start_sigma},
            "points": ({"t": fit.t.tolist(), "observed": fit.observed.tolist(), "residual": fit.residuals.tolist(),
                        "outlier": fit.outliers.tolist()} if not image else
                       {"t": fit.t.tolist(), "observed_px": fit.observed.tolist(), "residual": fit.residuals.tolist(),
                        "outlier": fit.outliers.tolist(), "fitted_m": fit.fitted_xyz.tolist()}),
            "cameras": {k: v for k, v in fit.extra.items() if k not in ("camera_objects", "radius_px", "camera_index")}
            if image else None,
        },
        "baseline": baseline,
        "warnings": warnings,
    }
    return rec, d


def _gravity_check(fit: FlightFit, model: FlightModel) -> str | None:
    """Gravity as a clock: a free constant-acceleration fit of a slow-motion file stored
    time-stretched shows a far smaller downward acceleration than g."""
    inl = ~fit.outliers
    if inl.sum() < 8:
        return None
    ca = fit_constant_acceleration(fit.t[inl], fit.observed[inl], reject_outliers=False)
    az = -ca.acceleration[2]
    if az < 0.25 * model.gravity or az > 4 * model.gravity:
        return (f"the track's downward acceleration is {-ca.acceleration[2]:.2f} m/s^2, far from gravity: "
                "timestamps may be stretched (slow-motion export) or positions scaled wrongly")
    return None


def spin_axis_words(axis, velocity) -> dict:
    """Backspin/topspin/sidespin shares of the transverse spin axis, relative to the flight
    direction at launch (for reports)."""
    a = np.asarray(axis, dtype=float)
    v = np.asarray(velocity, dtype=float)
    vhat = v / np.linalg.norm(v)
    left = np.cross([0.0, 0.0, 1.0], vhat)
    if np.linalg.norm(left) < 1e-9:
        return {"backspin": None, "sidespin": None, "text": "straight-up flight: no back/side split"}
    left /= np.linalg.norm(left)
    up = np.cross(vhat, left)
    back = -float(a @ left)  # backspin axis points to the right of the flight (-left)
    side = float(a @ up)  # + = spin about the upward axis: curves the ball left
    tot = abs(back) + abs(side)
    if tot == 0:
        return {"backspin": 0.0, "sidespin": 0.0, "text": "no transverse spin"}
    parts = []
    b_share, s_share = abs(back) / tot, abs(side) / tot
    parts.append(f"{100 * b_share:.0f}% {'backspin' if back >= 0 else 'topspin'}")
    parts.append(f"{100 * s_share:.0f}% sidespin {'curving left' if side >= 0 else 'curving right'}")
    return {"backspin": back, "sidespin": side, "text": ", ".join(parts)}
