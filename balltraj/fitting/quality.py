"""JSON-ready extra keys of a fitted flight: the aerodynamic model chosen, the misfit test, the
plausibility issues and the wind. Pure computation, for the flight record to merge.
"""

from __future__ import annotations

import math

import numpy as np

from ..physics.balls import Ball
from ..physics.plausibility import plausibility_issues
from ..physics.potential_flow import ideal_lift_bound
from ..units import RPM
from .baseline import fit_constant_acceleration
from .nuisance import record as nuisance_record
from .results import FlightFit


def _plain(x):
    if isinstance(x, dict):
        return {k: _plain(v) for k, v in x.items()}
    if isinstance(x, (list, tuple)):
        return [_plain(v) for v in x]
    if isinstance(x, (np.floating, float)):
        return None if not math.isfinite(float(x)) else float(x)
    if isinstance(x, (np.integer,)):
        return int(x)
    if isinstance(x, np.bool_):
        return bool(x)
    return x


def launch_aero(fit: FlightFit) -> dict:
    """Speed [m/s], transverse spin [rpm], spin parameter, C_D and C_L at launch under the fitted model."""
    m = fit.model
    v = fit.state0[3:] - np.asarray(m.wind_mps, float)
    speed = float(np.linalg.norm(v))
    free = math.isfinite(fit.lift_override)
    rate = math.nan if free else float(np.linalg.norm(fit.spin))
    S = m.radius_m * rate / speed if not free else math.nan
    Re = np.array([m.reynolds(speed)])
    cd = float(np.ravel(m.drag(Re, np.array([0.0 if free else S])))[0]) * fit.drag_scale
    cl = fit.lift_override if free else float(np.ravel(m.lift(np.array([S]), Re))[0])
    return {"speed_mps": float(np.linalg.norm(fit.state0[3:])), "air_speed_mps": speed,
            "transverse_rate_rpm": rate / RPM if not free else math.nan, "spin_parameter": S,
            "drag_coefficient": cd, "lift_coefficient": cl}


def flight_plausibility(fit: FlightFit, ball: Ball, spin_measured: bool = True) -> list[tuple[str, str]]:
    """:func:`..physics.plausibility.plausibility_issues` of a fit (track or image); ``spin_measured``
    False when the fitted spin cannot be told from noise."""
    a = launch_aero(fit)
    free_fall = None
    if fit.residual_unit == "m" and (~fit.outliers).sum() >= 8:
        inl = ~fit.outliers
        ca = fit_constant_acceleration(fit.t[inl], fit.observed[inl], reject_outliers=False)
        free_fall = float(-ca.acceleration[2])
    bound = float(ideal_lift_bound(a["spin_parameter"])) if math.isfinite(a["spin_parameter"]) else None
    return plausibility_issues(ball, speed_mps=a["speed_mps"], spin_rpm=a["transverse_rate_rpm"],
                               drag_coefficient=a["drag_coefficient"], lift_coefficient=a["lift_coefficient"],
                               lift_bound=bound, free_fall_mps2=free_fall, gravity=fit.model.gravity,
                               residual_unit=fit.residual_unit, misfit=fit.misfit, spin_measured=spin_measured)


def fit_quality_record(fit: FlightFit, ball: Ball | None = None, spin_measured: bool = True) -> dict:
    """Extra flight-file keys: ``aero_model`` (rung, its fitted values, the alternatives' scores and
    why), ``misfit``, ``wind_mps``, ``uncertainty_method``, ``warnings`` and (given the ball)
    ``plausibility`` as a list of {"severity", "message"}; ``priors``: the nuisance unknowns one flight
    cannot tell, with prior, data-only and posterior sigmas (:mod:`.nuisance`)."""
    m = fit.model
    fitted = {n: float(v) for n, v in zip(fit.names, fit.params) if n not in
              ("x0", "y0", "z0", "vx0", "vy0", "vz0", "spin_1", "spin_2", "lift_1", "lift_2")}
    sig = dict(zip(fit.names, fit.sigmas()))
    out = {
        "aero_model": {**fit.model_choice, "fitted": fitted,
                       "fitted_sigma": {n: float(sig[n]) for n in fitted},
                       "drag_model": m.drag_model, "lift_model": m.lift_model,
                       "spin_decay_s": fit.spin_decay_s if math.isfinite(fit.spin_decay_s) else None},
        "misfit": fit.misfit,
        "wind_mps": [float(w) for w in m.wind_mps],
        "uncertainty_method": fit.covariance_method,
        "warnings": list(fit.warnings),
        "priors": nuisance_record(fit.nuisance),
    }
    if ball is not None:
        out["plausibility"] = [{"severity": s, "message": msg} for s, msg in flight_plausibility(fit, ball, spin_measured)]
    return _plain(out)


def has_impossible(issues) -> bool:
    """True when any issue is "impossible" (the command should exit 2 unless forced)."""
    return any((i[0] if isinstance(i, tuple) else i["severity"]) == "impossible" for i in issues)
