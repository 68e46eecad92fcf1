"""Climbing the aerodynamic ladder (:mod:`.ladder`): solve each rung from the simpler rung's
solution, choose by an information criterion, test the misfit, and widen the covariance when the
residuals are structured or the rungs disagree. Shared by the track and the image fit.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from ..physics.aero import lift_coefficient
from .ladder import RUNG_PARENT, RUNG_SOURCES, RUNGS, information_criteria, rung_chain, rung_names
from .misfit import hac_covariance, misfit_summary
from .nuisance import augment, marginalise, nuisance_priors


CONTINUATION_NFEV = 60
PARSIMONY = 2.0


@dataclass
class Climbed:
    prob: object
    res: object
    rung: str
    covariance: np.ndarray
    covariance_method: str
    model_choice: dict
    misfit: dict
    warnings: list
    nfev: int
    nuisance: dict = None  # see :mod:`.nuisance`


def _neutral(name: str, prob, p) -> float:
    """Start value of a new unknown that leaves the simpler rung's flight unchanged."""
    if name != "lift_exponent":
        return 0.0
    m = prob.model
    speed = float(np.linalg.norm(p[3:6] - np.asarray(m.wind_mps, float)))
    s0 = m.radius_m * float(np.linalg.norm(p[6:8])) / max(speed, 1e-6)
    if s0 <= 0:
        return 1.0
    lo, hi = s0 * 0.95, s0 * 1.05
    c = lift_coefficient(np.array([lo, hi]), None, model=m.lift_model, **m.lift_params)
    if not np.all(c > 0):
        return 1.0
    return float(np.log(c[1] / c[0]) / np.log(hi / lo))


def _extend(p_prev, prev, prob) -> np.ndarray:
    new = [_neutral(n, prev, p_prev) for n in prob.rung[len(prev.rung):]]
    return np.concatenate([p_prev[:prev.n_phys], new, p_prev[prev.n_phys:]])


def _data_residuals(prob, res, cols: int, data_cols: int):
    """Inlier point residuals in data units (N_in, data_cols), and the Jacobian rows (N_in, cols, k)."""
    n_in = int(prob.mask.sum())
    r = res.residuals[:n_in * cols].reshape(n_in, cols)
    J = res.jacobian[:n_in * cols].reshape(n_in, cols, -1)
    return r[:, :data_cols] * prob.sigma[prob.mask][:, None], r, J


def climb(new_problem, p0, options, *, solve, estimate_sigma: bool, noise_sigma: float, noise_source: str,
          cols: int, data_cols: int, solve_kw: dict, compensate=None) -> Climbed:
    """Solve the rungs and choose one.

    new_problem(rung_unknowns) -> a fresh problem; solve(prob, p0, options, estimate_sigma, ...)
    is :func:`.flight_fit.solve`; cols = residual columns per point, data_cols = how many of them
    are the measured coordinates (metres or pixels); noise_sigma = the model-free noise (same unit).
    compensate(prob, res, nuisance) -> nuisance, optional: replaces the linearised compensation of some
    nuisances (the image fit's secant over the drag-law priors) before they are joined.
    """


    crit_name = options.criterion if options.criterion in ("bic", "aicc") else "bic"
    target = options.aero_model
    if options.legacy:
        ladder: tuple = ("catalogue",)
    elif target == "auto":
        ladder = RUNGS
    else:
        ladder = rung_chain(target)
    done = []  # (rung, prob, res, crit, misfit)
    by_rung = {}
    # a rung continued from its parent starts near its optimum: a far smaller budget suffices, and a
    # rung that needs more is nearly degenerate (it is recorded, but not chosen)
    from dataclasses import replace as _replace

    cont = _replace(options, max_nfev=min(options.max_nfev, CONTINUATION_NFEV))
    nfev = 0
    screened = {}
    for rung in ladder:
        if target == "auto" and RUNG_PARENT[rung] == SIBLING_PARENT:
            if not screened:
                screened = _screen(new_problem, by_rung[SIBLING_PARENT], ladder, crit_name)
            if not screened.get(rung, True):
                continue  # the score test says this freedom cannot lower the criterion
        prob = new_problem(() if options.legacy else rung_names(rung))
        if not done:
            res = solve(prob, p0, options, estimate_sigma, **solve_kw)
        else:
            _, prev, prev_res = by_rung[RUNG_PARENT[rung]][:3]
            prob.sigma, prob.mask = prev.sigma.copy(), prev.mask.copy()
            prob.back_s = prev.back_s
            res = solve(prob, _extend(prev_res.p, prev, prob), cont, False, robust=False, **solve_kw)
            prev_rss = float(prev_res.residuals @ prev_res.residuals)
            budget = res.message.startswith("stopped") and "maximum number" in res.message
            if not budget and (not res.success or float(res.residuals @ res.residuals) > prev_rss * (1 + 1e-6)):
                # a second start: the parent's solution with the new unknowns at typical values
                p_alt = _extend(prev_res.p, prev, prob)
                k0 = prev.n_phys
                p_alt[k0:prob.n_phys] += 0.5 * prob.typical[k0:prob.n_phys]
                alt = solve(prob, p_alt, cont, False, robust=False, **solve_kw)
                nfev += alt.nfev
                if alt.success and float(alt.residuals @ alt.residuals) < float(res.residuals @ res.residuals):
                    res = alt
        nfev += res.nfev
        rss = float(res.residuals @ res.residuals)
        crit = information_criteria(rss, res.residuals.size, len(res.p))
        data_r, _, _ = _data_residuals(prob, res, cols, data_cols)
        mis = misfit_summary(data_r, noise_sigma, len(res.p), noise_source)
        done.append((rung, prob, res, crit, mis))
        by_rung[rung] = done[-1]
    ok = [d for d in done if d[2].success] or done
    low = min(d[3][crit_name] for d in ok)
    # parsimony: the rung with the fewest unknowns among those within PARSIMONY of the lowest
    # criterion (such models have "substantial support", Burnham & Anderson 2002, sec. 2.6)
    best = min((d for d in ok if d[3][crit_name] <= low + PARSIMONY), key=lambda d: (len(d[2].p), d[3][crit_name]))
    if target != "auto" and by_rung.get(target, (None, None, None))[2] is not None:
        best = by_rung[target]  # pinned: the user's rung (the simpler ones only gave it a start)
        ok = [best]
    rung, prob, res, crit, mis = best
    # --- covariance: Jacobian x residual variance, widened by the HAC sandwich and the rungs' spread
    cov = res.covariance
    method = "linearised (Jacobian) covariance scaled by the residual variance"
    if np.all(np.isfinite(cov)):
        _, r_pts, J_pts = _data_residuals(prob, res, cols, data_cols)
        n_pts = r_pts.size
        hac, lag = hac_covariance(J_pts, r_pts, res.jacobian[n_pts:], res.residuals[n_pts:])
        d_std = np.diag(cov)
        ratio = np.diag(hac) / np.where(d_std > 0, d_std, np.inf)
        f = np.sqrt(np.where(np.isfinite(ratio), np.maximum(ratio, 1.0), 1.0))
        if np.any(f > 1.0):
            cov = cov * np.outer(f, f)
            method += (f"; widened (up to x{f.max() ** 2:.2f} in variance) where the autocorrelation-consistent "
                       f"(Newey-West, Bartlett lag {lag}) sandwich is larger")
        cov = cov + _rung_spread(best, ok, crit_name)
        if len(ok) > 1:
            method += f"; plus the spread between rungs weighted by {crit_name.upper()}"
    warnings = []
    if not mis["fits"]:
        top = "the richest aerodynamic model" if rung == done[-1][0] else f"the chosen model ({rung})"
        warnings.append(
            f"even {top} does not fit the track: residuals {mis['misfit_ratio']:.1f}x the noise "
            f"({noise_source}) and structured (runs z = {mis['runs_z']:.1f}); the ball may be mis-tracked, the "
            "cameras mis-calibrated or the flight disturbed; uncertainties are widened")
    choice = {
        "criterion": crit_name, "chosen": rung, "pinned": target != "auto" or options.legacy,
        "source": RUNG_SOURCES.get(rung, ""), "noise_sigma": noise_sigma, "noise_source": noise_source,
        "rungs": [{"rung": d[0], "unknowns": list(d[1].rung), "n_unknowns": len(d[2].p), "bic": d[3]["bic"],
                   "aicc": d[3]["aicc"], "rms_residual": d[4]["rms_residual"], "misfit_ratio": d[4]["misfit_ratio"],
                   "runs_z": d[4]["runs_z"], "converged": bool(d[2].success), "message": d[2].message,
                   "launch_speed_mps": float(np.linalg.norm(d[2].p[3:6]))}
                  for d in done],
    }
    choice["reason"] = _reason(choice, done, target, crit_name)
    nuisance = marginalise(new_problem, prob, res, nuisance_priors(tuple(prob.rung), options))
    if nuisance and compensate is not None:
        nuisance = compensate(prob, res, nuisance)
    if nuisance:
        prob, p_aug, cov = augment(prob, res, cov, nuisance)
        res = _replace(res, p=p_aug)
        method += ("; the deflection's no-spin reference carries priors on what one flight cannot tell ("
                   + ", ".join(nuisance["names"]) + ")")
    return Climbed(prob, res, rung, cov, method, choice, mis, warnings, nfev, nuisance)


SIBLING_PARENT = "drag_speed"


def _screen(new_problem, parent, ladder, crit_name) -> dict:
    """Which sibling rungs are worth solving: a Rao score test. At the parent's solution, one
    Gauss-Newton step with each rung's added columns predicts its residual sum of squares; a rung
    whose predicted criterion is not below the parent's is skipped. All added columns come from
    one batched Jacobian."""
    _, prev, prev_res = parent[:3]
    sibs = [r for r in ladder if RUNG_PARENT.get(r) == SIBLING_PARENT]
    names = list(prev.rung)
    for r in sibs:
        names += [n for n in rung_names(r) if n not in names]
    prob = new_problem(tuple(names))
    prob.sigma, prob.mask, prob.back_s = prev.sigma.copy(), prev.mask.copy(), prev.back_s
    p = _extend(prev_res.p, prev, prob)
    r = prob.fun(p)
    J = prob.jacobian(p)
    base = list(range(prev.n_phys)) + list(range(prob.n_phys, len(p)))
    n = r.size
    out = {}
    for rung in sibs:
        cols = base + [prob.names.index(x) for x in rung_names(rung) if x not in prev.rung]
        Js = J[:, cols]
        step, *_ = np.linalg.lstsq(Js, -r, rcond=None)
        rss = float(np.sum((r + Js @ step) ** 2))
        crit = information_criteria(rss, n, len(cols))[crit_name]
        out[rung] = bool(crit < parent[3][crit_name])
    return out


def _rung_spread(best, ok, crit_name) -> np.ndarray:
    """Between-model variance of the unknowns every rung shares (launch state, spin, and any
    camera unknowns), weighted exp(-delta/2) (Buckland, Burnham & Augustin 1997)."""
    prob, res = best[1], best[2]
    k = len(res.p)
    out = np.zeros((k, k))
    base = np.r_[0:prob.n_base, prob.n_phys:k]
    crits = np.array([d[3][crit_name] for d in ok])
    w = np.exp(-0.5 * (crits - crits.min()))
    w /= w.sum()
    for wi, d in zip(w, ok):
        if d is best:
            continue
        q = np.r_[0:d[1].n_base, d[1].n_phys:len(d[2].p)]
        delta = d[2].p[q] - res.p[base]
        out[np.ix_(base, base)] += wi * np.outer(delta, delta)
    return out


def _reason(choice, done, target, crit_name) -> str:
    if choice["pinned"]:
        return "pinned by the user"
    rows = choice["rungs"]
    best = next(r for r in rows if r["rung"] == choice["chosen"])
    low = min(r[crit_name] for r in rows if r["converged"]) if any(r["converged"] for r in rows) else math.nan
    skipped = len(RUNGS) - len(rows)
    return (f"{best['rung']}: the simplest of the {len(rows)} rungs solved within {PARSIMONY:g} of the lowest "
            f"{crit_name.upper()} ({best[crit_name] - low:+.1f}); residuals {best['misfit_ratio']:.2f}x the noise"
            + (f"; {skipped} rung(s) skipped: the score test predicted no gain" if skipped else ""))


def misfit_noise(sigma_user, noise_model_free: float) -> tuple[float, str]:
    """The noise level to judge the misfit by: the user's sigma (median) or the model-free estimate."""
    if sigma_user is not None:
        return float(np.median(sigma_user)), "the given sigma"
    if math.isfinite(noise_model_free) and noise_model_free > 0:
        return noise_model_free, "local-cubic noise estimate of the track"
    return math.nan, "none"
