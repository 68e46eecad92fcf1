"""Registering the ball's surface between frames on the sphere (helpers of :mod:`.surface_spin`).

A frame's surface is its patch (:func:`balltraj.vision.surface_ball.surface_patch`) band-passed at two
scales; a rotation R (camera frame) is scored by the normalised cross-correlation of the surface at
points n of one frame and at R n of the other (Lewis 1995, "Fast normalized cross-correlation",
Vision Interface, for the score).
"""
from __future__ import annotations

import math

import cv2
import numpy as np

from ..camera.model import rotation_vector
from .surface_ball import BallDisc, surface_patch, view_rotation

PATCH = 48  # patch size [patch px] over normals -1..1
_FINE_NORMAL_SIGMA = 0.025  # smoothing of the fine patches [normal units]
_COARSE_NORMAL_SIGMA = 0.08
_LOWPASS_NORMAL_SIGMA = 0.3  # removes what the shading model left (slow, fixed in the camera frame)
_RHO_MAX = 0.82  # points used: up to 55 degrees from the view direction


def rotation_matrices(rotvecs) -> np.ndarray:
    """Rodrigues' formula for a batch of rotation vectors (B, 3) -> (B, 3, 3)."""
    r = np.asarray(rotvecs, float).reshape(-1, 3)
    th = np.linalg.norm(r, axis=1)
    k = r / np.where(th > 1e-12, th, 1.0)[:, None]
    K = np.zeros((len(r), 3, 3))
    K[:, 0, 1], K[:, 0, 2], K[:, 1, 2] = -k[:, 2], k[:, 1], -k[:, 0]
    K[:, 1, 0], K[:, 2, 0], K[:, 2, 1] = k[:, 2], -k[:, 1], k[:, 0]
    s, c = np.sin(th)[:, None, None], (1 - np.cos(th))[:, None, None]
    return np.eye(3) + s * K + c * (K @ K)


def _smooth(T, valid, sigma):
    m = valid.astype(np.float32)
    num = cv2.GaussianBlur(T * m, (0, 0), sigma)
    den = cv2.GaussianBlur(m, (0, 0), sigma)
    return np.where(den > 1e-3, num / np.maximum(den, 1e-3), 0.0).astype(np.float32)


class SurfaceFrame:
    """One frame's band-passed surface at two scales, its sample points and its view rotation."""

    def __init__(self, image, disc: BallDisc, camera, t):
        self.t, self.disc = t, disc
        T, valid = surface_patch(image, disc, PATCH, camera)
        px = 2.0 / PATCH  # normal units per patch pixel
        fine_sigma = max(_FINE_NORMAL_SIGMA / px, 0.5 / (disc.radius_px * px), 0.6)
        low = _smooth(T, valid, _LOWPASS_NORMAL_SIGMA / px)
        self.fine = _smooth(T, valid, fine_sigma) - low
        self.coarse = _smooth(T, valid, _COARSE_NORMAL_SIGMA / px) - low
        self.valid = cv2.erode(valid.astype(np.uint8), np.ones((3, 3), np.uint8)).astype(np.float32)
        g = (np.arange(PATCH) + 0.5) / PATCH * 2 - 1
        gx, gy = np.meshgrid(g, g)
        use = (gx ** 2 + gy ** 2 < _RHO_MAX ** 2) & (self.valid > 0)
        self.n_view = np.stack([gx[use], gy[use], -np.sqrt(1 - gx[use] ** 2 - gy[use] ** 2)], 1)
        self.idx = np.nonzero(use)
        self.V = view_rotation(disc, camera)
        band = self.fine[use]
        self.texture = float(np.std(band)) if band.size else 0.0
        self.n_cam = self.n_view @ self.V  # V^T n

    def values(self, level, sel):
        img = self.fine if level == "fine" else self.coarse
        return img[self.idx][sel]


def pair_scores(fa: SurfaceFrame, fb: SurfaceFrame, R, level: str, sel) -> np.ndarray:
    """NCC (B,) of frame a's surface at points ``sel`` against frame b's at R n, for rotations R (B, 3, 3),
    and the number of points seen in both (0 where too few to compare; the NCC is then -1)."""
    n = fa.n_cam[sel]
    m = np.matmul(fb.V @ R, n.T)  # (B, 3, M) in b's view frame
    j = ((m[:, 0] + 1) * 0.5 * PATCH - 0.5).astype(np.float32)
    i = ((m[:, 1] + 1) * 0.5 * PATCH - 0.5).astype(np.float32)
    img = fb.fine if level == "fine" else fb.coarse
    vb = cv2.remap(img, j, i, cv2.INTER_LINEAR, borderMode=cv2.BORDER_CONSTANT, borderValue=0)
    ok = cv2.remap(fb.valid, j, i, cv2.INTER_LINEAR, borderMode=cv2.BORDER_CONSTANT, borderValue=0)
    w = ((ok > 0.999) & (m[:, 2] < -0.45)).astype(np.float64)
    va = fa.values(level, sel)[None, :].astype(np.float64)
    nw = w.sum(1)
    safe = np.maximum(nw, 1)
    ma, mb = (w * va).sum(1) / safe, (w * vb).sum(1) / safe
    da, db = (va - ma[:, None]) * w, (vb - mb[:, None]) * w
    den = np.sqrt((da * da).sum(1) * (db * db).sum(1))
    ncc = np.where(den > 0, (da * db).sum(1) / np.maximum(den, 1e-12), -1.0)
    enough = nw >= _least_overlap(len(n))
    return np.where(enough, ncc, -1.0), np.where(enough, nw, 0.0)


def _least_overlap(n_points: int) -> float:
    """The fewest points seen in both frames that a comparison of ``n_points`` sample points needs."""
    return max(25, 0.25 * n_points)


def joint_scores(frames, pairs, omegas, level, sels, chunk=4000, all_pairs=False):
    """NCC over ``pairs`` (weighted by the overlap) for constant spins ``omegas`` (B, 3) [rad/s].

    Pairs that do not overlap under a spin are left out, unless ``all_pairs``: then such a pair counts
    as no match (NCC 0) with the least overlap a comparison needs. Use it where the pairs are alike
    (the same frame gap), so a constant spin must map every one of them: otherwise a spin that keeps
    one pair barely overlapping scores on that pair's few points alone (where a chance match of a
    smoothed surface is easy) as high as the ball's actual spin does on all of them."""
    out = np.zeros(len(omegas))
    for s in range(0, len(omegas), chunk):
        om = omegas[s:s + chunk]
        acc, wsum = np.zeros(len(om)), np.zeros(len(om))
        for (a, b), sel in zip(pairs, sels):
            R = rotation_matrices(om * (frames[b].t - frames[a].t))
            ncc, nw = pair_scores(frames[a], frames[b], R, level, sel)
            if all_pairs:
                missing = nw == 0
                ncc, nw = np.where(missing, 0.0, ncc), np.where(missing, _least_overlap(len(sel)), nw)
            acc += ncc * nw
            wsum += nw
        out[s:s + chunk] = np.where(wsum > 0, acc / np.maximum(wsum, 1e-9), -1.0)
    return out


def local_grid(score, centre, steps):
    """Shrinking 5x5x5 grid search around ``centre`` (3,); ``score`` maps (B, 3) -> (B,)."""
    o = np.arange(-2, 3)
    grid = np.stack(np.meshgrid(o, o, o, indexing="ij"), -1).reshape(-1, 3).astype(float)
    best, val = np.asarray(centre, float), -np.inf
    for h in steps:
        cand = best + h * grid
        sc = score(cand)
        i = int(np.argmax(sc))
        best, val = cand[i], float(sc[i])
    return best, val


def subsample(frame, n_max, rng):
    n = len(frame.n_view)
    return np.sort(rng.choice(n, n_max, replace=False)) if n > n_max else np.arange(n)


def unwrap(R, phi_pred):
    """Rotation vector of R closest to the predicted one (R's angle plus whole turns)."""
    v = rotation_vector(R)
    th = np.linalg.norm(v)
    a = v / th if th > 1e-12 else (phi_pred / max(np.linalg.norm(phi_pred), 1e-12))
    opts = [a * (th + 2 * math.pi * k) for k in (-1, 0, 1)]
    return min(opts, key=lambda x: np.linalg.norm(x - phi_pred))


