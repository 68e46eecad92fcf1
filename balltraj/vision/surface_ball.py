"""The ball's disc in one frame, fitted as a shaded, motion-blurred sphere, and the ball's surface patch.

The centre and apparent radius come from a model of the whole ball image, not from bright-pixel
moments (which a lit side or a dark seam pulls off centre):

    I(x) = b(x) (1 - C(x)) + < C_j(x) (a0 + a1 nx_j + a2 ny_j + a3 nz_j) >_j

where C_j is a disc of radius r centred at c + s_j beta (s_j spread over [-1/2, 1/2]: motion blur
along the blur vector beta over the exposure), with an error-function edge of width sigma (pixel
integration and lens blur), C its mean over j, n_j = ((x - c_j)/r, (y - c_j)/r, -sqrt(1 - rho^2)) the
sphere normal (orthographic view), so that the ball's brightness is Lambertian shading
albedo (ambient + n . L) of any light direction L; b(x) is a plane for the background. The shading
and background coefficients enter linearly and are solved inside (variable projection); the
centre, radius, blur vector and edge width are found by robust least squares (seams and stamps are
outliers to the smooth model).

References
----------
Golub & Pereyra 1973, "The differentiation of pseudo-inverses and nonlinear least squares problems
whose variables separate", SIAM J. Numer. Anal. 10(2):413-432 (variable projection).
Horn 1986, *Robot Vision*, ch. 10 (Lambertian shading of a sphere: brightness linear in the normal).
"""
from __future__ import annotations

import math
from dataclasses import dataclass

import cv2
import numpy as np
from scipy.special import erfc

from ..camera.model import Camera, rodrigues

_BLUR_SAMPLES = 9


@dataclass(frozen=True)
class BallDisc:
    """One frame's fitted ball image.

    Attributes
    ----------
    centre_px : ndarray, shape (2,) [px]
        Centre at mid-exposure (pixel centres at integer coordinates).
    radius_px : float [px]
    blur_px : ndarray, shape (2,) [px]
        Displacement of the centre over the exposure (sign is arbitrary).
    edge_px : float [px]
        Edge width (one sigma of the error-function edge).
    shading : ndarray, shape (2,)
        Ambient and diffuse brightness of the ball [grey levels].
    light : ndarray, shape (3,)
        Unit vector towards the light in the camera frame (x right, y down, z forward).
    background : ndarray, shape (3,)
        Background plane b0 + b1 (x - cx)/r + b2 (y - cy)/r [grey levels].
    noise : float
        Robust residual scale of the fit [grey levels].
    ok : bool
    message : str
    """

    centre_px: np.ndarray
    radius_px: float
    blur_px: np.ndarray
    edge_px: float
    shading: np.ndarray
    light: np.ndarray
    background: np.ndarray
    noise: float
    ok: bool = True
    message: str = ""

    def shade(self, uv) -> np.ndarray:
        """The fitted (unblurred) shading of the ball at pixels ``uv`` (..., 2) [grey levels]."""
        d = (np.asarray(uv, float) - self.centre_px) / self.radius_px
        nz = -np.sqrt(np.clip(1 - (d ** 2).sum(-1), 0, None))
        L = self.light
        return self.shading[0] + self.shading[1] * np.clip(d[..., 0] * L[0] + d[..., 1] * L[1] + nz * L[2], 0, None)

    def coverage(self, uv) -> np.ndarray:
        """Blurred coverage of the ball (0..1) at pixels ``uv`` (..., 2)."""
        return _coverage(np.asarray(uv, float), self.centre_px, self.radius_px, self.blur_px, self.edge_px)[0]


def _coverage(X, c, r, beta, sig):
    """Mean coverage (...,), per-blur-sample coverage (J, ...) and normalised offsets (J, ..., 2)."""
    s = (np.arange(_BLUR_SAMPLES) + 0.5) / _BLUR_SAMPLES - 0.5
    shape = (-1,) + (1,) * (X.ndim - 1)
    dx = (X[..., 0][None] - (c[0] + s * beta[0]).reshape(shape)) / r
    dy = (X[..., 1][None] - (c[1] + s * beta[1]).reshape(shape)) / r
    d = np.sqrt(dx * dx + dy * dy)
    cov_j = 0.5 * erfc((d - 1.0) * (r / (math.sqrt(2) * sig)))
    return cov_j.mean(0), cov_j, (dx, dy)


def _light(theta, phi):
    return np.array([math.sin(theta) * math.cos(phi), math.sin(theta) * math.sin(phi), -math.cos(theta)])


def _design(X, p):
    cx, cy, r, bx, by, sig, th, ph = p
    c = np.array([cx, cy])
    cov, cov_j, (dx, dy) = _coverage(X, c, r, np.array([bx, by]), sig)
    nz = -np.sqrt(np.clip(1 - dx * dx - dy * dy, 0, None))
    L = _light(th, ph)
    lit = np.clip(dx * L[0] + dy * L[1] + nz * L[2], 0, None)
    out = 1 - cov
    rel = (X - c) / r
    cols = [out, out * rel[:, 0], out * rel[:, 1], cov, (cov_j * lit).mean(0)]
    return np.stack(cols, axis=1)


def rough_ball(image, noise=None):
    """A first guess (centre (2,) [px], radius [px]) from the largest blob that differs from the border."""
    img = np.asarray(image, float)
    border = np.concatenate([img[0], img[-1], img[:, 0], img[:, -1]])
    bg = float(np.median(border))
    sd = noise if noise is not None else max(1.0, 1.4826 * float(np.median(np.abs(border - bg))))
    dev = np.abs(img - bg)
    thr = max(4 * sd, 0.05 * float(dev.max()))
    n, lab, stats, cent = cv2.connectedComponentsWithStats((dev > thr).astype(np.uint8), connectivity=8)
    if n < 2:
        return None, None
    i = 1 + int(np.argmax(stats[1:, cv2.CC_STAT_AREA]))
    return cent[i].astype(float), math.sqrt(stats[i, cv2.CC_STAT_AREA] / math.pi)


def fit_ball_disc(image, centre_guess, radius_guess, blur_guess=(0.0, 0.0), start: BallDisc | None = None,
                  fix_blur: bool = False) -> BallDisc:
    """Fit the shaded, blurred sphere model to the ball near a guess.

    Parameters
    ----------
    image : ndarray, shape (H, W)
        Grey frame.
    centre_guess : array_like, shape (2,) [px]
    radius_guess : float [px]
    blur_guess : array_like, shape (2,) [px]
        Expected blur vector (velocity times exposure), if known.
    start : BallDisc, optional
        A fit of a neighbouring frame: its radius, blur, edge width and light start this fit.
    fix_blur : bool
        Keep the blur vector and edge width at their start values (``start``, else ``blur_guess`` and
        0.6 px): in a short window every frame has the same blur, and a fit with fewer free shapes is
        not pulled by a seam at the limb.

    Returns
    -------
    BallDisc
        ``ok`` is False (with a message) when the ball is cut by the image edge or the fit fails.
    """
    img = np.asarray(image, float)
    h, w = img.shape
    c0, r0, b0 = np.asarray(centre_guess, float), float(radius_guess), np.asarray(blur_guess, float)
    half = 1.7 * r0 + 0.5 * float(np.hypot(*b0)) + 3
    x0, x1 = int(math.floor(c0[0] - half)), int(math.ceil(c0[0] + half)) + 1
    y0, y1 = int(math.floor(c0[1] - half)), int(math.ceil(c0[1] + half)) + 1
    fail = BallDisc(c0, r0, b0, 0.5, np.zeros(2), np.array([0, 0, -1.0]), np.zeros(3), math.nan, False, "")
    if min(c0[0], c0[1], w - 1 - c0[0], h - 1 - c0[1]) < r0 + 0.5 * float(np.hypot(*b0)) + 2:
        return _failed(fail, "ball too close to the image edge")
    x0, y0, x1, y1 = max(x0, 0), max(y0, 0), min(x1, w), min(y1, h)
    ys, xs = np.mgrid[y0:y1, x0:x1]
    X = np.stack([xs.ravel(), ys.ravel()], axis=1).astype(float)
    z = img[y0:y1, x0:x1].ravel()
    # every pixel near the edge (where centre and radius are decided), a sparse grid elsewhere (shading)
    d0 = np.hypot(X[:, 0] - c0[0], X[:, 1] - c0[1])
    keep = (np.abs(d0 - r0) < 0.45 * r0 + 0.5 * float(np.hypot(*b0)) + 3) | ((xs.ravel() + 2 * ys.ravel()) % 3 == 0)
    X, z = X[keep], z[keep]
    wts = np.ones_like(z)

    def resid(p):
        A = _design(X, p)
        sw = np.sqrt(wts)
        coef = np.linalg.lstsq(A * sw[:, None], z * sw, rcond=None)[0]
        return (z - A @ coef) * sw, coef

    if start is not None and start.ok:
        L = start.light
        p = np.array([c0[0], c0[1], start.radius_px, start.blur_px[0], start.blur_px[1], start.edge_px,
                      math.acos(float(np.clip(-L[2], -1, 1))), math.atan2(L[1], L[0])])
    else:
        th0, ph0 = _light_guess(X, z, c0, r0)
        p = np.array([c0[0], c0[1], r0, b0[0], b0[1], 0.6, th0, ph0])
    lo = [c0[0] - r0, c0[1] - r0, 0.5 * r0, -3 * r0, -3 * r0, 0.25, 0.0, -4 * math.pi]
    hi = [c0[0] + r0, c0[1] + r0, 1.6 * r0, 3 * r0, 3 * r0, 3.0, 0.5 * math.pi * 1.2, 4 * math.pi]
    p = np.clip(p, lo, hi)
    steps = np.array([0.02, 0.02, 0.02, 0.05, 0.05, 0.01, 0.005, 0.005])
    free = np.array([True, True, True, not fix_blur, not fix_blur, not fix_blur, True, True])
    lo, hi = np.array(lo), np.array(hi)

    def resid_free(q):
        full = p.copy()
        full[free] = q
        return resid(full)[0]

    try:
        for it in range(3):  # iteratively reweighted Levenberg-Marquardt: Huber, then Tukey's biweight
            p[free] = _levenberg_marquardt(resid_free, p[free], lo[free], hi[free], steps[free])
            res, coef = resid(p)
            raw = res / np.sqrt(wts)
            scale = max(0.5, 1.4826 * float(np.median(np.abs(raw))))
            if it == 0:
                wts = 1.0 / np.maximum(1.0, np.abs(raw) / (2.0 * scale))
            else:
                wts = np.clip(1 - (raw / (4.685 * scale)) ** 2, 0, None) ** 2 + 1e-6
    except np.linalg.LinAlgError as exc:
        return _failed(fail, f"disc fit failed ({exc})")
    A = _design(X, p)
    outside = A[:, 0] > 0.99
    noise = 1.4826 * float(np.median(np.abs(raw[outside]))) if outside.sum() > 20 else scale
    contrast = abs(float(coef[3] - coef[0])) + abs(float(coef[4]))
    disc = BallDisc(p[:2].copy(), float(p[2]), p[3:5].copy(), float(p[5]), coef[3:5].copy(), _light(p[6], p[7]),
                    coef[:3].copy(), noise, True, "")
    if contrast < 5 * max(noise, 0.5):
        return _failed(disc, "ball hardly differs from the background")
    return disc


def _levenberg_marquardt(fun, p, lo, hi, steps, iterations=25, tol=2e-3):
    """Minimise |fun(p)|^2 within box bounds (forward-difference Jacobian, Marquardt's diagonal damping)."""
    r = fun(p)
    cost, lam = float(r @ r), 1e-3
    for _ in range(iterations):
        J = np.empty((len(r), len(p)))
        for i, h in enumerate(steps):
            q = p.copy()
            q[i] = q[i] + h if q[i] + h <= hi[i] else q[i] - h
            J[:, i] = (fun(q) - r) / (q[i] - p[i])
        A, g = J.T @ J, J.T @ r
        while True:
            delta = -np.linalg.solve(A + lam * np.diag(np.diag(A) + 1e-9), g)
            q = np.clip(p + delta, lo, hi)
            rq = fun(q)
            cq = float(rq @ rq)
            if cq < cost:
                p, r, cost, lam = q, rq, cq, max(lam / 4, 1e-7)
                break
            lam *= 5
            if lam > 1e6:
                return p
        if np.all(np.abs(delta) < tol * steps / steps[0]):
            break
    return p


def _light_guess(X, z, c, r):
    """Light direction from a linear shading fit a0 + a . n on the pixels well inside the guessed disc."""
    d = (X - c) / r
    rho2 = (d ** 2).sum(1)
    m = rho2 < 0.6
    if m.sum() < 8:
        return 0.3, 0.0
    A = np.stack([np.ones(m.sum()), d[m, 0], d[m, 1], -np.sqrt(1 - rho2[m])], 1)
    a = np.linalg.lstsq(A, z[m], rcond=None)[0][1:]
    if np.linalg.norm(a) < 1e-9:
        return 0.3, 0.0
    a = a / np.linalg.norm(a)
    return math.acos(float(np.clip(-a[2], -1, 1))), math.atan2(a[1], a[0])


def _failed(d: BallDisc, msg: str) -> BallDisc:
    return BallDisc(d.centre_px, d.radius_px, d.blur_px, d.edge_px, d.shading, d.light, d.background, d.noise, False, msg)


# --- the surface patch: sphere normals <-> pixels ------------------------------------------------------

def view_rotation(disc: BallDisc, camera: Camera | None) -> np.ndarray:
    """Rotation V (3, 3) from the camera frame to the ball's view frame (z along the ray to the centre)."""
    if camera is None:
        return np.eye(3)
    q = camera.undistort_normalised(disc.centre_px)
    d = np.array([q[0], q[1], 1.0])
    d /= np.linalg.norm(d)
    axis = np.cross(d, [0.0, 0.0, 1.0])
    s = np.linalg.norm(axis)
    if s < 1e-12:
        return np.eye(3)
    return rodrigues(axis / s * math.atan2(s, d[2]))


def _angular_radius(disc: BallDisc, camera: Camera) -> float:
    c = disc.centre_px
    pts = c + disc.radius_px * np.array([[1, 0], [-1, 0], [0, 1], [0, -1]], float)
    q = camera.undistort_normalised(np.vstack([c, pts]))
    v = np.concatenate([q, np.ones((5, 1))], axis=1)
    v /= np.linalg.norm(v, axis=1, keepdims=True)
    return float(np.mean(np.arccos(np.clip(v[1:] @ v[0], -1, 1))))


def normals_to_pixels(n_view, disc: BallDisc, camera: Camera | None = None):
    """Pixels (..., 2) of unit sphere normals ``n_view`` (..., 3) in the ball's view frame, and a
    visibility mask (...,). Orthographic without a camera; through the camera model (ray to the centre,
    apparent angular size, lens distortion) with one."""
    n = np.asarray(n_view, float)
    if camera is None:
        uv = disc.centre_px + disc.radius_px * n[..., :2]
        return uv, n[..., 2] < 0
    V = view_rotation(disc, camera)
    alpha = _angular_radius(disc, camera)
    D = 1.0 / math.sin(max(alpha, 1e-6))
    P = np.array([0.0, 0.0, D]) + n  # view frame, ball radius 1
    vis = (P * n).sum(-1) < 0
    Pc = P @ V  # V^T P for row vectors: into the camera frame
    xn = Pc[..., :2] / Pc[..., 2:3]
    xd = camera.distort(xn)
    K = camera.K
    uv = np.stack([K[0, 0] * xd[..., 0] + K[0, 1] * xd[..., 1] + K[0, 2], K[1, 1] * xd[..., 1] + K[1, 2]], -1)
    return uv, vis


def surface_patch(image, disc: BallDisc, size: int, camera: Camera | None = None, extent: float = 1.0):
    """The ball's relative albedo on a fixed grid of the visible hemisphere.

    Returns ``(patch, valid)``, each shape (size, size): patch pixel (i, j) holds the surface at the
    view-frame normal n = (x, y, -sqrt(1 - x^2 - y^2)) with x, y spread over [-extent, extent]; the value is
    I / shading - 1 (the shading model of the fit divided out), valid where the ball fully covers the pixel.
    """
    g = (np.arange(size) + 0.5) / size * 2 - 1
    gx, gy = np.meshgrid(g * extent, g * extent)
    rho2 = gx ** 2 + gy ** 2
    n = np.stack([gx, gy, -np.sqrt(np.clip(1 - rho2, 0, None))], -1)
    uv, vis = normals_to_pixels(n, disc, camera)
    mapx, mapy = uv[..., 0].astype(np.float32), uv[..., 1].astype(np.float32)
    val = cv2.remap(np.asarray(image, np.float32), mapx, mapy, cv2.INTER_LINEAR, borderMode=cv2.BORDER_REPLICATE)
    S = disc.shade(uv)
    valid = vis & (rho2 < 1) & (disc.coverage(uv) > 0.97) & (S > 1.0)
    patch = np.where(valid, val / np.where(S > 1.0, S, 1.0) - 1.0, 0.0)
    return patch.astype(np.float32), valid
