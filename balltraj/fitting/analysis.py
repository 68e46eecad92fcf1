"""Quantities derived from a flight fit and their uncertainties (delta method through one batched
integration): launch speed and angles at the launch time, transverse spin, coefficients, the
deflection at a target plane; the gravity check and the spin axis in words. Pure computation.

The flight record itself is built from these by :mod:`balltraj.record.build`.
"""

from __future__ import annotations

import math

import numpy as np

from ..physics.aero import invert_lift
from ..physics.flight import FlightModel, FlightParameters, integrate, velocity_angles
from ..physics.reference import batch_deflections
from ..units import RPM
from .baseline import fit_constant_acceleration
from .deflection import nuisance_share
from .flight_fit import FlightFit, batch_flights, typical_scales

DERIVED = ["speed_mps", "elevation_deg", "azimuth_deg", "transverse_rate_rpm", "axis_angle_deg",
           "drag_coefficient", "lift_coefficient", "spin_parameter"]


def aero_at(model: FlightModel, velocity, spin, lift_override: float = float("nan")) -> dict:
    """Aerodynamic coefficients at one instant.

    Parameters
    ----------
    model : FlightModel
    velocity : array_like, shape (3,) [m/s]
        Ball velocity (the wind of the model is taken off).
    spin : array_like, shape (3,) [rad/s]
        Spin vector; only its part across the air-relative velocity counts.
    lift_override : float
        A constant C_L to report instead of the lift law (NaN: use the law).

    Returns
    -------
    dict
        ``drag_coefficient``, ``lift_coefficient``, ``spin_parameter`` (S = r |w_perp| / |v|) and
        ``reynolds_number``.
    """
    v = np.asarray(velocity, dtype=float) - np.asarray(model.wind_mps)
    speed = float(np.linalg.norm(v))
    w = np.asarray(spin, dtype=float)
    w_perp = w - np.dot(w, v) / speed**2 * v
    S = model.radius_m * float(np.linalg.norm(w_perp)) / speed
    Re = float(model.reynolds(speed))
    cd = float(model.drag(np.array([Re]), np.array([S]))[0])
    cl = float(lift_override) if math.isfinite(lift_override) else float(model.lift(np.array([S]), np.array([Re]))[0])
    return {"drag_coefficient": cd, "lift_coefficient": cl, "spin_parameter": S, "reynolds_number": Re}


def effective_spin(fit_spin, lift_override, v0, model: FlightModel):
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


def derived_values(states, params: FlightParameters, basis, model: FlightModel) -> np.ndarray:
    out = np.empty((states.shape[0], len(DERIVED)))
    for i in range(states.shape[0]):
        v0 = states[i, 3:]
        sp, el, az = velocity_angles(v0)
        lo = float(params.lift_override[i])
        w = effective_spin(params.spin[i], lo, v0, model)
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
    """States, shape (B, 6) [m, m/s] at ``t0`` [s], moved to ``t_new`` [s] along their flights."""
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
    params = fit.flight_parameters()
    model = fit.model if fit.model is not None else model  # the chosen rung's model
    back = min(3.0, 2.0 * (fit.state0[0] - hx) / fit.state0[3] + 0.05)
    tr = integrate(model, fit.t0, fit.state0[None], params, (fit.t0 - back, fit.t0), max_step=0.01)
    tc, _ = tr.first_crossing(0, hx, +1)
    return float(tc[0]) if np.isfinite(tc[0]) and tc[0] < fit.t0 else fit.t0


def derived_uncertainties(fit: FlightFit, model: FlightModel, target_x: float,
                          t_launch: float | None = None) -> tuple[dict, np.ndarray]:
    """One-sigma uncertainties [the quantities' own units] of the derived quantities and of the
    deflection at ``target_x`` [m], and the 2 x 2 deflection covariance [m^2] (delta method,
    central differences, one batched integration for all deflections). Each perturbed flight is
    flown with its own values of the chosen rung's unknowns (drag and lift shape, spin decay,
    wind); the part of the drag that only a spinning ball has, which one flight cannot show, adds
    a prior to the deflection (:mod:`.nuisance`; the part of the deflection's sigma each such prior
    gives is in ``deflection_from_priors_m``), and the lift law's level one to the spin rate (its part in
    ``transverse_rate_from_lift_law_rpm``)."""
    p = fit.params
    k = len(p)
    typ = typical_scales(fit.options)
    typ = np.concatenate([typ, np.full(k - len(typ), 0.01)])  # extra unknowns: time offsets [s]
    h = 1e-5 * np.maximum(np.abs(p), typ)
    P = np.vstack([p + np.diag(h), p - np.diag(h)])
    bm, states, params = batch_flights(fit, model, P)
    tl = fit.t0 if t_launch is None else t_launch
    states = states_at(bm, fit.t0, states, params, tl)
    D = derived_values(states, params, fit.basis, fit.model if fit.model is not None else model)
    dfl = batch_deflections(bm, tl, states, params, target_x)
    vals = np.concatenate([D, dfl], axis=1)
    diff = vals[:k] - vals[k:]
    diff[:, 4] = _wrap_deg(diff[:, 4])
    G = (diff / (2 * h[:, None])).T
    cov = G @ fit.covariance @ G.T
    share_all = nuisance_share(fit, G)
    share = {n: v[-2:] for n, v in share_all.items()}
    sig = np.sqrt(np.clip(np.diag(cov), 0, None))
    names = DERIVED + ["deflection_horizontal_m", "deflection_vertical_m"]
    out = dict(zip(names, sig))
    corr = cov[-2, -1] / (sig[-2] * sig[-1]) if sig[-2] > 0 and sig[-1] > 0 else 0.0
    out["deflection_correlation"] = float(corr)
    out["deflection_from_priors_m"] = {n: [float(x) for x in v] for n, v in share.items()}
    # the spin rate's part from the lift law's level (a rate read from a flight is one of the law assumed)
    level = share_all.get("log_lift_scale")
    out["transverse_rate_from_lift_law_rpm"] = float(level[DERIVED.index("transverse_rate_rpm")]) if level is not None else 0.0
    # against a reference that keeps the spinning ball's drag (the spin's share of the drag set aside)
    split = share.get("drag_spin_split", np.zeros(2))
    out["deflection_same_drag_sigma_m"] = [float(math.sqrt(max(s_ ** 2 - x ** 2, 0.0))) for s_, x in zip(sig[-2:], split)]
    return out, cov[-2:, -2:]


def gravity_check(fit: FlightFit, model: FlightModel) -> str | None:
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
