"""Launch speed and deflection of a fitted flight with one-sigma uncertainties, through the chosen
rung's model (drag and lift shape, spin decay, wind) and the fit's covariance. Pure computation.

The deflection follows docs/architecture.md (conventions): the fitted path at the plane x = X minus the no-spin
reference (same launch, same drag law at zero spin, same wind).
"""

from __future__ import annotations

import numpy as np

import math

from ..physics.flight import FlightModel, FlightParameters, fly
from ..physics.reference import batch_deflections
from .flight_fit import batch_flights
from .results import FlightFit


# How much the drag of the spinning ball exceeds that of the same ball without spin is not seen by
# one spinning flight (the fit measures only the total), yet the no-spin reference needs it. Prior
# on the slope dC_D/dS: 0 +/- 0.25. Source: Stepanek 1988's tennis law rises from 0.508 at S = 0 to
# 0.660 at S = 0.3 (slope about 0.5, computed from its formula); baseball trajectory models use a
# small linear spin term (from memory); Smits & Smith 1994 report a stronger S dependence for golf.
SPIN_DRAG_SLOPE_SIGMA = 0.25


def launch_speed(fit: FlightFit) -> tuple[float, float]:
    """(speed [m/s], one-sigma [m/s]) at the first observation (delta method)."""
    v = fit.state0[3:]
    sp = float(np.linalg.norm(v))
    g = v / sp
    c = fit.covariance[3:6, 3:6]
    return sp, float(np.sqrt(max(g @ c @ g, 0.0))) if np.all(np.isfinite(c)) else float("nan")


def fit_deflection(fit: FlightFit, model: FlightModel, target_x: float, step: float = 1e-5):
    """Deflection (2,) [m] (sideways +y, upward +z) at x = ``target_x`` and its covariance (2, 2).

    model : the catalogue model the fit started from (the rung's values come from the fit)
    Central differences of one batched integration over every unknown (delta method).
    """
    p = fit.params
    k = len(p)
    h = step * np.maximum(np.abs(p), 0.01)
    h[3:8] = step * np.maximum(np.abs(p[3:8]), 10.0)
    P = np.vstack([p[None], p + np.diag(h), p - np.diag(h)])
    bm, states, params = batch_flights(fit, model, P)
    d = batch_deflections(bm, fit.t0, states, params, target_x)
    G = ((d[1:k + 1] - d[k + 1:]) / (2 * h[:, None])).T
    cov = G @ fit.covariance @ G.T
    if "drag_spin_slope" not in fit.names:
        dd = spin_drag_effect(fit, target_x)
        if dd is not None:
            cov = cov + np.outer(dd, dd)
    return d[0], cov


def spin_drag_effect(fit: FlightFit, target_x: float):
    """Change (2,) of the deflection [m] if the no-spin reference had SPIN_DRAG_SLOPE_SIGMA * S0
    less drag coefficient than the fitted (spinning) flight (None when it cannot be evaluated)."""
    m = fit.model
    if m is None or math.isfinite(fit.lift_override):
        return None
    v = fit.state0[3:] - np.asarray(m.wind_mps, float)
    speed = float(np.linalg.norm(v))
    s0 = m.radius_m * float(np.linalg.norm(fit.spin)) / speed
    cd0 = float(np.ravel(m.drag(np.array([m.reynolds(speed)]), np.array([s0])))[0]) * fit.drag_scale
    if not (cd0 > 0 and s0 > 0):
        return None
    scale = fit.drag_scale * np.array([1.0, max(0.05, 1.0 - SPIN_DRAG_SLOPE_SIGMA * s0 / cd0)])
    prm = FlightParameters.make(2, spin=np.zeros(3), drag_scale=scale)
    tr = fly(m, fit.t0, np.stack([fit.state0, fit.state0]), prm, stop_x=target_x, ground_z=None, max_step=0.01)
    _, sc = tr.first_crossing(0, target_x, +1)
    if not np.all(np.isfinite(sc)):
        return None
    return -(sc[1, 1:3] - sc[0, 1:3])
