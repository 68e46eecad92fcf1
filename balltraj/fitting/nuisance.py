"""What one flight cannot tell, and what it does to the deflection: nuisance unknowns with priors,
marginalised at the fitted solution. Pure computation.

Two things set the no-spin reference (and so the deflection) yet are nearly invisible in one
spinning flight:

- **the drag that only the spinning ball has.** A fit measures the total drag along the flight; how
  much of it the spin adds (dC_D/dS) is not seen: with a constant spin, S = r omega / v is a
  function of the speed alone, so a spin term b S is exactly a speed-dependent drag of a ball that
  spins (docs/validation.md, "What one flight cannot tell"). The no-spin reference needs the drag
  without it.
- **a wind the user did not give.** With lift proportional to S, the sideways push of a crosswind
  on the drag, K C_D |v| w_perp, equals the Magnus push of a constant sidespin omega = C_D w / r:
  the two differ only by a factor cos(elevation) and second-order terms.

The spin's share is the unknown ``drag_spin_split`` b: C_D -> C_D + b (S - S_0), with S_0 the spin
parameter at launch, so the spinning ball's drag at launch stays what the rung fitted while the no-spin
reference gets b S_0 less (the drag of a ball that does not spin); the wind is ``wind_x``, ``wind_y``.
Each is a nuisance unknown b with a Gaussian prior (mean 0). At the fitted solution theta, with
residual Jacobians J_theta (M, k) and J_b (M, m) and residual variance s2, the linearised
marginal posterior of b is (Bayesian linear least squares; e.g. Tarantola 2005, ch. 3)

    A = -(J_theta^T J_theta)^-1 J_theta^T J_b           (how theta compensates a change of b)
    J_perp = J_b + J_theta A                             (what of b the data can see)
    Sigma_b = (Sigma_0^-1 + J_perp^T J_perp / s2)^-1,   mu_b = -Sigma_b J_perp^T r / s2

and a quantity q(theta, b) changes by D = dq/dtheta A + dq/db per unit b along the compensated
direction, so it gains the variance D Sigma_b D^T (:func:`.deflection.nuisance_deflection`).
"""

from __future__ import annotations

import numpy as np

# Prior on the drag slope with spin, dC_D/dS: mean 0, sigma 0.25.
# Mean 0: free-flight measurements on new tennis balls found C_D = 0.507 +/- 0.024 "not varying with
# spin or speed" (Cross & Lindsey 2014, Sports Eng.; docs/references.md 2.3), and spinning and
# non-spinning soccer balls have the same low supercritical C_D (Asai et al. 2007, abstract).
# Sigma 0.25: the largest published slope, Stepanek's 1988 wind-tunnel law for tennis balls (about
# 0.5 per unit S, computed from its formula: 0.508 at S = 0, 0.564 at 0.1, 0.662 at 0.3), is at two
# sigma; the linear spin term of baseball trajectory models (about 0.3 per unit S at pitch speeds)
# and the stronger S dependence Smits & Smith 1994 report for golf balls (0.18, from memory) lie
# within.
SPIN_DRAG_SLOPE_SIGMA = 0.25

# Priors on the drag law itself, for fits that hold the catalogue rung without climbing the ladder (the
# image fit from one camera: there the depth trades off against the aerodynamics, so the ladder is not
# climbed, and a drag law other than the catalogue's moves the depth, i.e. the deflection along the
# line of sight). Mean 0 (the catalogue law), marginalised with the track's own hold on them:
# - log_drag_scale, sigma 0.2 (a factor e^0.2 = 1.22): the spread of the level of C_D between balls of
#   one game, e.g. supercritical soccer balls 0.15-0.25 (Asai et al. 2007; Goff & Carre 2009, from
#   memory), tennis balls 0.51-0.6 (Cross & Lindsey 2014; Stepanek 1988);
# - log_re_shift, sigma 0.15: where the drag crisis falls, Re 2.2e5-3.0e5 between soccer ball designs
#   (Asai et al. 2007, abstract), a spread of ln(3.0/2.2) = 0.31, taken as two sigma;
# - drag_re_exponent, sigma 0.1: a residual local slope d ln C_D / d ln Re of the law over the flight's
#   Re range (the ladder's own typical value; common practice).
DRAG_LAW_SIGMAS = {"log_drag_scale": 0.2, "log_re_shift": 0.15, "drag_re_exponent": 0.1}

# And on the lift law (C_L = e^c C_L,cat(S) (S/S_0)^b, S_0 at launch; physics lift law "tilted"):
# - log_lift_scale c, sigma 0.3 (a factor 1.35), in every fit: a spin rate read from a flight is a
#   quantity of the lift law assumed, since the level of C_L trades against the rate exactly (for linear
#   lift the Magnus force goes with C_L(S) and so with the rate times the level), so the law's level is
#   the rate's own uncertainty. Published laws for one kind of ball differ in level by about that much
#   at a given S: at S = 0.24 the linear C_L = S (Nathan 2008) gives 0.24 and Stepanek's saturating
#   1/(2.022 + 0.981/S) (1988) 0.164, ln(0.164/0.24) = -0.38 (computed from the two formulas); soccer
#   balls C_L 0.2-0.3 at S 0.1-0.3 (Goff & Carre 2009, from memory);
# - lift_tilt b, sigma 0.2, in the fits that hold the catalogue rung (the others can climb to the
#   lift_shape rung): the log-slope d ln C_L / d ln S is 1 for linear lift and 0.62-0.83 for Stepanek's
#   law over S 0.1-0.3 (computed from the formula), so a slope 0.4 below the catalogue's is at two sigma.
LIFT_LEVEL_SIGMA = 0.3
LIFT_LAW_SIGMAS = {"lift_tilt": 0.2}
LAW_SIGMAS = {**DRAG_LAW_SIGMAS, **LIFT_LAW_SIGMAS, "log_lift_scale": LIFT_LEVEL_SIGMA}


def nuisance_priors(rung: tuple, options) -> dict:
    """Nuisance unknowns (name -> prior sigma) of a fit whose rung fits the unknowns ``rung``.

    The spin-drag slope always (unless the rung fits it, or the older single-model options are
    used); the horizontal wind components when the user gave a wind uncertainty
    (``options.wind_sigma_mps`` > 0) and the rung does not fit the wind; the drag law's own
    (:data:`DRAG_LAW_SIGMAS`) and the lift law's slope (:data:`LIFT_LAW_SIGMAS`) when
    ``options.drag_law_priors`` (a fit held on a rung it did not choose) and the rung does not fit them;
    the lift law's level (:data:`LIFT_LEVEL_SIGMA`) always."""
    if options.legacy:
        return {}
    out = {}
    if getattr(options, "drag_law_priors", False):
        out.update({n: s for n, s in DRAG_LAW_SIGMAS.items() if n not in rung})
        if "lift_exponent" not in rung:
            out.update(LIFT_LAW_SIGMAS)
    if "drag_spin_slope" not in rung:
        out["drag_spin_split"] = SPIN_DRAG_SLOPE_SIGMA
    out["log_lift_scale"] = LIFT_LEVEL_SIGMA  # every fit: the spin rate's own law uncertainty
    ws = float(getattr(options, "wind_sigma_mps", 0.0) or 0.0)
    if ws > 0 and "wind_x" not in rung:
        out["wind_x"] = ws
        out["wind_y"] = ws
    return out


def insert_nuisance(p, n_phys: int, values) -> np.ndarray:
    """Parameter rows (B, k) with nuisance values (B, m) inserted after the rung unknowns."""
    p = np.atleast_2d(p)
    v = np.atleast_2d(values)
    return np.concatenate([p[:, :n_phys], v, p[:, n_phys:]], axis=1)


def marginalise(new_problem, prob, res, priors: dict) -> dict:
    """The nuisance record of a solved rung: names, prior sigmas, compensation A (k, m), posterior
    covariance Sigma_b (m, m) and mean mu_b (m,) (see the module docstring), and the sigma the data
    alone would give. Empty when there is nothing to marginalise or the Jacobians are not finite."""
    if not priors or res.jacobian is None or not np.all(np.isfinite(res.covariance)):
        return {}
    names = tuple(priors)
    sig0 = np.array([priors[n] for n in names], float)
    aug = new_problem(tuple(prob.rung) + names)
    aug.sigma, aug.mask, aug.back_s = prob.sigma.copy(), prob.mask.copy(), prob.back_s
    m = len(names)
    h = 1e-3 * sig0
    base = insert_nuisance(res.p, prob.n_phys, np.zeros(m))[0]
    E = np.eye(len(base))[prob.n_phys:prob.n_phys + m] * h[:, None]
    R = aug.residuals(np.vstack([base + E, base - E]))
    Jb = ((R[:m] - R[m:]) / (2 * h[:, None])).T
    Jt = res.jacobian
    r = res.residuals
    if Jb.shape[0] != Jt.shape[0] or not np.all(np.isfinite(Jb)):
        return {}
    A = -np.linalg.lstsq(Jt, Jb, rcond=None)[0]
    Jp = Jb + Jt @ A
    s2 = max(float(res.s2), 1e-300)
    data_sigma = np.sqrt(np.clip(np.diag(np.linalg.pinv(Jp.T @ Jp / s2)), 0, None))
    # a rung whose drag cannot vary with speed would let b stand in for the speed dependence it lacks
    # (b (S - S0) changes the drag as the ball slows): the track's hold on b is then an artefact. The
    # prior stays, and b is held (A = 0): it then moves the no-spin reference's drag by b S0, and the
    # spinning path only by b (S - S0), as the rung assumes its drag law. Every other nuisance is always
    # marginalised with the data: the drag-law ones (DRAG_LAW_SIGMAS) are the speed dependence itself, and a
    # held wind would move the spinning path and its reference alike (a crosswind the fit reads as sidespin
    # shows only when the fit may follow it)
    held = np.array([("drag_re_exponent" not in prob.rung) and n == "drag_spin_split" for n in names])
    free = ~held
    A = A * free  # a held nuisance is not compensated (least squares solves each column on its own)
    cov, mean = np.diag(sig0**2), np.zeros(m)
    if free.any():
        Jp_f = Jp[:, free]
        c_f = np.linalg.inv(np.diag(1.0 / sig0[free] ** 2) + Jp_f.T @ Jp_f / s2)
        cov[np.ix_(free, free)] = c_f
        mean[free] = -c_f @ (Jp_f.T @ r) / s2
    # the posterior mean is used only where the track tells more than the prior (data sigma below the
    # prior's); elsewhere the pull comes from a direction the track barely sees, where whatever the rung
    # misses leaks in (on a crosswind drive its wind means even had the wrong sign), so the prior mean stays
    # The drag-law nuisances keep their prior mean (the catalogue law) too: they stand for the rungs the
    # image fit does not climb, because from one camera the depth trades off against the aerodynamics;
    # their posterior mean would re-open that trade-off (a 2.6 % slower launch on the behind sample clip)
    law = np.array([n in LAW_SIGMAS for n in names])
    used = np.where((data_sigma < sig0) & ~law, mean, 0.0)
    return {"names": names, "prior_sigma": sig0, "compensation": A, "covariance": cov, "mean": mean,
            "used_mean": used, "data_sigma": data_sigma, "problem": aug}


def augment(prob, res, covariance, nuisance: dict):
    """The chosen rung's solution with its nuisance unknowns joined: (problem, parameters, covariance).

    Parameters are theta + A mu_b (mu_b as used: see :func:`marginalise`) followed (after the rung's unknowns) by mu_b; the covariance is the
    joint one, [[C + A S A^T, A S], [S A^T, S]] with S = Sigma_b, so that the delta method of any
    derived quantity (the deflection) carries D S D^T with D = dq/dtheta A + dq/db."""
    if not nuisance:
        return prob, res.p, covariance
    A, S, mu = nuisance["compensation"], nuisance["covariance"], nuisance["used_mean"]
    k, m = A.shape
    n = prob.n_phys
    p = insert_nuisance(res.p + A @ mu, n, mu)[0]
    joint = np.block([[covariance + A @ S @ A.T, A @ S], [S @ A.T, S]])
    order = np.r_[0:n, k:k + m, n:k]  # nuisance columns after the rung's unknowns
    return nuisance["problem"], p, joint[np.ix_(order, order)]


def record(nuisance: dict) -> dict:
    """JSON-ready summary: per nuisance its prior sigma, the sigma the data alone give, and the
    posterior mean and sigma."""
    if not nuisance:
        return {}
    return {n: {"prior_sigma": float(nuisance["prior_sigma"][i]), "data_only_sigma": float(nuisance["data_sigma"][i]),
                "posterior_mean": float(nuisance["mean"][i]), "used_value": float(nuisance["used_mean"][i]),
                "posterior_sigma": float(np.sqrt(nuisance["covariance"][i, i]))}
            for i, n in enumerate(nuisance["names"])}
