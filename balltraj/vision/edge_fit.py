"""The ball's blurred, shaded disc fitted in one patch: the silhouette edge model of ``ball_size.py``
(its docstring gives the model and its references), with the analytic Jacobian of its variable-projection
residuals (Golub & Pereyra 1973) for scipy's robust least squares.
"""
from __future__ import annotations

import math
from dataclasses import dataclass, replace

import numpy as np
from scipy.optimize import least_squares
from scipy.special import erfc

_BLUR_SAMPLES = 5

@dataclass(frozen=True)
class EdgeFit:
    """One frame's silhouette fit (pixels of the distorted image)."""

    centre_px: np.ndarray
    radius_px: float
    radius_sigma_px: float
    blur_px: float
    edge_px: float
    contrast: float
    noise: float
    ok: bool
    message: str = ""
    light_angles: tuple = (0.5, 0.0)  # polar angle from the line of sight (toward the camera), azimuth [rad]
    left_out: float = 0.0  # share of the fitted pixels left out as foreign arcs (a shadow touching the ball)


_S = (np.arange(_BLUR_SAMPLES) + 0.5) / _BLUR_SAMPLES - 0.5  # positions along the blur, in blur lengths
_NZ_FLOOR = 0.1  # the limb's sqrt singularity: d nz / d q taken at nz >= this (the model's values are exact)
_FULL_RES_RADIUS = 8.0  # [px] balls up to 4 times this are fitted on every pixel
_LIGHT_MAX = 0.6 * math.pi  # the light's largest angle from the line of sight (toward the camera)


def _light_vector(p0, p1):
    """Unit light direction (x, y toward the image's axes, z toward the camera) from its stereographic
    coordinates p = tan(theta / 2) (cos phi, sin phi): smooth at theta = 0, where the azimuth is not defined."""
    D = 1.0 + p0 * p0 + p1 * p1
    return 2 * p0 / D, 2 * p1 / D, 2 / D - 1


def _light_coords(theta, phi):
    t = math.tan(0.5 * theta)
    return t * math.cos(phi), t * math.sin(phi)


def _light_angles(p0, p1):
    return 2 * math.atan(math.hypot(p0, p1)), math.atan2(p1, p0)


class _DiscResiduals:
    """Residuals of the shaded, blurred disc model with its linear coefficients projected out (variable
    projection) and their analytic Jacobian over q = (cx, cy, r, L, sigma, p0, p1).

    ``X`` (N, 2) pixel positions, ``z`` (N,) grey values, ``B`` (N,) background or None (a plane instead),
    ``e`` the unit blur direction, ``rel`` (N, 2) the plane's scaled coordinates; the light direction's
    (theta, phi) enter as p = tan(theta / 2) (cos phi, sin phi). One evaluation is kept so
    that the Jacobian at the point just evaluated reuses its coverage and projection."""

    def __init__(self, X, z, B, e, rel):
        self.x, self.y, self.z, self.B, self.e, self.rel = X[:, 0], X[:, 1], z, B, e, rel
        self._key = None

    def _eval(self, q):
        key = q.tobytes()
        if key == self._key:
            return self._st
        cx, cy, r, L, sig, p0, p1 = q
        e, s = self.e, _S[:, None]
        px = self.x[None] - (cx + s * (L * e[0]))
        py = self.y[None] - (cy + s * (L * e[1]))
        rho = np.sqrt(px * px + py * py)
        k = 1.0 / (math.sqrt(2.0) * sig)
        u = (rho - r) * k
        cov_j = 0.5 * erfc(u)
        cov = cov_j.mean(0)
        dx, dy = px / r, py / r
        nz = np.sqrt(np.clip(1 - dx * dx - dy * dy, 0, None))
        l0, l1, l2 = _light_vector(p0, p1)
        lit_raw = dx * l0 + dy * l1 + nz * l2
        lit = np.clip(lit_raw, 0, None)
        shade = (cov_j * lit).mean(0)
        out = 1 - cov
        cols = [out] + ([] if self.B is not None else [out * self.rel[:, 0], out * self.rel[:, 1]]) + [cov, shade]
        A = np.stack(cols, 1)
        t = self.z if self.B is None else self.z - self.B * out
        # least squares through the columns' Gram matrix, columns scaled to unit norm (the pseudo-inverse of
        # numpy's lstsq where the columns are independent; near-dependent directions cut at 1e-10)
        nrm = np.sqrt((A * A).sum(0))
        nrm[nrm == 0] = 1.0
        An = A / nrm
        w, V = np.linalg.eigh(An.T @ An)
        good = w > 1e-10 * max(float(w[-1]), 1e-300)
        Gp = (V[:, good] / w[good]) @ V[:, good].T  # (An^T An)^+
        cn = Gp @ (An.T @ t)
        res = t - An @ cn
        self._key = key
        self._st = dict(q=q.copy(), px=px, py=py, rho=rho, k=k, u=u, cov_j=cov_j, dx=dx, dy=dy, nz=nz,
                        lit=lit, pos=lit_raw > 0, light=(l0, l1, l2), An=An, nrm=nrm, Gp=Gp, cn=cn, res=res,
                        A=A, t=t)
        return self._st

    def resid(self, q):
        return self._eval(np.asarray(q, float))["res"].copy()  # (the solver scales what it is given in place)

    def design(self, q):
        """The design matrix, target and linear coefficients at q."""
        st = self._eval(np.asarray(q, float))
        return st["A"], st["t"], st["cn"] / st["nrm"]

    def jac(self, q):
        st = self._eval(np.asarray(q, float))
        cx, cy, r, L, sig, p0, p1 = st["q"]
        e, k = self.e, st["k"]
        u, cov_j, dx, dy, nz, lit = st["u"], st["cov_j"], st["dx"], st["dy"], st["nz"], st["lit"]
        l0, l1, l2 = st["light"]
        # per blur sample: d cov_j / d q = g du/dq with u = (rho - r) k, rho the distance from the sample's centre
        g = np.exp(-u * u) * (-1.0 / math.sqrt(math.pi))
        gk = g * k
        rr = np.maximum(st["rho"], 1e-12) / r  # rho / r
        Gx, Gy = gk * (-dx / rr), gk * (-dy / rr)  # cx, cy (the blur length: s (e . (cx, cy) terms))
        G = np.stack([Gx, Gy, -gk, g * (-u / sig)])  # cx, cy, r, sigma
        # d lit / d q where lit > 0: the normal n = (dx, dy, nz) moves with the centre and the radius
        w = cov_j * (st["pos"] / r)
        l2inz = l2 * np.where(nz > 0, 1.0 / np.maximum(nz, _NZ_FLOOR), 0.0)
        T = G * lit
        T[0] += w * (dx * l2inz - l0)
        T[1] += w * (dy * l2inz - l1)
        T[2] += w * ((dx * dx + dy * dy) * l2inz - (dx * l0 + dy * l1))
        wl = (cov_j * st["pos"])[None] * np.stack([dx, dy, nz])  # d shade / d light = mean cov_j n
        m = np.full(_BLUR_SAMPLES, 1.0 / _BLUR_SAMPLES)
        ms = _S / _BLUR_SAMPLES
        n = len(self.z)
        dcov = np.zeros((7, n))
        dshade = np.zeros((7, n))
        mG, mT = np.einsum("j,kjn->kn", m, G), np.einsum("j,kjn->kn", m, T)
        dcov[[0, 1, 2, 4]] = mG
        dshade[[0, 1, 2, 4]] = mT
        dcov[3] = e[0] * (ms @ G[0]) + e[1] * (ms @ G[1])  # a sample's centre moves with L as s e
        dshade[3] = e[0] * (ms @ T[0]) + e[1] * (ms @ T[1])
        mL = np.einsum("j,kjn->kn", m, wl)
        D = 1.0 + p0 * p0 + p1 * p1  # d light / d p (inverse stereographic projection)
        dl_p = np.array([[2 / D - 4 * p0 * p0 / D ** 2, -4 * p0 * p1 / D ** 2, -4 * p0 / D ** 2],
                         [-4 * p0 * p1 / D ** 2, 2 / D - 4 * p1 * p1 / D ** 2, -4 * p1 / D ** 2]])
        dshade[5:] = dl_p @ mL
        # d A / d q_i columns: out -> -dcov (and the plane's), cov -> dcov, shade -> dshade; d t = B dcov
        c = st["cn"] / st["nrm"]
        An, Gp, res, nrm = st["An"], st["Gp"], st["res"], st["nrm"]
        if self.B is None:
            dAc = dcov * (-c[0] - c[1] * self.rel[:, 0] - c[2] * self.rel[:, 1] + c[3]) + dshade * c[4]
            dt = 0.0
            dAr = np.stack([-(dcov @ res), -(dcov @ (res * self.rel[:, 0])), -(dcov @ (res * self.rel[:, 1])),
                            dcov @ res, dshade @ res], 1)
        else:
            dAc = dcov * (c[1] - c[0]) + dshade * c[2]
            dt = dcov * self.B
            dAr = np.stack([-(dcov @ res), dcov @ res, dshade @ res], 1)
        v = dt - dAc  # (7, N)
        v = v - (v @ An) @ Gp @ An.T  # the part outside the columns' span
        # d res = P_perp (dt - dA c) - (A^+)^T dA^T res   (Golub & Pereyra 1973)
        v -= ((dAr / nrm) @ Gp) @ An.T
        return v.T


def fit_edge(patch, background, centre_guess, radius_guess, direction=(1.0, 0.0), blur_guess: float = 0.0,
             start: EdgeFit | None = None, reject_foreign: bool = True) -> EdgeFit:
    """Fit the ball's blurred, shaded disc in a patch.

    Parameters
    ----------
    patch : ndarray, shape (H, W)
        Grey pixels around the ball (pixel centres at integer coordinates of the patch).
    background : ndarray, shape (H, W) or None
        The same place without the ball (None: a plane is fitted on the patch instead).
    centre_guess : array_like, shape (2,) [px]
        In patch coordinates.
    radius_guess : float [px]
    direction : array_like, shape (2,)
        The ball's direction of motion in the image (the blur's direction).
    blur_guess : float [px]
        Expected blur length along ``direction``.
    start : EdgeFit, optional
        A neighbouring frame's fit: its blur, edge width and light start this one (fewer iterations).
    reject_foreign : bool
        Leave out the arcs of the silhouette whose outside is not the background (a shadow or contact patch
        touching the ball: ``_foreign_arcs``) and fit again on the rest. False: every pixel is fitted.

    Returns
    -------
    EdgeFit
        ``ok`` False with a message when the fit fails or its radius is implausible.
    """
    z_img = np.asarray(patch, float)
    h, w = z_img.shape
    ys, xs = np.mgrid[0:h, 0:w]
    X = np.stack([xs.ravel(), ys.ravel()], 1).astype(float)
    z = z_img.ravel()
    B = None if background is None else np.asarray(background, float).ravel()
    e = np.asarray(direction, float)
    e = e / max(float(np.hypot(*e)), 1e-9)
    c0, r0 = np.asarray(centre_guess, float), float(radius_guess)
    if background is not None:  # start from the area that differs from the background (the dim limb included)
        d_full = z_img - np.asarray(background, float)
        dev = np.abs(d_full - np.median(d_full))
        sd = max(1.0, 1.4826 * float(np.median(dev)))
        near = np.hypot(xs - c0[0], ys - c0[1]) < 2.0 * r0 + 0.5 * blur_guess + 2
        # per angular sector about the guess, the radius of a disc with the sector's share of that area, and
        # their median: a shadow or contact patch beside the ball enlarges some sectors only (the dim limb, all)
        n_sec = 16
        ang = np.arctan2(ys - c0[1], xs - c0[0])[(dev > 3 * sd) & near]
        counts = np.bincount(((ang + math.pi) / (2 * math.pi) * n_sec).astype(int) % n_sec, minlength=n_sec)
        r_area = float(np.median(np.sqrt(counts * n_sec / math.pi)))
        r0 = max(r0, min(r_area, 1.5 * r0))
    # every pixel near the edge (where centre and radius are decided), every third one elsewhere
    rel0 = X - c0
    along = np.clip(rel0 @ e, -0.5 * blur_guess, 0.5 * blur_guess)
    d0 = np.hypot(*(rel0 - along[:, None] * e).T)  # distance from the blur segment
    keep = (np.abs(d0 - r0) < 0.5 * r0 + 2.5) | ((xs.ravel() + 2 * ys.ravel()) % 3 == 0)
    keep &= d0 < 1.9 * r0 + 3
    # a large ball: every a-th pixel each way, a = floor(sqrt(r0 / 8)), so that its edge still has at least the
    # samples of an 8 px ball at full resolution (2 pi r w / a^2 >= 2 pi 8 w); the cost goes as the pixels
    a = max(1, int(math.sqrt(r0 / _FULL_RES_RADIUS)))
    if a > 1:
        keep &= (xs.ravel() % a == 0) & (ys.ravel() % a == 0)
    X, z = X[keep], z[keep]
    B = None if B is None else B[keep]
    rel = (X - X.mean(0)) / max(r0, 1.0)
    model = _DiscResiduals(X, z, B, e, rel)

    if start is not None and start.ok:
        q0 = np.array([c0[0], c0[1], r0, start.blur_px, start.edge_px, *_light_coords(*start.light_angles)])
    else:
        th0, ph0 = _light_guess(X, z if B is None else z - B, c0, r0)
        q0 = np.array([c0[0], c0[1], r0, blur_guess, 0.6, *_light_coords(th0, ph0)])
    pmax = math.tan(0.5 * _LIGHT_MAX)  # (a box: up to 2 atan(sqrt(2) pmax), 125 degrees, in its corners)
    lo = np.array([c0[0] - 0.6 * r0 - 2, c0[1] - 0.6 * r0 - 2, 0.5 * r0, 0.0, 0.25, -pmax, -pmax])
    hi = np.array([c0[0] + 0.6 * r0 + 2, c0[1] + 0.6 * r0 + 2, 2.0 * r0 + 1, 3.0 * r0 + 4, 2.0, pmax, pmax])
    q0 = np.clip(q0, lo + 1e-6, hi - 1e-6)
    if B is None:
        border = np.concatenate([z_img[0], z_img[-1], z_img[:, 0], z_img[:, -1]])
        noise0 = max(1.0, 1.4826 * float(np.median(np.abs(border - np.median(border)))))
    else:
        d = z - B
        noise0 = max(1.0, 1.4826 * float(np.median(np.abs(d - np.median(d)))))
    solve = lambda m, q_start: least_squares(  # noqa: E731
        m.resid, q_start, jac=m.jac, bounds=(lo, hi), loss="soft_l1", f_scale=2.0 * noise0,
        x_scale=[1, 1, 1, 1, 0.2, 0.2, 0.2], xtol=1e-4, ftol=1e-4, max_nfev=40)
    try:
        sol = solve(model, q0)
        used = model
        dropped = np.zeros(len(z), bool)
        for _ in range(2 if reject_foreign else 0):  # the arcs whose outside is not the background, left out
            drop = _foreign_arcs(X, model, used, sol.x, e)
            if drop is None or np.array_equal(drop, dropped):
                break
            dropped = drop
            used = _DiscResiduals(X[~drop], z[~drop], None if B is None else B[~drop], e, rel[~drop])
            sol = solve(used, sol.x)
    except (np.linalg.LinAlgError, ValueError) as exc:
        return EdgeFit(c0, r0, math.nan, 0.0, 0.6, 0.0, math.nan, False, f"edge fit failed ({exc})")
    q = sol.x
    res, noise, contrast, ncoef = _fit_stats(used, q)
    J = sol.jac
    dof = max(len(res) - len(q) - ncoef, 1)
    s2 = float(res @ res) / dof
    try:
        cov = np.linalg.inv(J.T @ J) * s2
        r_sig = math.sqrt(max(float(cov[2, 2]), 0.0))
    except np.linalg.LinAlgError:
        r_sig = math.nan
    fit = EdgeFit(q[:2].copy(), float(q[2]), r_sig, float(q[3]), float(q[4]), contrast, noise, True, "",
                  _light_angles(float(q[5]), float(q[6])), float(dropped.mean()))
    why = ""
    if not sol.success:  # (status 0: stopped at its evaluation limit)
        why = "edge fit did not converge"
    elif contrast < 4 * max(noise, 0.5):
        why = "ball hardly differs from the background"
    elif not math.isfinite(r_sig) or r_sig > 0.25 * q[2]:
        why = "radius not pinned by the edge"
    elif np.any(np.isclose(q[2], [lo[2], hi[2]], rtol=1e-3)):
        why = "radius at its search bound"
    return fit if not why else replace(fit, ok=False, message=why)


def _fit_stats(model, q):
    """Residuals, their robust scale, the ball's contrast (mean shaded disc against the background) and the
    number of linear coefficients, of ``model`` at q."""
    A, target, coef = model.design(q)
    res = target - A @ coef
    noise = 1.4826 * float(np.median(np.abs(res)))
    mean_in = float(coef[-2] + 0.5 * coef[-1])  # about the mean brightness of the shaded disc
    contrast = abs(mean_in - (float(coef[0]) if model.B is None else float(coef[0]) + float(np.median(model.B))))
    return res, noise, contrast, A.shape[1]


def _foreign_arcs(X, full, used, q, e, k_sigma: float = 4.0, share: float = 0.15):
    """Pixels of the arcs whose outside is not the background: a dark shadow or contact patch touching the
    ball, a neighbouring object. Around the silhouette (the blur segment's rim), in angular sectors of about
    3 px of rim, the median residual of the ring just outside the edge (r + 2 sigma + 0.5 to r + max(3,
    0.6 r)) under the model fitted on ``used``; a sector whose median is off by more than ``k_sigma`` of its
    own standard error (sqrt(pi / 2) noise / sqrt(n), a sample median's: common practice) and by more than
    ``share`` of the ball's contrast is foreign, with its two neighbours (the blob's tails). Its edge band
    and outside are then left out, so that centre and radius come from the arcs against the background
    (its inside stays for the shading). No direction is assumed: the shadow is found where it is.
    Returns the mask over ``full``'s pixels, or None when nothing is foreign or over half the rim is (not a
    patch beside the ball but a model that misses: a ball whose unlit half is as dark as a dark room, or
    a disc grown over ball and shadow -- refusing those cost a dark-room clip of the second renderer its
    edge fits, so they are kept as fitted)."""
    cx, cy, r, L, sig = q[:5]
    rel = X - [cx, cy]
    along = np.clip(rel @ e, -0.5 * L, 0.5 * L)
    off = rel - along[:, None] * e
    d = np.hypot(off[:, 0], off[:, 1]) - r  # signed distance from the silhouette's rim
    ang = np.arctan2(off[:, 1], off[:, 0])
    n_sec = int(np.clip(round(2 * math.pi * r / 3.0), 8, 32))
    sec = ((ang + math.pi) / (2 * math.pi) * n_sec).astype(int) % n_sec
    _, noise, contrast, _ = _fit_stats(used, q)
    A, target, _ = full.design(q)
    coef = used.design(q)[2]
    res = target - A @ coef  # every pixel against the model of the arcs kept
    ring = (d > 2 * sig + 0.5) & (d < max(3.0, 0.6 * r))
    band = (d < -sig) & (d > -max(1.5, 0.35 * r))  # just inside: a patch the disc swallowed (as blur, say)
    bad = np.zeros((2, n_sec), bool)
    floor = max(noise, 0.5) * 1.2533 * k_sigma
    for s_ in range(n_sec):
        for j, where in enumerate((ring, band)):
            m = where & (sec == s_)
            if m.sum() >= 3:
                bad[j, s_] = abs(float(np.median(res[m]))) > max(floor / math.sqrt(m.sum()), share * contrast)
    if (bad[0] | bad[1]).mean() > 0.5 or not bad[0].any():
        return None
    out = bad[0] | np.roll(bad[0], 1) | np.roll(bad[0], -1)
    return out[sec] & (d > -(2 * sig + 1.0))


def _light_guess(X, z, c, r):
    """Light direction (polar angle from the line of sight, azimuth) from a shading fit a0 + a . n on the
    pixels well inside the guessed disc (where the ball is lit, brightness is linear in the normal)."""
    d = (X - c) / r
    rho2 = (d ** 2).sum(1)
    m = rho2 < 0.6
    if m.sum() < 8:
        return 0.5, 0.0
    A = np.stack([np.ones(m.sum()), d[m, 0], d[m, 1], np.sqrt(1 - rho2[m])], 1)
    a = np.linalg.lstsq(A, z[m], rcond=None)[0][1:]
    if np.linalg.norm(a) < 1e-9:
        return 0.5, 0.0
    a = a / np.linalg.norm(a)  # brightness grows toward the light whatever the background (no sign flip)
    return min(math.acos(float(np.clip(a[2], -1, 1))), 0.55 * math.pi), math.atan2(a[1], a[0])
