"""The ball's apparent radius in each flight frame, refined from its silhouette edge.

The detector's radius (second moments of a thresholded difference, ``detect.py``) loses the dim,
shaded limb of a small ball and shrinks with the threshold: on independently rendered clips it was
10-26 % small (docs/validation.md, one camera). With one camera that radius carries the depth, so
after tracking every observation is measured again at full resolution against the background:

    I(x) = B(x) (1 - C(x)) + C(x) (a0 + a1 nx + a2 ny + a3 nz) + b0 (1 - C(x))

C is the ball's coverage: a disc of radius r centred at c + s beta (s spread over [-1/2, 1/2], beta
the motion blur along the flight's image direction) with an error-function edge of width sigma
(pixel integration, lens and codec blur); n the sphere normal of the orthographic view, so that the
inside is any smooth (Lambertian-like, linear in the normal) shading; B the background at that
place, the per-pixel median of nearby frames of the flight in which the ball is elsewhere (when none
is clear of it, B = 0 and b0 grows a plane b0 + b1 x + b2 y fitted on the patch). The shading and
background coefficients enter linearly and are solved inside (variable projection, Golub & Pereyra
1973); centre, radius, blur length, edge width and light direction by robust least squares (scipy,
soft-L1 loss: seams and panels are outliers to the smooth shading; the analytic Jacobian of the projected
residuals, the projection's own derivative included). A ball over 32 px radius is fitted on every a-th pixel
each way (its edge keeps the samples of an 8 px ball at full resolution). The radius is where the coverage is one half,
whatever the contrast, so neither the threshold nor the shading moves it.

Each radius gets a one-sigma from the fit's covariance (residual scale times the Jacobian), and is
divided by the lens's local magnification (``detect.lens_magnification``) so that it is f R / depth
as the image fit models it. Where the fit fails or is implausible the detector's radius is kept,
scaled by the flight's own median ratio refined / detected when enough frames were refined (else
unscaled), and marked.

References
----------
Golub & Pereyra 1973, SIAM J. Numer. Anal. 10(2):413-432 (variable projection).
Horn 1986, *Robot Vision*, ch. 10 (shading of a Lambertian sphere: linear in the normal where lit).
"""
from __future__ import annotations

import math
from dataclasses import dataclass, replace

import numpy as np
from scipy.optimize import least_squares
from scipy.special import erfc

from ..camera.model import Camera
from .clip import read_frames
from .detect import lens_magnification

_BLUR_SAMPLES = 5
NEIGHBOURS = 4  # background frames per observation (median)
# a refined radius this far from the detector's is a fit on something else (a shadow, a figure, a neighbour):
# the detector loses part of the limb, not most of the ball, and does not see a ball twice its size
PLAUSIBLE = (0.7, 2.0)
MIN_REFINED = 5  # refined frames a flight needs before its failed frames are scaled by its own ratio

# what each observation's radius is (the ``radius_source`` codes)
REFINED, DETECTOR_SCALED, DETECTOR = 0, 1, 2
SOURCE_WORDS = {REFINED: "edge fit", DETECTOR_SCALED: "detector radius scaled by the flight's ratio",
                DETECTOR: "detector radius"}


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


@dataclass(frozen=True)
class RadiusRefinement:
    """The refined radii of one flight.

    Attributes
    ----------
    radius_px : ndarray, shape (N,) [px]
        Apparent radius f R / depth (the lens's local magnification divided out).
    radius_sigma_px : ndarray, shape (N,) [px]
        One-sigma of each radius (from the edge fit; for kept detector radii the flight's scatter of
        refined / detected times the detected radius, or NaN when nothing was refined).
    source : ndarray of int, shape (N,)
        REFINED, DETECTOR_SCALED or DETECTOR (``SOURCE_WORDS``).
    detector_radius_px : ndarray, shape (N,) [px]
        The tracker's radius, unchanged.
    ratio : float
        Median refined / detected radius of the flight (NaN when none was refined).
    centre_px : ndarray, shape (N, 2) [px], optional
        The silhouette's centre (the middle of its blur segment: the ball's mean place over the
        exposure) where the edge fit was kept; elsewhere the detector's centre moved by the flight's
        median offset refined - detected (the shading's pull, which the light keeps nearly constant
        over a flight), or unchanged when too few frames were refined. Pixels of the distorted image.
        The surface reader starts from these (``pipeline_spin.FlightSurfaces``); the flight fit keeps the
        detector's centres (measured both ways in docs/validation.md: near the ground the ball's shadow
        pulls the edge fit, which moved the launch more than the shading's pull did).
    centre_offset_px : ndarray, shape (2,) [px], optional
        That median offset (NaN when too few frames were refined).
    """

    radius_px: np.ndarray
    radius_sigma_px: np.ndarray
    source: np.ndarray
    detector_radius_px: np.ndarray
    ratio: float
    centre_px: np.ndarray | None = None
    centre_offset_px: np.ndarray | None = None

    @property
    def n_refined(self) -> int:
        return int((self.source == REFINED).sum())

    def summary(self) -> dict:
        """Counts and the flight's ratio, for the record (plain numbers)."""
        return {"method": "silhouette edge fit" if self.n_refined else "detector",
                "refined": self.n_refined, "scaled": int((self.source == DETECTOR_SCALED).sum()),
                "kept": int((self.source == DETECTOR).sum()),
                "ratio_to_detector": None if not math.isfinite(self.ratio) else round(self.ratio, 4)}


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
             start: EdgeFit | None = None) -> EdgeFit:
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
        r_area = math.sqrt(float(((dev > 3 * sd) & near).sum()) / math.pi)
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
    try:
        sol = least_squares(model.resid, q0, jac=model.jac, bounds=(lo, hi), loss="soft_l1", f_scale=2.0 * noise0,
                            x_scale=[1, 1, 1, 1, 0.2, 0.2, 0.2], xtol=1e-4, ftol=1e-4, max_nfev=40)
    except (np.linalg.LinAlgError, ValueError) as exc:
        return EdgeFit(c0, r0, math.nan, 0.0, 0.6, 0.0, math.nan, False, f"edge fit failed ({exc})")
    q = sol.x
    A, target, coef = model.design(q)
    res = target - A @ coef
    noise = 1.4826 * float(np.median(np.abs(res)))
    ncoef = A.shape[1]
    mean_in = float(coef[-2] + 0.5 * coef[-1])  # about the mean brightness of the shaded disc
    contrast = abs(mean_in - (float(coef[0]) if B is None else float(coef[0]) + float(np.median(B))))
    J = sol.jac
    dof = max(len(res) - len(q) - ncoef, 1)
    s2 = float(res @ res) / dof
    try:
        cov = np.linalg.inv(J.T @ J) * s2
        r_sig = math.sqrt(max(float(cov[2, 2]), 0.0))
    except np.linalg.LinAlgError:
        r_sig = math.nan
    fit = EdgeFit(q[:2].copy(), float(q[2]), r_sig, float(q[3]), float(q[4]), contrast, noise, True, "",
                  _light_angles(float(q[5]), float(q[6])))
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


def _windows(flight, width, height):
    """Patch box (x0, y0, x1, y1) per observation: about 2.2 detected radii plus the streak around it."""
    r = np.nan_to_num(np.asarray(flight.radius_px, float), nan=2.0)
    s = np.nan_to_num(np.asarray(flight.streak_px, float), nan=0.0)
    half = np.ceil(2.0 * np.maximum(r, 1.5) + 0.6 * s + 3).astype(int)
    u, v = np.asarray(flight.uv, float).T
    x0, y0 = np.floor(u).astype(int) - half, np.floor(v).astype(int) - half
    x1, y1 = x0 + 2 * half + 2, y0 + 2 * half + 2
    inside = (x0 >= 0) & (y0 >= 0) & (x1 <= width) & (y1 <= height)
    return np.stack([x0, y0, x1, y1], 1), inside


def _neighbours(flight, boxes, i, most=NEIGHBOURS, reach=16):
    """Other frames of the flight whose ball lies wholly outside observation i's patch (nearest in time)."""
    uv = np.asarray(flight.uv, float)
    r = np.nan_to_num(np.asarray(flight.radius_px, float), nan=2.0)
    s = np.nan_to_num(np.asarray(flight.streak_px, float), nan=0.0)
    x0, y0, x1, y1 = boxes[i]
    out = []
    n = len(uv)
    for d in sorted(range(-reach, reach + 1), key=abs):
        j = i + d
        if d == 0 or not 0 <= j < n:
            continue
        e = 1.6 * r[j] + 0.6 * s[j] + 2  # the ball's reach beyond its detected radius (the dim limb)
        if uv[j, 0] + e < x0 or uv[j, 0] - e > x1 or uv[j, 1] + e < y0 or uv[j, 1] - e > y1:
            out.append(j)
            if len(out) == most:
                break
    return out


def refine_flight_radii(path, flights, camera: Camera | None, *, start_s: float = 0.0, end_s: float | None = None,
                        capture_fps: float | None = None, view_moved: bool = False,
                        progress=None, total_frames: int | None = None) -> list[RadiusRefinement]:
    """Refined radii of every tracked flight of a clip (one more decoding pass over the flights' frames).

    Parameters
    ----------
    path : the clip
    flights : list of TrackedFlight (``frame``, ``uv``, ``radius_px``, ``streak_px``)
    camera : Camera or None
        Its lens's local magnification is divided out of each radius.
    view_moved : bool
        The view moved during the clip: other frames do not show the same background, so each patch's
        own plane is used instead.
    progress : callable, optional
        Called as ``progress(frame_index, total_frames)`` as the fits go through the flights' frames
        (the slow part of this second pass over the clip).

    Returns
    -------
    list of RadiusRefinement, one per flight.
    """
    if not flights:
        return []
    if camera is not None:
        w, h = camera.image_size
    else:  # the image size from the first decoded frame
        for _, _, frame in read_frames(path, start_s=start_s, end_s=end_s, capture_fps=capture_fps, grey=True):
            h, w = frame.shape[:2]
            break
    need: dict[int, list] = {}  # frame index -> [(flight, observation, role)]
    patches: dict[tuple[int, int], np.ndarray] = {}
    bgs: dict[tuple[int, int], list] = {}
    boxes_of = {}
    for fi, f in enumerate(flights):
        boxes, inside = _windows(f, w, h)
        boxes_of[fi] = boxes
        frames = np.asarray(f.frame, int)
        for i in np.flatnonzero(inside):
            need.setdefault(int(frames[i]), []).append((fi, i, "ball"))
            for j in ([] if view_moved else _neighbours(f, boxes, i)):
                need.setdefault(int(frames[j]), []).append((fi, i, "bg"))
    if need:
        last = max(need)
        for k, _, frame in read_frames(path, start_s=start_s, end_s=end_s, capture_fps=capture_fps, grey=True):
            if k in need:
                for fi, i, role in need[k]:
                    x0, y0, x1, y1 = boxes_of[fi][i]
                    p = np.asarray(frame[y0:y1, x0:x1], np.float32)
                    if role == "ball":
                        patches[(fi, i)] = p
                    else:
                        bgs.setdefault((fi, i), []).append(p)
            if k >= last:
                break
    out = []
    for fi, f in enumerate(flights):
        det = np.asarray(f.radius_px, float)
        n = len(det)
        uv = np.asarray(f.uv, float)
        mag_det = np.ones(n) if camera is None or n == 0 else lens_magnification(camera, uv)
        det_f = det / mag_det  # the detector's radius as f R / depth
        rad, sig = det_f.copy(), np.full(n, math.nan)
        src = np.full(n, DETECTOR, int)
        cen = uv.copy()
        if n:
            vel = np.gradient(uv, axis=0) if n > 1 else np.zeros((n, 2))
            for i in range(n):
                if progress is not None and i % 8 == 0:  # the fits are the slow part
                    progress(int(f.frame[i]), total_frames)
                p = patches.get((fi, i))
                if p is None or not math.isfinite(float(det[i])):
                    continue
                bl = bgs.get((fi, i), [])
                bg = np.median(np.stack(bl), 0) if len(bl) >= 2 else None
                x0, y0 = boxes_of[fi][i][:2]
                streak = float(np.nan_to_num(f.streak_px[i]))
                # started a little above the detector's radius, which loses the dim limb (a start value only:
                # warm starts from the previous frame were tried and made the radius depend on the order)
                r_det = max(float(det[i]), 1.5)
                fit = fit_edge(p, bg, uv[i] - [x0, y0], 1.15 * r_det,
                               direction=vel[i] if np.hypot(*vel[i]) > 1e-6 else (1.0, 0.0), blur_guess=streak)
                if not fit.ok or not PLAUSIBLE[0] * r_det <= fit.radius_px <= PLAUSIBLE[1] * r_det + 1.0:
                    continue
                mag = 1.0 if camera is None else float(lens_magnification(camera, fit.centre_px + [x0, y0]))
                rad[i], sig[i], src[i] = fit.radius_px / mag, fit.radius_sigma_px / mag, REFINED
                cen[i] = fit.centre_px + [x0, y0]
        _trend_check(np.asarray(f.t, float), rad, sig, src)
        _shift_check(cen - uv, src)
        ok = src == REFINED
        rad[~ok], sig[~ok] = det_f[~ok], math.nan
        cen[~ok] = uv[~ok]
        ratio = math.nan
        if ok.any():
            q = rad[ok] / np.where(det_f[ok] > 0, det_f[ok], np.nan)
            ratio = float(np.nanmedian(q))
        offset = np.full(2, math.nan)
        if ok.sum() < MIN_REFINED:  # too few to scale the rest by: one kind of radius for the whole flight
            rad, sig, src = det_f.copy(), np.full(n, math.nan), np.full(n, DETECTOR, int)
            cen = uv.copy()
        elif math.isfinite(ratio):
            spread = 1.4826 * float(np.nanmedian(np.abs(q - ratio)))
            kept = ~ok & np.isfinite(det_f)
            rad[kept] = det_f[kept] * ratio
            sig[kept] = det_f[kept] * spread
            src[kept] = DETECTOR_SCALED
            offset = np.median(cen[ok] - uv[ok], axis=0)
            cen[~ok] = uv[~ok] + offset
        out.append(RadiusRefinement(rad, sig, src, det, ratio, cen, offset))
    return out


def _shift_check(shift, src, k_out: float = 4.0, floor_px: float = 0.5) -> None:
    """In place: a refined frame whose centre lies far from the detector's, moved by the flight's median
    shift, goes back to the detector (``src``). The shift refined - detected is the shading's pull toward
    the lit side, nearly constant over a flight, plus the detector's own scatter; a fit that lands more than
    ``k_out`` robust scatters (at least ``floor_px``) off it is a fit on something else (a shadow, a figure
    crossing, the edge of the patch), whatever its radius."""
    ok = src == REFINED
    if ok.sum() < 5:
        return
    d = shift[ok] - np.median(shift[ok], axis=0)
    dist = np.hypot(d[:, 0], d[:, 1])
    scatter = float(np.median(dist)) / 1.1774  # per axis: the median of a 2D normal's norm is 1.1774 sigma
    idx = np.flatnonzero(ok)
    src[idx[dist > k_out * max(scatter, floor_px)]] = DETECTOR


def _trend_check(t, rad, sig, src, k_out: float = 4.0) -> None:
    """In place: each refined radius's sigma is at least the flight's own scatter about a smooth trend
    (1 / r, proportional to depth, as a quadratic in time: robust, two passes), and a radius more than
    ``k_out`` of those scatters off the trend goes back to the detector's. The edge fit's own sigma
    (residuals taken as independent) is several times smaller than this scatter (measured on rendered
    clips, docs/validation.md): pixels of one edge share the codec's and the blur's errors."""
    ok = (src == REFINED) & np.isfinite(rad) & (rad > 0)
    if ok.sum() < 8:
        return
    tt = t[ok] - t[ok].mean()
    y = 1.0 / rad[ok]
    w = np.ones(len(y), bool)
    scatter = math.nan
    for _ in range(2):
        c = np.polyfit(tt[w], y[w], 2)
        res = rad[ok] - 1.0 / np.polyval(c, tt)
        scatter = 1.4826 * float(np.median(np.abs(res[w])))
        w = np.abs(res) <= k_out * max(scatter, 0.05)
    idx = np.flatnonzero(ok)
    sig[idx] = np.fmax(sig[idx], scatter)
    bad = idx[~w]
    src[bad] = DETECTOR


def apply_refinement(flights, refinements):
    """The flights with their refined radii in ``radius_px`` (TrackedFlight is frozen: copies)."""
    return [replace(f, radius_px=r.radius_px) for f, r in zip(flights, refinements)]
