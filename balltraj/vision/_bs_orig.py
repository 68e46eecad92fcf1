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
1973); centre, radius, blur length and edge width by robust least squares (scipy, soft-L1 loss:
seams and panels are outliers to the smooth shading). The radius is where the coverage is one half,
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
    """

    radius_px: np.ndarray
    radius_sigma_px: np.ndarray
    source: np.ndarray
    detector_radius_px: np.ndarray
    ratio: float

    @property
    def n_refined(self) -> int:
        return int((self.source == REFINED).sum())

    def summary(self) -> dict:
        """Counts and the flight's ratio, for the record (plain numbers)."""
        return {"method": "silhouette edge fit" if self.n_refined else "detector",
                "refined": self.n_refined, "scaled": int((self.source == DETECTOR_SCALED).sum()),
                "kept": int((self.source == DETECTOR).sum()),
                "ratio_to_detector": None if not math.isfinite(self.ratio) else round(self.ratio, 4)}


def _coverage(X, c, r, beta, sig):
    s = (np.arange(_BLUR_SAMPLES) + 0.5) / _BLUR_SAMPLES - 0.5
    dx = (X[:, 0][None] - (c[0] + s[:, None] * beta[0])) / r
    dy = (X[:, 1][None] - (c[1] + s[:, None] * beta[1])) / r
    d = np.sqrt(dx * dx + dy * dy)
    cov_j = 0.5 * erfc((d - 1.0) * (r / (math.sqrt(2) * sig)))
    return cov_j.mean(0), cov_j, dx, dy


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
    X, z = X[keep], z[keep]
    B = None if B is None else B[keep]
    rel = (X - X.mean(0)) / max(r0, 1.0)

    def design(q):
        cx, cy, r, L, sig, th, ph = q
        cov, cov_j, dx, dy = _coverage(X, (cx, cy), r, L * e, sig)
        out = 1 - cov
        nz = np.sqrt(np.clip(1 - dx * dx - dy * dy, 0, None))
        light = np.array([math.sin(th) * math.cos(ph), math.sin(th) * math.sin(ph), math.cos(th)])
        lit = np.clip(dx * light[0] + dy * light[1] + nz * light[2], 0, None)
        inside = [cov, (cov_j * lit).mean(0)]
        cols = [out] + ([] if B is not None else [out * rel[:, 0], out * rel[:, 1]]) + inside
        target = z if B is None else z - B * out
        return np.stack(cols, 1), target

    def resid(q):
        A, target = design(q)
        coef = np.linalg.lstsq(A, target, rcond=None)[0]
        return target - A @ coef

    if start is not None and start.ok:
        q0 = np.array([c0[0], c0[1], r0, start.blur_px, start.edge_px, *start.light_angles])
    else:
        th0, ph0 = _light_guess(X, z if B is None else z - B, c0, r0)
        q0 = np.array([c0[0], c0[1], r0, blur_guess, 0.6, th0, ph0])
    lo = np.array([c0[0] - 0.6 * r0 - 2, c0[1] - 0.6 * r0 - 2, 0.5 * r0, 0.0, 0.25, 0.0, -4 * math.pi])
    hi = np.array([c0[0] + 0.6 * r0 + 2, c0[1] + 0.6 * r0 + 2, 2.0 * r0 + 1, 3.0 * r0 + 4, 2.0, 0.6 * math.pi,
                   4 * math.pi])
    q0 = np.clip(q0, lo + 1e-6, hi - 1e-6)
    if B is None:
        border = np.concatenate([z_img[0], z_img[-1], z_img[:, 0], z_img[:, -1]])
        noise0 = max(1.0, 1.4826 * float(np.median(np.abs(border - np.median(border)))))
    else:
        d = z - B
        noise0 = max(1.0, 1.4826 * float(np.median(np.abs(d - np.median(d)))))
    try:
        sol = least_squares(resid, q0, bounds=(lo, hi), loss="soft_l1", f_scale=2.0 * noise0, x_scale=[1, 1, 1, 1, 0.2, 0.3, 0.5],
                            diff_step=1e-3, xtol=1e-4, ftol=1e-4, max_nfev=40)
    except (np.linalg.LinAlgError, ValueError) as exc:
        return EdgeFit(c0, r0, math.nan, 0.0, 0.6, 0.0, math.nan, False, f"edge fit failed ({exc})")
    q = sol.x
    A, target = design(q)
    coef = np.linalg.lstsq(A, target, rcond=None)[0]
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
                  (float(q[5]), float(q[6])))
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
        _trend_check(np.asarray(f.t, float), rad, sig, src)
        ok = src == REFINED
        rad[~ok], sig[~ok] = det_f[~ok], math.nan
        ratio = math.nan
        if ok.any():
            q = rad[ok] / np.where(det_f[ok] > 0, det_f[ok], np.nan)
            ratio = float(np.nanmedian(q))
        if ok.sum() < MIN_REFINED:  # too few to scale the rest by: one kind of radius for the whole flight
            rad, sig, src = det_f.copy(), np.full(n, math.nan), np.full(n, DETECTOR, int)
        elif math.isfinite(ratio):
            spread = 1.4826 * float(np.nanmedian(np.abs(q - ratio)))
            kept = ~ok & np.isfinite(det_f)
            rad[kept] = det_f[kept] * ratio
            sig[kept] = det_f[kept] * spread
            src[kept] = DETECTOR_SCALED
        out.append(RadiusRefinement(rad, sig, src, det, ratio))
    return out


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
