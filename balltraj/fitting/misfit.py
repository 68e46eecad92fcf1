"""Misfit detection and covariances that stay honest when the model is wrong. Pure computation.

- :func:`noise_estimate`: measurement noise from the track alone (no flight model): each point
  against a local cubic through its neighbours, corrected for the fit's leverage.
- :func:`runs_test`: the Wald-Wolfowitz runs test on the signs of the residuals (a fitted model
  that misses leaves long runs of one sign).
- :func:`lag1_correlation` and :func:`hac_covariance`: a heteroscedasticity and autocorrelation
  consistent (Newey & West 1987) sandwich covariance with the Bartlett kernel and the AR(1)
  plug-in bandwidth of Andrews (1991), used when the residuals are structured.
"""

from __future__ import annotations

import math

import numpy as np

WINDOW = 9  # points in each local cubic (common practice: a window several times the degree)
MAD_TO_SIGMA = 1.4826  # Gaussian: sigma = 1.4826 MAD


def noise_estimate(t, values, window: int = WINDOW, degree: int = 3) -> float:
    """Per-coordinate noise sigma of a sampled smooth path, without any flight model.

    Each interior point is compared with the least-squares polynomial of ``degree`` through the
    ``window`` points around it (uneven timestamps allowed); the difference at the centre has
    variance sigma^2 (1 - 2 h_cc + sum_j h_cj^2) = sigma^2 (1 - h_cc) for a projection, with h the
    hat-matrix row. The robust (MAD) scale of the corrected differences is returned.

    Parameters
    ----------
    t : ndarray, shape (N,) [s]
    values : ndarray, shape (N, C) [m or px]

    Returns
    -------
    sigma : float, same unit as ``values`` (NaN when N < window)
    """
    t = np.asarray(t, float)
    y = np.asarray(values, float)
    if y.ndim == 1:
        y = y[:, None]
    n = len(t)
    if n < window:
        return math.nan
    half = window // 2
    idx = np.arange(half, n - half)[:, None] + np.arange(-half, half + 1)[None, :]  # (M, w)
    tt = t[idx] - t[idx[:, half]][:, None]
    span = np.maximum(np.abs(tt).max(axis=1, keepdims=True), 1e-12)
    X = (tt / span)[:, :, None] ** np.arange(degree + 1)[None, None, :]  # (M, w, d+1)
    XtX_inv = np.linalg.pinv(np.einsum("mwi,mwj->mij", X, X))
    h = np.einsum("mi,mij,mwj->mw", X[:, half, :], XtX_inv, X)  # hat row of the centre point
    pred = np.einsum("mw,mwc->mc", h, y[idx])
    d = (y[idx[:, half]] - pred) / np.sqrt(np.maximum(1.0 - h[:, half], 1e-6))[:, None]
    d = d.ravel()
    d = d[np.isfinite(d)]
    return float(MAD_TO_SIGMA * np.median(np.abs(d - np.median(d)))) if d.size else math.nan


def runs_test(residuals) -> float:
    """z-score of the number of sign runs along each residual column, pooled over columns.

    Strongly negative (fewer runs than chance, e.g. below -3) means structured residuals: the
    model misses part of the motion. Source: Wald & Wolfowitz 1940 (mean 2 n+ n- / n + 1,
    variance 2 n+ n- (2 n+ n- - n) / (n^2 (n - 1))).
    """
    r = np.asarray(residuals, float)
    if r.ndim == 1:
        r = r[:, None]
    runs = mean = var = 0.0
    for c in range(r.shape[1]):
        s = np.sign(r[:, c])
        s = s[s != 0]
        n = len(s)
        if n < 3:
            continue
        npos = float((s > 0).sum())
        nneg = n - npos
        runs += 1 + float((s[1:] != s[:-1]).sum())
        mean += 2 * npos * nneg / n + 1
        var += 2 * npos * nneg * (2 * npos * nneg - n) / (n * n * (n - 1))
    return float((runs - mean) / math.sqrt(var)) if var > 0 else 0.0


def lag1_correlation(residuals) -> float:
    """Lag-one autocorrelation of residual columns (N, C), pooled (0 for white noise)."""
    r = np.asarray(residuals, float)
    if r.ndim == 1:
        r = r[:, None]
    r = r - r.mean(axis=0)
    den = float(np.sum(r * r))
    return float(np.sum(r[1:] * r[:-1]) / den) if den > 0 and len(r) > 2 else 0.0


def andrews_bandwidth(rho: float, n: int) -> int:
    """Bartlett-kernel bandwidth from an AR(1) fit (Andrews 1991, eq. 6.2 and Table I):
    L = 1.1447 (alpha n)^(1/3), alpha = 4 rho^2 / ((1 - rho)^2 (1 + rho)^2)."""
    rho = min(max(rho, 0.0), 0.995)
    alpha = 4 * rho * rho / ((1 - rho) ** 2 * (1 + rho) ** 2)
    return int(min(max(1, math.ceil(1.1447 * (alpha * n) ** (1 / 3))), max(1, n // 2)))


def hac_covariance(J_points, r_points, J_other=None, r_other=None, bandwidth: int | None = None):
    """Sandwich covariance (J'J)^-1 S (J'J)^-1 with a Newey-West S over time-ordered points.

    Parameters
    ----------
    J_points : ndarray, shape (N, C, k): Jacobian rows of each point's C residuals
    r_points : ndarray, shape (N, C): the residuals
    J_other, r_other : (M, k), (M,): residuals not ordered in time (priors, hints), lag 0 only
    bandwidth : Bartlett lag window; None picks it by :func:`andrews_bandwidth`

    Returns
    -------
    cov : ndarray, shape (k, k); bandwidth used
    """
    J = np.asarray(J_points, float)
    r = np.asarray(r_points, float)
    g = np.einsum("nck,nc->nk", J, r)  # per-point scores
    A = np.einsum("nck,ncj->kj", J, J)
    S = g.T @ g
    if J_other is not None and len(J_other):
        A = A + J_other.T @ J_other
        go = J_other * r_other[:, None]
        S = S + go.T @ go
    n = len(g)
    L = andrews_bandwidth(lag1_correlation(r), n) if bandwidth is None else int(bandwidth)
    for lag in range(1, min(L, n - 1) + 1):
        w = 1.0 - lag / (L + 1.0)
        G = g[lag:].T @ g[:-lag]
        S = S + w * (G + G.T)
    A_inv = np.linalg.pinv(A)
    return A_inv @ S @ A_inv, L


def misfit_summary(residuals, noise_sigma: float, n_unknowns: int, noise_source: str) -> dict:
    """How the residuals compare with the model-free noise, as a plain dict.

    residuals : ndarray, shape (N, C), inliers only, same unit as ``noise_sigma``
    """
    r = np.asarray(residuals, float)
    m = r.size
    dof = max(1, m - n_unknowns)
    rms = float(math.sqrt(np.sum(r * r) / dof))
    ratio = rms / noise_sigma if noise_sigma > 0 and math.isfinite(noise_sigma) else math.nan
    z = runs_test(r)
    # chi2/dof of white residuals has sd sqrt(2/dof); allow 4 sd plus 15 % for the noise estimate itself
    limit = math.sqrt(1 + 4 * math.sqrt(2 / dof)) * 1.15
    structured = z < -3.0
    too_big = math.isfinite(ratio) and ratio > limit
    return {"rms_residual": rms, "noise_sigma": float(noise_sigma), "noise_source": noise_source,
            "misfit_ratio": ratio, "misfit_limit": limit, "runs_z": z, "lag1_correlation": lag1_correlation(r),
            "structured": bool(structured), "too_large": bool(too_big), "fits": not (structured and too_big)}
