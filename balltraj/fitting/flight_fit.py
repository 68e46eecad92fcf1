"""The flight fit: launch state, transverse spin (and optionally drag scale or a free lift
coefficient) from tracked 3D positions, by robust least squares through the batched integrator.

Unknowns (scaled internally by the Jacobian's column norms):

====================  =============================================================
x0, y0, z0            launch position at t0 (the first observation) [m]
vx0, vy0, vz0         launch velocity [m/s]
spin_1, spin_2        transverse spin components [rad/s] on e1 = z x v_hat (horizontal,
                      + = topspin for a ball moving along +x) and e2 = v_hat x e1
                      (+ = spin about the upward axis, sidespin that curves the ball left)
lift_1, lift_2        (with ``free_lift``) the same directions, but the components of a
                      constant lift coefficient vector instead of a spin
log_drag_scale        (with ``fit_drag``) natural log of a multiplier on the drag model
====================  =============================================================

The gyro part of the spin (along the velocity) makes no force and is not an unknown: it cannot
be recovered from a trajectory (DESIGN section 3).

The fit runs in three passes: a robust pass (soft-L1 loss) from the constant-acceleration start,
outlier flagging on the robust residuals, and a plain least-squares pass on the inliers whose
Jacobian (central differences, one batched integration) gives the covariance, scaled by the
residual variance.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np
from scipy.optimize import least_squares

from ..errors import FitError
from ..physics.flight import FlightModel, FlightParameters, Trajectory, integrate
from .baseline import fit_constant_acceleration

OUTLIER_THRESHOLD = 4.6  # sqrt(chi2_3 quantile 0.9999): residual norm in sigmas
TYPICAL = np.array([1.0, 1.0, 1.0, 10.0, 10.0, 10.0, 10.0, 10.0])


@dataclass(frozen=True)
class FitOptions:
    fit_drag: bool = False
    free_lift: bool = False
    robust: bool = True
    outlier_threshold: float = OUTLIER_THRESHOLD
    start_near: tuple[float, float, float] | None = None
    start_sigma: float = 0.3
    max_step: float = 0.04  # RK4 + Hermite sampling error stays below 1e-8 m on ball flights
    max_nfev: int = 60


@dataclass(frozen=True)
class FlightFit:
    """Result of a flight fit. ``success`` False carries the reason in ``message``."""

    success: bool
    message: str
    names: tuple[str, ...]
    params: np.ndarray
    covariance: np.ndarray
    t0: float
    state0: np.ndarray  # (6,)
    spin: np.ndarray  # (3,) transverse spin vector [rad/s] (model mode) or lift direction (free lift)
    drag_scale: float
    lift_override: float  # NaN unless free_lift
    basis: np.ndarray  # (2, 3): e1, e2
    t: np.ndarray
    observed: np.ndarray  # (N, 3)
    fitted: np.ndarray  # (N, 3)
    residuals: np.ndarray  # (N, 3) observed - fitted [m]
    sigma: np.ndarray  # (N,) per-point sigma used [m]
    outliers: np.ndarray  # (N,) bool
    residual_scale: float  # sqrt(chi2 / dof) of the final pass
    nfev: int
    options: FitOptions = field(default_factory=FitOptions)
    undetermined: tuple[str, ...] = ()

    @property
    def n_points(self) -> int:
        return len(self.t)

    @property
    def n_outliers(self) -> int:
        return int(self.outliers.sum())

    @property
    def rms_residual(self) -> float:
        r = self.residuals[~self.outliers]
        return float(np.sqrt(np.mean(np.sum(r**2, axis=1)))) if len(r) else math.nan

    def sigmas(self) -> np.ndarray:
        return np.sqrt(np.clip(np.diag(self.covariance), 0, None))


def typical_scales(options: FitOptions) -> np.ndarray:
    """Typical size of each unknown, for finite-difference steps."""
    typical = list(TYPICAL)
    if options.free_lift:
        typical[6:8] = [0.1, 0.1]
    if options.fit_drag:
        typical.append(0.1)
    return np.array(typical)


def _basis(v) -> np.ndarray:
    vhat = np.asarray(v, dtype=float) / np.linalg.norm(v)
    e1 = np.cross([0.0, 0.0, 1.0], vhat)
    if np.linalg.norm(e1) < 1e-6:  # vertical flight: pick x as reference
        e1 = np.cross([1.0, 0.0, 0.0], vhat)
    e1 /= np.linalg.norm(e1)
    e2 = np.cross(vhat, e1)
    return np.stack([e1, e2])


class _Problem:
    """Residuals of many parameter sets at once."""

    def __init__(self, model: FlightModel, t, xyz, sigma, basis, options: FitOptions):
        self.model = model
        self.t = np.asarray(t, dtype=float)
        self.xyz = np.asarray(xyz, dtype=float)
        self.sigma = np.asarray(sigma, dtype=float)
        self.basis = basis
        self.opt = options
        self.t0 = float(self.t[0])
        names = ["x0", "y0", "z0", "vx0", "vy0", "vz0"]
        names += ["lift_1", "lift_2"] if options.free_lift else ["spin_1", "spin_2"]
        if options.fit_drag:
            names.append("log_drag_scale")
        self.names = tuple(names)
        self.typical = typical_scales(options)
        self._mask = np.ones(len(self.t), bool)
        self._cache: dict = {}
        self.back_s = 0.0
        if options.start_near is not None:
            self.hint = np.asarray(options.start_near, dtype=float)
        else:
            self.hint = None

    @property
    def mask(self):
        return self._mask

    @mask.setter
    def mask(self, value):
        self._mask = value
        self._cache.clear()

    def set_hint_span(self, speed):
        if self.hint is not None:
            dist = float(np.linalg.norm(self.hint - self.xyz[0]))
            self.back_s = min(2.0, 1.5 * dist / max(speed, 1.0) + 0.05)

    def unpack(self, P):
        P = np.atleast_2d(P)
        n = P.shape[0]
        states = P[:, :6]
        comp = P[:, 6:8]
        vec = comp[:, :1] * self.basis[0] + comp[:, 1:2] * self.basis[1]
        if self.opt.free_lift:
            params = FlightParameters.make(n, spin=vec, lift_override=np.linalg.norm(comp, axis=1))
        else:
            params = FlightParameters.make(n, spin=vec)
        if self.opt.fit_drag:
            params = FlightParameters(params.spin, np.exp(P[:, 8]), params.lift_override, params.spin_decay_s)
        return states, params

    def trajectories(self, P) -> Trajectory:
        states, params = self.unpack(P)
        return integrate(self.model, self.t0, states, params, (self.t0 - self.back_s, float(self.t[-1])),
                         max_step=self.opt.max_step)

    def residuals(self, P) -> np.ndarray:
        tr = self.trajectories(P)
        pos = tr.positions(self.t[self.mask])
        r = ((pos - self.xyz[self.mask]) / self.sigma[self.mask, None]).reshape(pos.shape[0], -1)
        if self.hint is not None:
            r = np.concatenate([r, self._hint_residuals(tr)], axis=1)
        return r

    def _hint_residuals(self, tr: Trajectory) -> np.ndarray:
        tc, sc = tr.first_crossing(0, self.hint[0], +1)
        at_t0 = tr.sample([self.t0])[:, 0, :]
        use = np.where(np.isfinite(tc) & (tc <= self.t0 + 1e-9), 1, 0).astype(bool)
        p = np.where(use[:, None], sc[:, :3], at_t0[:, :3])
        return (p - self.hint) / self.opt.start_sigma

    def steps(self, p):
        return 1e-6 * np.maximum(np.abs(p), self.typical)

    def jacobian(self, p, central: bool = False):
        h = self.steps(p)
        k = len(p)
        if central:
            P = np.vstack([p + np.diag(h), p - np.diag(h)])
            R = self.residuals(P)
            return ((R[:k] - R[k:]) / (2 * h[:, None])).T
        key = p.tobytes()
        if key in self._cache:
            return self._cache[key][1]
        self.fun(p)
        return self._cache[key][1]

    def fun(self, p):
        """Residuals at p; the forward-difference Jacobian is computed in the same batched
        integration (on small batches it costs almost nothing extra) and kept for ``jacobian``."""
        key = p.tobytes()
        if key not in self._cache:
            h = self.steps(p)
            R = self.residuals(np.vstack([p[None], p + np.diag(h)]))
            self._cache.clear()
            self._cache[key] = (R[0], ((R[1:] - R[0]) / h[:, None]).T)
        return self._cache[key][0]


def _start(t, xyz, sigma, model: FlightModel, options: FitOptions):
    """Start values from a constant-acceleration fit over the first part of the flight."""
    n = len(t)
    span = t[-1] - t[0]
    window = t <= t[0] + max(0.4 * span, min(span, 0.25))
    if window.sum() < 6:
        window = np.arange(n) < min(n, 6)
    ca = fit_constant_acceleration(t[window], xyz[window], sigma[window], t_ref=t[0])
    v0 = ca.velocity
    basis = _basis(v0)
    a_aero = ca.acceleration - np.array([0, 0, -model.gravity])
    speed = float(np.linalg.norm(v0))
    vhat = v0 / speed
    a_m = a_aero - (a_aero @ vhat) * vhat
    K = model.k_factor
    cl = float(np.linalg.norm(a_m)) / (K * speed**2) if K > 0 else 0.0
    if options.free_lift:
        mag = cl
    else:
        from ..physics.aero import invert_lift

        S = float(invert_lift(min(cl, 0.6), model.lift_model, **model.lift_params)[0])
        mag = (S if math.isfinite(S) else 0.1) * speed / model.radius_m
    # spin direction: v x a_M (see baseline); components on the basis
    d = np.cross(v0, a_m)
    d = d / np.linalg.norm(d) if np.linalg.norm(d) > 0 else basis[0]
    comp = mag * np.array([d @ basis[0], d @ basis[1]])
    p0 = np.concatenate([ca.position, v0, comp])
    if options.fit_drag:
        p0 = np.append(p0, 0.0)
    return p0, basis, ca


def _robust_sigma(res_norm_over_sigma) -> float:
    # for 3D Gaussian residuals with unit sigma per coordinate, median |r| = sqrt(chi2_3 median) = 1.5382
    return float(np.median(res_norm_over_sigma) / 1.5382)


def fit_flight(model: FlightModel, t, xyz, sigma=None, options: FitOptions = FitOptions()) -> FlightFit:
    """Fit the flight model to a 3D track. Raises FitError when the data cannot support a fit."""
    t = np.asarray(t, dtype=float)
    xyz = np.asarray(xyz, dtype=float)
    n = len(t)
    n_unknowns = 8 + int(options.fit_drag)
    if n * 3 < n_unknowns + 3 or n < 5:
        raise FitError(f"{n} points are too few to fit {n_unknowns} unknowns",
                       hint="a flight needs at least 5 tracked points; 20 or more for a useful spin estimate")
    if np.ptp(t) <= 0:
        raise FitError("all points share one time")
    given_sigma = sigma is not None
    sig = np.asarray(sigma, dtype=float) if given_sigma else np.ones(n)
    p0, basis, ca = _start(t, xyz, sig, model, options)
    if not given_sigma:
        # noise scale from the robust residuals of the start fit over its window (refined below)
        r = np.linalg.norm(ca.residuals[ca.inliers], axis=1)
        sig = np.full(n, max(_robust_sigma(r), 1e-4))
    prob = _Problem(model, t, xyz, sig, basis, options)
    prob.set_hint_span(float(np.linalg.norm(p0[3:6])))

    fun, jac = prob.fun, prob.jacobian
    nfev = 0
    p = p0
    outliers = np.zeros(n, bool)
    if options.robust:
        sol = least_squares(fun, p, jac=jac, method="trf", loss="soft_l1", f_scale=2.0, x_scale="jac",
                            max_nfev=options.max_nfev)
        nfev += sol.nfev
        p = sol.x
        tr = prob.trajectories(p[None])
        res = xyz - tr.positions(t)[0]
        d = np.linalg.norm(res / prob.sigma[:, None], axis=1)
        if not given_sigma:
            s = max(_robust_sigma(d) * prob.sigma[0], 1e-5)
            prob.sigma = np.full(n, s)
            d = np.linalg.norm(res, axis=1) / s
        else:
            d = d / max(_robust_sigma(d), 1e-12) if _robust_sigma(d) > 1 else d
        outliers = d > options.outlier_threshold
        if n - outliers.sum() < 5:
            outliers = np.zeros(n, bool)
        prob.mask = ~outliers
    sol = least_squares(fun, p, jac=jac, method="trf", loss="linear", x_scale="jac", max_nfev=options.max_nfev)
    nfev += sol.nfev
    p = sol.x
    J = prob.jacobian(p, central=True)
    r = fun(p)
    dof = max(1, r.size - len(p))
    s2 = float(r @ r / dof)
    message = "converged" if sol.success else f"stopped: {sol.message}"
    undetermined = []
    try:
        # scaled covariance: column-normalise for a stable inverse
        cn = np.linalg.norm(J, axis=0)
        cn[cn == 0] = 1.0
        Js = J / cn
        u, sv, vt = np.linalg.svd(Js, full_matrices=False)
        if sv[-1] < 1e-10 * sv[0]:
            null = np.abs(vt[-1])
            undetermined.append(prob.names[int(np.argmax(null))])
            raise np.linalg.LinAlgError
        cov = (vt.T / sv**2) @ vt / np.outer(cn, cn) * s2
    except np.linalg.LinAlgError:
        cov = np.full((len(p), len(p)), np.nan)
        message = "ill-conditioned: " + (", ".join(undetermined) or "some quantity") + " is not determined by the data"
    tr = prob.trajectories(p[None])
    fitted = tr.positions(t)[0]
    states, params = prob.unpack(p[None])
    success = bool(sol.success) and not undetermined and np.all(np.isfinite(p))
    return FlightFit(
        success=success, message=message, names=prob.names, params=p, covariance=cov, t0=prob.t0,
        state0=states[0], spin=params.spin[0], drag_scale=float(params.drag_scale[0]),
        lift_override=float(params.lift_override[0]), basis=basis, t=t, observed=xyz, fitted=fitted,
        residuals=xyz - fitted, sigma=prob.sigma.copy(), outliers=outliers, residual_scale=math.sqrt(s2),
        nfev=nfev, options=options, undetermined=tuple(undetermined),
    )


def batch_unpack(fit: FlightFit, model: FlightModel, P):
    """States and flight parameters for parameter sets P (B, k) in the layout of ``fit``."""
    prob = _Problem(model, fit.t, fit.observed, fit.sigma, fit.basis, fit.options)
    return prob.unpack(P)
