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
be recovered from a trajectory (docs/architecture.md, conventions).

The fit runs in three passes: a robust pass (soft-L1 loss) from the constant-acceleration start,
outlier flagging on the robust residuals, and a plain least-squares pass on the inliers whose
Jacobian (central differences, one batched integration) gives the covariance, scaled by the
residual variance.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, replace

import numpy as np
from scipy.optimize import least_squares

from ..errors import FitError
from ..physics.flight import FlightModel, FlightParameters, Trajectory, integrate
from .baseline import fit_constant_acceleration
from .ladder import TYPICAL as RUNG_TYPICAL
from .ladder import batch_model, decay_and_scale
from .results import OUTLIER_THRESHOLD, FitOptions, FlightFit, TrackFit  # noqa: F401

TYPICAL = np.array([1.0, 1.0, 1.0, 10.0, 10.0, 10.0, 10.0, 10.0])
FitOptions, FlightFit = FitOptions, FlightFit  # re-exported: callers import them from here


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
    if np.linalg.norm(e1) < 1e-6:  # straight-up flight: pick x as reference
        e1 = np.cross([1.0, 0.0, 0.0], vhat)
    e1 /= np.linalg.norm(e1)
    e2 = np.cross(vhat, e1)
    return np.stack([e1, e2])


def unpack_params(P, basis, options: FitOptions):
    """States (B, 6) and FlightParameters of parameter sets P (B, k) (extra columns ignored)."""
    P = np.atleast_2d(P)
    n = P.shape[0]
    comp = P[:, 6:8]
    e1, e2 = transverse_basis(P[:, 3:6])
    vec = comp[:, :1] * e1 + comp[:, 1:2] * e2
    lift = np.linalg.norm(comp, axis=1) if options.free_lift else None
    scale = np.exp(P[:, 8]) if options.fit_drag else None
    return P[:, :6], FlightParameters.make(n, spin=vec, drag_scale=scale, lift_override=lift)


def transverse_basis(v) -> tuple[np.ndarray, np.ndarray]:
    """Per-row unit vectors e1 = z x v_hat (horizontal) and e2 = v_hat x e1, perpendicular to each
    launch velocity (B, 3): the spin unknowns are transverse to the launch velocity exactly."""
    v = np.atleast_2d(np.asarray(v, dtype=float))
    vhat = v / np.linalg.norm(v, axis=1, keepdims=True)
    e1 = np.stack([-vhat[:, 1], vhat[:, 0], np.zeros(len(v))], axis=1)
    n1 = np.linalg.norm(e1, axis=1)
    straight_up = n1 < 1e-6
    if straight_up.any():
        e1[straight_up] = np.cross(np.array([1.0, 0.0, 0.0]), vhat[straight_up])
        n1[straight_up] = np.linalg.norm(e1[straight_up], axis=1)
    e1 /= n1[:, None]
    e2 = np.cross(vhat, e1)
    return e1, e2


def physics_names(options: FitOptions) -> list[str]:
    names = ["x0", "y0", "z0", "vx0", "vy0", "vz0"]
    names += ["lift_1", "lift_2"] if options.free_lift else ["spin_1", "spin_2"]
    if options.fit_drag:
        names.append("log_drag_scale")
    return names


class _Problem:
    """Residuals of many parameter sets at once. Subclasses say what is observed."""

    extra_names: tuple[str, ...] = ()
    extra_typical: tuple[float, ...] = ()

    def __init__(self, model: FlightModel, t0: float, sigma, basis, options: FitOptions, rung: tuple = ()):
        if options.wind_mps is not None:
            model = replace(model, wind_mps=tuple(float(w) for w in options.wind_mps))
        self.model = model
        self.t0 = float(t0)
        self.sigma = np.asarray(sigma, dtype=float)
        self.basis = basis
        self.opt = options
        self.rung = tuple(rung)
        self.n_base = len(physics_names(options))
        self.names = tuple(physics_names(options)) + self.rung + tuple(self.extra_names)
        self.typical = np.concatenate([typical_scales(options), [RUNG_TYPICAL[n] for n in self.rung],
                                       np.asarray(self.extra_typical, float)])
        self.n_phys = len(self.names) - len(self.extra_names)
        self._mask = np.ones(len(self.sigma), bool)
        self._cache: dict = {}
        self.back_s = 0.0
        self.hint = None if options.start_near is None else np.asarray(options.start_near, dtype=float)

    # --- to be provided by subclasses
    def span(self, P) -> tuple[float, float]:
        raise NotImplementedError

    def point_residuals(self, tr: Trajectory, P) -> np.ndarray:
        """(B, N, c) residuals in units of each point's sigma."""
        raise NotImplementedError

    def first_position(self) -> np.ndarray:
        raise NotImplementedError

    # --- shared
    @property
    def mask(self):
        return self._mask

    @mask.setter
    def mask(self, value):
        self._mask = value
        self._cache.clear()

    def rescale_sigma(self, factor: float) -> None:
        self.sigma = self.sigma * factor
        self._cache.clear()

    def set_hint_span(self, speed):
        if self.hint is not None:
            dist = float(np.linalg.norm(self.hint - self.first_position()))
            self.back_s = min(2.0, 1.5 * dist / max(speed, 1.0) + 0.05)

    def unpack(self, P):
        """States (B, 6) and FlightParameters of parameter sets P (B, k)."""
        return self.unpack_full(P)[1:]

    def unpack_full(self, P):
        """(model, states, params) of parameter sets P (B, k): the model carries the rung's
        per-set values as arrays."""
        P = np.atleast_2d(P)
        states, params = unpack_params(P, self.basis, self.opt)
        if not self.rung:
            return self.model, states, params
        vals = P[:, self.n_base:self.n_phys]
        tau, scale = decay_and_scale(self.rung, vals)
        params = FlightParameters.make(P.shape[0], spin=params.spin, drag_scale=scale, spin_decay_s=tau)
        w = np.asarray(self.model.wind_mps, float)
        speed = np.linalg.norm(P[:, 3:6] - w, axis=1)
        model = batch_model(self.model, self.rung, vals, speed, np.linalg.norm(P[:, 6:8], axis=1))
        return model, states, params

    def trajectories(self, P) -> Trajectory:
        model, states, params = self.unpack_full(P)
        lo, hi = self.span(np.atleast_2d(P))
        return integrate(model, self.t0, states, params, (min(lo, self.t0 - self.back_s), max(hi, self.t0)),
                         max_step=self.opt.max_step)

    def residuals(self, P) -> np.ndarray:
        P = np.atleast_2d(P)
        with np.errstate(all="ignore"):  # wild trial steps may overflow; they get a huge residual
            tr = self.trajectories(P)
            r = self.point_residuals(tr, P)[:, self._mask].reshape(P.shape[0], -1)
            if self.hint is not None:
                r = np.concatenate([r, self._hint_residuals(tr)], axis=1)
        return np.nan_to_num(r, nan=1e6, posinf=1e6, neginf=-1e6)

    def point_norms(self, p) -> np.ndarray:
        """Per-point residual norm in sigma units at p (all points, masked or not)."""
        with np.errstate(all="ignore"):
            tr = self.trajectories(p[None])
            return np.nan_to_num(np.linalg.norm(self.point_residuals(tr, p[None])[0], axis=1), nan=1e6)

    def _hint_residuals(self, tr: Trajectory) -> np.ndarray:
        tc, sc = tr.first_crossing(0, self.hint[0], +1)
        at_t0 = tr.sample([self.t0])[:, 0, :]
        use = np.isfinite(tc) & (tc <= self.t0 + 1e-9)
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
        if key not in self._cache:
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


class _TrackProblem(_Problem):
    """Observed: 3D positions [m]."""

    def __init__(self, model, t, xyz, sigma, basis, options, rung=()):
        self.t = np.asarray(t, dtype=float)
        self.xyz = np.asarray(xyz, dtype=float)
        super().__init__(model, self.t[0], sigma, basis, options, rung)

    def span(self, P):
        return float(self.t[0]), float(self.t[-1])

    def first_position(self):
        return self.xyz[0]

    def point_residuals(self, tr, P):
        return (tr.positions(self.t) - self.xyz) / self.sigma[None, :, None]


@dataclass(frozen=True)
class SolveResult:
    p: np.ndarray
    covariance: np.ndarray
    s2: float
    outliers: np.ndarray
    nfev: int
    message: str
    undetermined: tuple[str, ...]
    success: bool
    jacobian: np.ndarray | None = None  # (M, k) at p (central differences), residuals in sigma units
    residuals: np.ndarray | None = None  # (M,)


def solve(prob: _Problem, p0, options: FitOptions, estimate_sigma: bool, min_points: int = 5,
          sigma_floor: float = 0.0, tight: bool = False, robust: bool | None = None,
          restarts: int = 3) -> SolveResult:
    """Robust pass, outlier flags, final least-squares pass and scaled covariance.

    ``robust`` False skips the robust pass and keeps the problem's current outlier mask (a rung
    continued from a simpler rung's solution)."""
    n = len(prob.sigma)
    nfev = 0
    p = np.asarray(p0, dtype=float)
    outliers = ~prob.mask.copy()
    if options.robust if robust is None else robust:
        sol = least_squares(prob.fun, p, jac=prob.jacobian, method="trf", loss="soft_l1", f_scale=2.0,
                            x_scale="jac", max_nfev=options.max_nfev)
        nfev += sol.nfev
        p = sol.x
        d = prob.point_norms(p)
        scale = _robust_sigma(d)
        if estimate_sigma and scale > 0:
            # never trust a noise level below the floor (systematic errors of the measurements)
            scale = max(scale, sigma_floor / float(np.median(prob.sigma)), 1e-6)
            prob.rescale_sigma(scale)
            d = d / scale
        elif scale > 1:
            d = d / scale
        outliers = d > options.outlier_threshold
        if n - outliers.sum() < min_points:
            outliers = np.zeros(n, bool)
        prob.mask = ~outliers
    # image fits have long flat valleys (depth against lift): there the default tolerances stop early
    tol = dict(ftol=1e-11, xtol=1e-10, gtol=1e-11) if tight else {}
    for _ in range(restarts if robust is None else 1):  # a budget stop on a still-improving fit continues from where it stopped
        with np.errstate(all="ignore"):  # wild trial steps of a rung's shape unknowns may overflow
            sol = least_squares(prob.fun, p, jac=prob.jacobian, method="trf", loss="linear", x_scale="jac",
                                max_nfev=options.max_nfev, **tol)
        nfev += sol.nfev
        p = sol.x
        if sol.status != 0:
            break
    J = prob.jacobian(p, central=True)
    r = prob.fun(p)
    dof = max(1, r.size - len(p))
    s2 = float(r @ r / dof)
    message = "converged" if sol.success else f"stopped: {sol.message}"
    undetermined: list[str] = []
    try:
        cn = np.linalg.norm(J, axis=0)
        cn[cn == 0] = 1.0
        _, sv, vt = np.linalg.svd(J / cn, full_matrices=False)
        if not np.all(np.isfinite(sv)) or sv[-1] < 1e-10 * sv[0]:
            undetermined.append(prob.names[int(np.argmax(np.abs(vt[-1])))] if np.all(np.isfinite(vt)) else "?")
            raise np.linalg.LinAlgError
        cov = (vt.T / sv**2) @ vt / np.outer(cn, cn) * s2
    except np.linalg.LinAlgError:
        cov = np.full((len(p), len(p)), np.nan)
        message = "ill-conditioned: " + ", ".join(undetermined) + " is not determined by the data"
    success = bool(sol.success) and not undetermined and bool(np.all(np.isfinite(p)))
    return SolveResult(p, cov, s2, outliers, nfev, message, tuple(undetermined), success, J, r)


def _start(t, xyz, sigma, model: FlightModel, options: FitOptions):
    """Start values from a constant-acceleration fit over the first part of the flight."""
    n = len(t)
    span = t[-1] - t[0]
    window = t <= t[0] + max(0.4 * span, min(span, 0.25))
    if window.sum() < 6:
        window = np.arange(n) < min(n, 6)
    ca = fit_constant_acceleration(t[window], xyz[window], sigma[window], t_ref=t[0])
    v0 = ca.velocity
    if not np.all(np.isfinite(v0)) or np.linalg.norm(v0) < 0.5:
        raise FitError(f"the tracked points barely move ({np.linalg.norm(v0):.2f} m/s at the start): not a flight",
                       hint="check the time column (seconds) and that the track is of a moving ball")
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


def fit_flight(model: FlightModel, t, xyz, sigma=None, options: FitOptions = FitOptions()) -> TrackFit:
    """Fit the flight model to a 3D track, climbing the aerodynamic ladder (see :mod:`.ladder`).

    Parameters
    ----------
    model : the ball's catalogue flight model (air, ball, wind)
    t : ndarray, shape (N,) [s]
    xyz : ndarray, shape (N, 3) [m]
    sigma : ndarray, shape (N,) [m] or None (estimated)

    Raises FitError when the data cannot support a fit.
    """
    from .climb import climb, misfit_noise
    from .ladder import check_rung
    from .misfit import noise_estimate

    check_rung(options.aero_model)
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
    if not np.all(np.isfinite(p0)):
        raise FitError("the track does not determine a start (are the positions all the same?)")
    noise = noise_estimate(t, xyz)
    if not given_sigma:
        # noise scale from the model-free estimate (or the start fit's residuals); refined below
        r = np.linalg.norm(ca.residuals[ca.inliers], axis=1)
        guess = noise if math.isfinite(noise) and noise > 0 else _robust_sigma(r)
        sig = np.full(n, max(guess, 1e-4))
    noise_sigma, noise_source = misfit_noise(sigma if given_sigma else None, noise)
    speed0 = float(np.linalg.norm(p0[3:6]))

    def new_problem(rung):
        prob = _TrackProblem(model, t, xyz, sig, basis, options, rung)
        prob.set_hint_span(speed0)
        return prob

    c = climb(new_problem, p0, options, solve=solve, estimate_sigma=not given_sigma, noise_sigma=noise_sigma,
              noise_source=noise_source, cols=3, data_cols=3, solve_kw={})
    prob, res = c.prob, c.res
    p = res.p
    fitted = prob.trajectories(p[None]).positions(t)[0]
    return TrackFit(
        observed=xyz, fitted=fitted, residuals=xyz - fitted, fitted_xyz=fitted,
        **common_fields(prob, res, c, basis, t, options))


def common_fields(prob, res, c, basis, t, options) -> dict:
    """Result fields shared by track and image fits, from the chosen rung's solution."""
    from .ladder import scalar_model

    p = res.p
    bmodel, states, params = prob.unpack_full(p[None])
    tau = float(params.spin_decay_s[0])
    fmodel = replace(scalar_model(bmodel), spin_decay_s=tau)
    return dict(
        success=res.success, message=res.message, names=prob.names, params=p, covariance=c.covariance,
        t0=prob.t0, state0=states[0], spin=params.spin[0], drag_scale=float(params.drag_scale[0]),
        lift_override=float(params.lift_override[0]), basis=basis, t=t, sigma=prob.sigma.copy(),
        outliers=~prob.mask.copy(), residual_scale=math.sqrt(res.s2), nfev=c.nfev, options=options,
        undetermined=res.undetermined, model=fmodel, base_model=prob.model, rung=c.rung, spin_decay_s=tau, model_choice=c.model_choice,
        misfit=c.misfit, warnings=tuple(c.warnings), covariance_method=c.covariance_method,
        nuisance={k: v for k, v in (c.nuisance or {}).items() if k != "problem"})


def batch_flights(fit: FlightFit, model: FlightModel, P, extra_rung: tuple = ()):
    """(model, states, params) for parameter sets P (B, k) in the layout of ``fit``: the model
    carries each set's rung values (drag and lift shape, wind) as arrays. ``model`` is the
    catalogue model the fit started from (``fit.base_model`` is used when the fit carries it, so
    passing ``fit.model`` is safe too). ``extra_rung``: further unknowns whose columns follow the
    rung's in P (the nuisance unknowns of :mod:`.nuisance`)."""
    rung = () if fit.options.legacy else tuple(n for n in fit.names if n in RUNG_TYPICAL)
    rung = rung + tuple(extra_rung)
    base = fit.base_model if fit.base_model is not None else model
    prob = _Problem(base, fit.t0, np.ones(1), fit.basis, replace(fit.options, wind_mps=None), rung)
    return prob.unpack_full(np.atleast_2d(P))
