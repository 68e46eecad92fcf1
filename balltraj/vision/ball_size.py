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
place, the per-pixel median of the frames of the flight nearest in time in which the ball is elsewhere
(searched over the whole flight: seen from behind it clears its own patch only tens of frames later; when none
is clear of it, B = 0 and b0 grows a plane b0 + b1 x + b2 y fitted on the patch). The shading and
background coefficients enter linearly and are solved inside (variable projection, Golub & Pereyra
1973); centre, radius, blur length, edge width and light direction by robust least squares (scipy,
soft-L1 loss: seams and panels are outliers to the smooth shading; the analytic Jacobian of the projected
residuals, the projection's own derivative included). A ball over 32 px radius is fitted on every a-th pixel
each way (its edge keeps the samples of an 8 px ball at full resolution). The radius is where the coverage is one half,
whatever the contrast, so neither the threshold nor the shading moves it.
A shadow or contact patch touching the ball is found where it lies (no direction assumed): the arcs of the
silhouette whose outside ring differs from the background are left out and the fit is repeated on the rest
(``edge_fit._foreign_arcs``; tests/vision/test_edge_fit_shadow.py).

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

from ..camera.model import Camera
from .clip import read_frames
from .detect import lens_magnification
from .edge_fit import EdgeFit, fit_edge  # noqa: F401 (EdgeFit: the result type callers of fit_edge get)

NEIGHBOURS = 4  # background frames per observation (median)
# a refined radius this far from the detector's is a fit on something else (a shadow, a figure, a neighbour):
# the detector loses part of the limb, not most of the ball, and does not see a ball twice its size
PLAUSIBLE = (0.7, 2.0)
MIN_REFINED = 5  # refined frames a flight needs before its failed frames are scaled by its own ratio
# the switch: the flights' pixel centres (``uv``, what the flight fit sees) from the edge fit (True) or the
# detector's (False); measured both ways in docs/validation.md ("The ball's centre from the same edge fit"):
# with the exposure times right, the edge fit's gave the smaller launch-speed error on 5 of 6 set-ups
EDGE_CENTRES_FOR_FLIGHT = True

# what each observation's radius is (the ``radius_source`` codes)
REFINED, DETECTOR_SCALED, DETECTOR = 0, 1, 2
SOURCE_WORDS = {REFINED: "edge fit", DETECTOR_SCALED: "detector radius scaled by the flight's ratio",
                DETECTOR: "detector radius"}


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
        local median offset refined - detected (the shading's pull and the detector's bias, which change
        slowly along a flight: ``_local_shift``), or unchanged when too few frames were refined. Pixels of the distorted image.
        The surface reader starts from these (``pipeline_spin.FlightSurfaces``); the flight fit gets them
        only with ``EDGE_CENTRES_FOR_FLIGHT`` (``apply_refinement``; measured both ways in docs/validation.md).
    """

    radius_px: np.ndarray
    radius_sigma_px: np.ndarray
    source: np.ndarray
    detector_radius_px: np.ndarray
    ratio: float
    centre_px: np.ndarray | None = None

    @property
    def n_refined(self) -> int:
        return int((self.source == REFINED).sum())

    def summary(self) -> dict:
        """Counts and the flight's ratio, for the record (plain numbers)."""
        return {"method": "silhouette edge fit" if self.n_refined else "detector",
                "refined": self.n_refined, "scaled": int((self.source == DETECTOR_SCALED).sum()),
                "kept": int((self.source == DETECTOR).sum()),
                "ratio_to_detector": None if not math.isfinite(self.ratio) else round(self.ratio, 4)}


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


def _neighbours(flight, boxes, i, most=NEIGHBOURS, reach=None):
    """Other frames of the flight whose ball lies wholly outside observation i's patch, nearest in time first,
    searched over the whole flight (or ``reach`` frames either side). A ball flying away from the camera (seen
    from behind) crosses its own diameter in the image only every few tens of frames: a short reach left it no
    background, and its fit fell back on a plane through a textured ground."""
    uv = np.asarray(flight.uv, float)
    r = np.nan_to_num(np.asarray(flight.radius_px, float), nan=2.0)
    s = np.nan_to_num(np.asarray(flight.streak_px, float), nan=0.0)
    x0, y0, x1, y1 = boxes[i]
    n = len(uv)
    reach = n if reach is None else reach
    e = 1.6 * r + 0.6 * s + 2  # the ball's reach beyond its detected radius (the dim limb)
    clear = (uv[:, 0] + e < x0) | (uv[:, 0] - e > x1) | (uv[:, 1] + e < y0) | (uv[:, 1] - e > y1)
    d = np.arange(n) - i
    clear &= (d != 0) & (np.abs(d) <= reach)
    j = np.flatnonzero(clear)
    order = np.lexsort((d[j] > 0, np.abs(d[j])))  # nearest first, the earlier frame of a pair first
    return [int(k) for k in j[order[:most]]]


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
        if ok.sum() < MIN_REFINED:  # too few to scale the rest by: one kind of radius for the whole flight
            rad, sig, src = det_f.copy(), np.full(n, math.nan), np.full(n, DETECTOR, int)
            cen = uv.copy()
        elif math.isfinite(ratio):
            spread = 1.4826 * float(np.nanmedian(np.abs(q - ratio)))
            kept = ~ok & np.isfinite(det_f)
            rad[kept] = det_f[kept] * ratio
            sig[kept] = det_f[kept] * spread
            src[kept] = DETECTOR_SCALED
            cen[~ok] = uv[~ok] + _local_shift(cen - uv, ok)[~ok]
        out.append(RadiusRefinement(rad, sig, src, det, ratio, cen))
    return out


def _local_shift(shift, ok, near: int = 9):
    """Per observation, the median shift refined - detected of the ``near`` refined observations nearest to
    it in the flight's order: the shading's pull and the detector's own bias change along a flight (a ball
    that crosses from the ground to the sky is darker than the one and brighter than the other), slowly."""
    idx = np.flatnonzero(ok)
    out = np.zeros_like(shift)
    if not len(idx):
        return out
    for i in range(len(shift)):
        nearest = idx[np.argsort(np.abs(idx - i), kind="stable")[:near]]
        out[i] = np.median(shift[nearest], axis=0)
    return out


def _shift_check(shift, src, k_out: float = 4.0, floor_px: float = 0.5) -> None:
    """In place: a refined frame whose centre lies far from the detector's, moved by the local median shift
    (``_local_shift``), goes back to the detector (``src``). The shift refined - detected is the shading's
    pull toward the lit side plus the detector's bias, slowly changing over a flight, plus the detector's own
    scatter; a fit that lands more than ``k_out`` robust scatters (at least ``floor_px``) off it is a fit on
    something else (a shadow, a figure crossing, the edge of the patch), whatever its radius."""
    ok = src == REFINED
    if ok.sum() < 5:
        return
    d = (shift - _local_shift(shift, ok))[ok]
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


def apply_refinement(flights, refinements, centres: bool | None = None):
    """The flights with their refined radii in ``radius_px`` and, with ``centres`` (default
    ``EDGE_CENTRES_FOR_FLIGHT``), the edge fit's centres in ``uv`` (TrackedFlight is frozen: copies)."""
    centres = EDGE_CENTRES_FOR_FLIGHT if centres is None else centres
    return [replace(f, radius_px=r.radius_px, uv=r.centre_px if centres and r.centre_px is not None else f.uv)
            for f, r in zip(flights, refinements)]
