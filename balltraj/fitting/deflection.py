"""Launch speed and deflection of a fitted flight with one-sigma uncertainties, through the chosen
rung's model (drag and lift shape, spin decay, wind) and the fit's covariance. Pure computation.

The deflection follows docs/architecture.md (conventions): the fitted path at the plane x = X minus the no-spin
reference (same launch, same drag law at zero spin, same wind). What one flight cannot tell about
that reference (the drag share of the spin; an unknown wind) is among the fit's unknowns, with its
prior (:mod:`.nuisance`), so the delta method carries it.
"""

from __future__ import annotations

import numpy as np

from ..physics.flight import FlightModel
from ..physics.reference import batch_deflections
from .flight_fit import batch_flights
from .results import FlightFit


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
    return d[0], cov


def nuisance_share(fit: FlightFit, G) -> dict:
    """How much of a derived quantity's uncertainty comes from each nuisance unknown (:mod:`.nuisance`).

    G : ndarray, shape (q, k), the quantities' derivatives over ``fit.params``
    Returns name -> ndarray (q,), the one-sigma part [the quantities' units] from that nuisance's
    posterior spread along its compensated direction (D = G_theta A + G_b).
    """
    nu = fit.nuisance or {}
    names = tuple(nu.get("names", ()))
    if not names:
        return {}
    b = [fit.names.index(n) for n in names]
    th = [i for i in range(len(fit.names)) if i not in b]
    D = np.asarray(G)[:, th] @ np.asarray(nu["compensation"]) + np.asarray(G)[:, b]
    sd = np.sqrt(np.clip(np.diag(np.asarray(nu["covariance"])), 0, None))
    return {n: np.abs(D[:, j]) * sd[j] for j, n in enumerate(names)}
