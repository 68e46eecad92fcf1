"""The constant-acceleration ("nine-parameter") trajectory fit, the published baseline.

Each coordinate is fitted as a quadratic in time, r(t) = r0 + v0 (t - t_ref) + a (t - t_ref)^2 / 2.
Gravity is removed from a; the drag and Magnus parts of the rest give C_D = a_D / (K v^2) and
C_L = |a_M| / (K v^2) at the window midpoint; the transverse spin direction is
(v x a_M) / |v x a_M|; its rate follows from inverting a C_L(S) model.

References
----------
Nathan 2008, Am. J. Phys. 76:119 (least-squares trajectory fits); Goff & Carre 2009, Am. J. Phys.
77:1020 (quadratic fits, constant net force); K = rho A / (2 m) as in Nathan's 2015 note (eqs. 1-3).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from ..errors import FitError
from ..physics.aero import invert_lift
from ..physics.flight import FlightModel


@dataclass(frozen=True)
class ConstantAccelerationFit:
    t_ref: float
    position: np.ndarray  # (3,) at t_ref [m]
    velocity: np.ndarray  # (3,) at t_ref [m/s]
    acceleration: np.ndarray  # (3,) [m/s^2]
    covariance: np.ndarray  # (9, 9), order x0 y0 z0 vx vy vz ax ay az
    residuals: np.ndarray  # (N, 3) [m]
    inliers: np.ndarray  # (N,) bool
    t_span: tuple[float, float]

    def position_at(self, t):
        dt = np.asarray(t, dtype=float)[..., None] - self.t_ref
        return self.position + self.velocity * dt + 0.5 * self.acceleration * dt**2

    def velocity_at(self, t):
        dt = np.asarray(t, dtype=float)[..., None] - self.t_ref
        return self.velocity + self.acceleration * dt


def fit_constant_acceleration(t, xyz, sigma=None, t_ref=None, reject_outliers: bool = True,
                              threshold: float = 4.6) -> ConstantAccelerationFit:
    """Weighted least-squares quadratic fit of each coordinate, with optional outlier rejection
    (points whose residual norm exceeds ``threshold`` robust sigmas are dropped, twice)."""
    t = np.asarray(t, dtype=float)
    X = np.asarray(xyz, dtype=float)
    n = len(t)
    if n < 4:
        raise FitError(f"{n} points are too few for a constant-acceleration fit (at least 4 needed)")
    w = np.ones(n) if sigma is None else 1.0 / np.asarray(sigma, dtype=float)
    tr = float(t[0]) if t_ref is None else float(t_ref)
    dt = t - tr
    A = np.column_stack([np.ones(n), dt, 0.5 * dt**2])
    keep = np.ones(n, bool)
    rounds = 3 if reject_outliers else 1
    while rounds > 0:
        rounds -= 1
        Aw = A[keep] * w[keep, None]
        coef, *_ = np.linalg.lstsq(Aw, X[keep] * w[keep, None], rcond=None)
        res = X - A @ coef
        if rounds > 0:
            d = np.linalg.norm(res * w[:, None], axis=1)
            scale = 1.4826 * np.median(np.abs(res[keep] * w[keep, None])) + 1e-12
            new = d / scale <= threshold
            if new.sum() < 4 or np.array_equal(new, keep):
                rounds = 0  # settled
            else:
                keep = new
    Aw = A[keep] * w[keep, None]
    dof = max(1, 3 * keep.sum() - 9)
    s2 = float(np.sum((res[keep] * w[keep, None]) ** 2) / dof)
    try:
        cov3 = np.linalg.inv(Aw.T @ Aw) * s2
    except np.linalg.LinAlgError:
        raise FitError("the observation times do not determine a quadratic (all at one instant?)") from None
    # per-coordinate variance estimate: s2 pooled across the three coordinates
    cov = np.zeros((9, 9))
    for c in range(3):
        idx = [c, 3 + c, 6 + c]
        cov[np.ix_(idx, idx)] = cov3
    return ConstantAccelerationFit(
        t_ref=tr, position=coef[0], velocity=coef[1], acceleration=coef[2], covariance=cov,
        residuals=res, inliers=keep, t_span=(float(t[keep].min()), float(t[keep].max())),
    )


def _quadratic_crossing(x0, vx, ax, target):
    """Smallest positive dt with x0 + vx dt + ax dt^2/2 = target (NaN if none)."""
    a, b, c = 0.5 * ax, vx, x0 - target
    if abs(a) < 1e-12:
        return -c / b if b != 0 and -c / b >= 0 else math.nan
    disc = b * b - 4 * a * c
    if disc < 0:
        return math.nan
    r = [(-b - math.sqrt(disc)) / (2 * a), (-b + math.sqrt(disc)) / (2 * a)]
    r = [x for x in r if x >= -1e-12]
    return min(r) if r else math.nan


def baseline_summary(fit: ConstantAccelerationFit, model: FlightModel, target_x: float | None) -> dict:
    """Implied coefficients, transverse spin and deflection of a constant-acceleration fit."""
    g = np.array([0.0, 0.0, -model.gravity])
    a_aero = fit.acceleration - g
    t_mid = 0.5 * (fit.t_span[0] + fit.t_span[1])
    v = fit.velocity_at(t_mid) - np.asarray(model.wind_mps)
    speed = float(np.linalg.norm(v))
    vhat = v / speed
    K = model.k_factor
    a_drag = -float(a_aero @ vhat)
    a_m = a_aero - (a_aero @ vhat) * vhat
    cd = a_drag / (K * speed**2)
    cl = float(np.linalg.norm(a_m)) / (K * speed**2)
    cross = np.cross(v, a_m)
    axis = cross / np.linalg.norm(cross) if np.linalg.norm(cross) > 0 else np.zeros(3)
    S = float(invert_lift(cl, model.lift_model, reynolds=model.reynolds(speed), **model.lift_params)[0])
    rate = S * speed / model.radius_m if math.isfinite(S) else math.nan
    out = {
        "method": "constant-acceleration (nine-parameter) fit",
        "t_ref_s": fit.t_ref,
        "position_m": fit.position.tolist(),
        "velocity_mps": fit.velocity.tolist(),
        "acceleration_mps2": fit.acceleration.tolist(),
        "acceleration_sigma_mps2": np.sqrt(np.diag(fit.covariance)[6:]).tolist(),
        "speed_mps": float(np.linalg.norm(fit.velocity)),
        "midpoint_speed_mps": speed,
        "drag_coefficient": cd,
        "lift_coefficient": cl,
        "spin_parameter": S,
        "transverse_rate_rpm": rate * 60 / (2 * math.pi),
        "transverse_axis": axis.tolist(),
        "n_inliers": int(fit.inliers.sum()),
        "rms_residual_m": float(np.sqrt(np.mean(np.sum(fit.residuals[fit.inliers] ** 2, axis=1)))),
    }
    if target_x is not None:
        dt1 = _quadratic_crossing(fit.position[0], fit.velocity[0], fit.acceleration[0], target_x)
        a_ref = fit.acceleration - a_m
        dt2 = _quadratic_crossing(fit.position[0], fit.velocity[0], a_ref[0], target_x)
        if math.isfinite(dt1) and math.isfinite(dt2):
            p1 = fit.position + fit.velocity * dt1 + 0.5 * fit.acceleration * dt1**2
            p2 = fit.position + fit.velocity * dt2 + 0.5 * a_ref * dt2**2
            out["deflection"] = {"target_x_m": target_x, "horizontal_m": float(p1[1] - p2[1]),
                                 "vertical_m": float(p1[2] - p2[2])}
        else:
            out["deflection"] = None
    return out
