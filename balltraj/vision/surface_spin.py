"""The full spin vector (gyro part included) from the ball's surface in a high-speed clip.

Per frame the ball's disc is fitted as a shaded, blurred sphere (:mod:`balltraj.vision.surface_ball`)
and its surface is resampled onto a fixed grid of the visible hemisphere (the patch: relative albedo,
the shading divided out, undistorted through the camera model when one is given). Between frames k
and k + g the surface turns by R = exp(omega dt): a point n of frame k is seen at R n in frame k + g.
The spin omega is found by registering the surfaces on the sphere (normalised cross-correlation of
the band-passed albedo at n in frame k and at R n in frame k + g):

1. a coarse grid over all rotations per frame up to half a turn, on smoothed patches, gap 1;
2. the best few candidates refined on every pair of frames 1, 2 and 3 apart at once (a constant
   spin must map all of them; a false match of a symmetric texture does not);
3. every pair refined on its own from that spin, giving one spin estimate per pair, and a robust
   (Huber) weighted mean of them: one constant spin vector over the window (optionally a decay);
   the covariance from the scatter of the independent gap-1 estimates;
4. the answer is withheld, with a reason, when the ball is too small, shows no texture, the surface
   does not match between frames, the frame gaps disagree, the turn per frame is near half a turn
   (aliasing), or the spin is too uncertain.

References
----------
Tamaki et al. 2012, ICASSP (spin of a table-tennis ball by registering its surface between frames);
Zhang et al. 2015, IEEE Trans. Instrum. Meas. 64(8) (spin from the ball's markings);
Huber 1964, Ann. Math. Stat. 35(1):73-101 (robust weights).
"""
from __future__ import annotations

import math
from dataclasses import dataclass, field

import cv2
import numpy as np

from ..camera.model import Camera, rotation_vector
from .surface_ball import BallDisc, fit_ball_disc, rough_ball, surface_patch, view_rotation

RPM_PER_RADPS = 60 / (2 * math.pi)
PATCH = 48  # patch size [patch px] over normals -1..1
_FINE_NORMAL_SIGMA = 0.025  # smoothing of the fine patches [normal units]
_COARSE_NORMAL_SIGMA = 0.08
_LOWPASS_NORMAL_SIGMA = 0.3  # removes what the shading model left (slow, fixed in the camera frame)
_RHO_MAX = 0.82  # points used: up to 55 degrees from the view direction


@dataclass(frozen=True)
class SurfaceSpin:
    """The spin read from the ball's surface, or why it could not be read.

    Attributes
    ----------
    readable : bool
    reason : str
        Why the spin could not be read (empty when readable).
    spin_radps : ndarray, shape (3,) or None [rad/s]
        Spin vector (right-hand rule) in ``frame``.
    covariance : ndarray, shape (3, 3) or None [rad^2/s^2]
    frame : str
        "world" when a camera was given, else "camera" (x right, y down, z into the scene).
    match : float
        Mean normalised cross-correlation of the registered surfaces (1 is a perfect match).
    gaps : dict
        Per frame gap (1, 2, 3): the spin rate [rpm] from that gap alone and its distance from the
        combined spin in sigmas.
    decay_s, decay_sigma_s : float or None [s]
        Spin decay time and its sigma (only when asked for and measurable).
    """

    readable: bool
    reason: str = ""
    spin_radps: np.ndarray | None = None
    covariance: np.ndarray | None = None
    frame: str = "camera"
    match: float = math.nan
    gaps: dict = field(default_factory=dict)
    n_frames: int = 0
    n_pairs: int = 0
    radius_px: float = math.nan
    decay_s: float | None = None
    decay_sigma_s: float | None = None
    discs: tuple = ()

    @property
    def rate_rpm(self) -> float:
        return float(np.linalg.norm(self.spin_radps)) * RPM_PER_RADPS if self.spin_radps is not None else math.nan

    @property
    def axis(self) -> np.ndarray | None:
        if self.spin_radps is None or np.linalg.norm(self.spin_radps) == 0:
            return None
        return self.spin_radps / np.linalg.norm(self.spin_radps)

    @property
    def rate_sigma_rpm(self) -> float:
        a = self.axis
        return math.sqrt(max(0.0, float(a @ self.covariance @ a))) * RPM_PER_RADPS if a is not None else math.nan

    @property
    def axis_sigma_deg(self) -> float:
        """One-sigma cone of the axis (root of the covariance across the axis over the rate) [deg]."""
        a = self.axis
        if a is None:
            return math.nan
        P = np.eye(3) - np.outer(a, a)
        across = float(np.trace(P @ self.covariance @ P)) / 2
        return math.degrees(math.sqrt(max(across, 0.0)) / float(np.linalg.norm(self.spin_radps)))

    def to_dict(self) -> dict:
        """JSON-ready summary (SI and rpm)."""
        d = {"readable": self.readable, "reason": self.reason, "frame": self.frame, "n_frames": self.n_frames,
             "n_pairs": self.n_pairs, "radius_px": _f(self.radius_px), "match": _f(self.match), "gaps": self.gaps}
        if self.readable:
            d.update({"spin_radps": self.spin_radps.tolist(), "covariance": self.covariance.tolist(),
                      "rate_rpm": self.rate_rpm, "rate_sigma_rpm": self.rate_sigma_rpm,
                      "axis": self.axis.tolist() if self.axis is not None else None,
                      "axis_sigma_deg": _f(self.axis_sigma_deg), "decay_s": self.decay_s,
                      "decay_sigma_s": self.decay_sigma_s})
        return d


def _f(x):
    return None if x is None or not math.isfinite(x) else float(x)


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


def _pair_scores(fa: SurfaceFrame, fb: SurfaceFrame, R, level: str, sel) -> np.ndarray:
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
    enough = nw >= max(25, 0.25 * len(n))
    return np.where(enough, ncc, -1.0), np.where(enough, nw, 0.0)


def _joint_scores(frames, pairs, omegas, level, sels, chunk=4000):
    """NCC over ``pairs`` (weighted by the overlap; pairs that do not overlap left out) for constant spins
    ``omegas`` (B, 3) [rad/s]."""
    out = np.zeros(len(omegas))
    for s in range(0, len(omegas), chunk):
        om = omegas[s:s + chunk]
        acc, wsum = np.zeros(len(om)), np.zeros(len(om))
        for (a, b), sel in zip(pairs, sels):
            R = rotation_matrices(om * (frames[b].t - frames[a].t))
            ncc, nw = _pair_scores(frames[a], frames[b], R, level, sel)
            acc += ncc * nw
            wsum += nw
        out[s:s + chunk] = np.where(wsum > 0, acc / np.maximum(wsum, 1e-9), -1.0)
    return out


def _local_grid(score, centre, steps):
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


def _sel(frame, n_max, rng):
    n = len(frame.n_view)
    return np.sort(rng.choice(n, n_max, replace=False)) if n > n_max else np.arange(n)


def _unwrap(R, phi_pred):
    """Rotation vector of R closest to the predicted one (R's angle plus whole turns)."""
    v = rotation_vector(R)
    th = np.linalg.norm(v)
    a = v / th if th > 1e-12 else (phi_pred / max(np.linalg.norm(phi_pred), 1e-12))
    opts = [a * (th + 2 * math.pi * k) for k in (-1, 0, 1)]
    return min(opts, key=lambda x: np.linalg.norm(x - phi_pred))


def _no(reason, **kw) -> SurfaceSpin:
    return SurfaceSpin(readable=False, reason=reason, **kw)


def estimate_surface_spin(frames, times, centres=None, radius_px=None, *, camera: Camera | None = None,
                          blur_px=None, exposure_s: float | None = None, max_rate_rpm: float | None = None,
                          min_radius_px: float = 6.0, max_gap: int = 3, fit_decay: bool = False,
                          seed: int = 0) -> SurfaceSpin:
    """Read one constant spin vector from the ball's surface over a short window of frames.

    Parameters
    ----------
    frames : sequence of ndarray, each shape (H, W)
        Grey frames (full frames when ``camera`` is given: pixel coordinates must be the camera's).
    times : array_like, shape (N,) [s]
        Frame times (mid-exposure).
    centres : array_like, shape (N, 2) [px], optional
        Rough ball centres (e.g. from the tracker); found in each frame when omitted.
    radius_px : float or array_like, shape (N,) [px], optional
        Rough apparent radius.
    camera : Camera, optional
        Undistorts the surface and turns the spin into the world frame.
    blur_px : array_like, shape (2,) [px], optional
        Expected motion blur (image velocity times exposure); fitted per frame from this start.
    exposure_s : float, optional [s]
        Exposure time; used to refuse surfaces smeared by the spin itself.
    max_rate_rpm : float, optional [rpm]
        Largest spin searched (default: half a turn per frame).
    min_radius_px : float [px]
        Smallest apparent radius read.
    max_gap : int
        Frame gaps used (1..max_gap), which also checks for false matches and aliasing.
    fit_decay : bool
        Also fit an exponential decay of the rate over the window.
    seed : int
        Seeds the subsampling of surface points (the result is deterministic).

    Returns
    -------
    SurfaceSpin
        ``readable`` False with a ``reason`` when the spin cannot be read.
    """
    times = np.asarray(times, float)
    n = len(frames)
    if n != len(times) or n < 4:
        return _no("need at least 4 frames with their times", n_frames=n)
    rng = np.random.default_rng(seed)
    radii = np.broadcast_to(np.asarray(radius_px if radius_px is not None else np.nan, float), (n,))
    discs, prev, prev_rough = [], None, None
    for k, img in enumerate(frames):
        if centres is not None and np.all(np.isfinite(centres[k])) and np.isfinite(radii[k]):
            c, r = np.asarray(centres[k], float), float(radii[k])
        else:
            c, r = rough_ball(img)
            if c is None:
                discs.append(None)
                continue
        if prev is not None and prev_rough is not None and centres is None:
            c_start = prev.centre_px + (c - prev_rough)
        else:
            c_start = c
        d = fit_ball_disc(img, c_start, r, blur_px if blur_px is not None else (0.0, 0.0), start=prev)
        discs.append(d if d.ok else None)
        if d.ok:
            prev, prev_rough = d, c
    ok = [k for k, d in enumerate(discs) if d is not None]
    kept = tuple(d for d in discs if d is not None)
    if len(ok) < 4:
        return _no(f"the ball was measured in only {len(ok)} of {n} frames (need 4)", n_frames=len(ok), discs=kept)
    r_med = float(np.median([discs[k].radius_px for k in ok]))
    base = dict(n_frames=len(ok), radius_px=r_med, discs=kept)
    if r_med < min_radius_px:
        return _no(f"the ball is too small in the image (radius {r_med:.1f} px, need {min_radius_px:g} px): "
                   "film closer or zoom in", **base)
    fr = {k: SurfaceFrame(frames[k], discs[k], camera, times[k]) for k in ok}
    noise_rel = float(np.median([discs[k].noise / max(discs[k].shading.sum(), 1.0) for k in ok]))
    texture = float(np.median([fr[k].texture for k in ok]))
    if texture < max(0.02, 3 * noise_rel):
        return _no(f"no surface markings to follow (contrast {texture:.3f}, noise {noise_rel:.3f})", **base)
    pairs = [(a, b) for i, a in enumerate(ok) for b in ok[i + 1:] if 1 <= b - a <= max_gap]
    dt1 = float(np.median(np.diff(times[ok]) / np.diff(ok)))
    phi_max = 0.97 * math.pi
    if max_rate_rpm is not None:
        phi_max = min(phi_max, max_rate_rpm / RPM_PER_RADPS * dt1)
    # 1. coarse: every turn per frame up to phi_max, smoothed surfaces, a few gap-1 pairs
    g1 = [p for p in pairs if p[1] - p[0] == 1]
    g1c = [g1[i] for i in np.unique(np.linspace(0, len(g1) - 1, min(4, len(g1))).round().astype(int))]
    sels_c = [_sel(fr[a], 160, rng) for a, _ in g1c]
    h = 0.14
    ax = np.arange(-phi_max, phi_max + 1e-9, h)
    grid = np.stack(np.meshgrid(ax, ax, ax, indexing="ij"), -1).reshape(-1, 3)
    grid = grid[np.linalg.norm(grid, axis=1) <= phi_max]
    sc = _joint_scores(fr, g1c, grid / dt1, "coarse", sels_c)
    order = np.argsort(-sc)
    cands = []
    for i in order:
        if all(np.linalg.norm(grid[i] - grid[j]) > 2.5 * h for j in cands):
            cands.append(i)
        if len(cands) == 5:
            break
    # 2. refine the best candidates on all gaps at once
    sels = [_sel(fr[a], 400, rng) for a, _ in pairs]
    best, best_val = None, -np.inf
    for i in cands:
        w, v = _local_grid(lambda om: _joint_scores(fr, pairs, om, "coarse", sels), grid[i] / dt1,
                           np.array([h / 2.5, h / 6]) / dt1)
        if v > best_val:
            best, best_val = w, v
    omega0, _ = _local_grid(lambda om: _joint_scores(fr, pairs, om, "fine", sels), best,
                            np.array([0.03, 0.012, 0.005, 0.002]) / dt1)
    # 3. every pair that overlaps on its own, from the joint spin
    est, gaps, nccs, mids = [], [], [], []
    for (a, b), sel in zip(pairs, sels):
        dt = fr[b].t - fr[a].t
        phi_pred = omega0 * dt
        R0 = rotation_matrices(phi_pred)[0]
        if _pair_scores(fr[a], fr[b], R0[None], "fine", sel)[1][0] == 0:
            continue
        delta, v = _local_grid(lambda d: _pair_scores(fr[a], fr[b], rotation_matrices(d) @ R0, "fine", sel)[0],
                               np.zeros(3), [0.02, 0.008, 0.003, 0.0012])
        R = rotation_matrices(delta)[0] @ R0
        est.append(_unwrap(R, phi_pred) / dt)
        gaps.append(b - a)
        nccs.append(v)
        mids.append(0.5 * (fr[a].t + fr[b].t))
    est, gaps, nccs, mids = np.array(est), np.array(gaps), np.array(nccs), np.array(mids)
    base.update(n_pairs=len(est), match=float(np.mean(nccs)) if len(nccs) else math.nan)
    omega, wts = _robust_mean(est, gaps.astype(float) ** 2)
    one = gaps == 1
    if one.sum() < 3:
        return _no("too few consecutive frames to judge the spin's uncertainty", **base)
    e1 = est[one]
    w1 = wts[one] / max(wts[one].mean(), 1e-12)
    d1 = e1 - (w1[:, None] * e1).sum(0) / w1.sum()
    cov = (w1[:, None, None] * d1[:, :, None] * d1[:, None, :]).sum(0) / w1.sum() / (len(e1) - 1)
    gap_info, worst = {}, 0.0
    for g in range(1, max_gap + 1):
        m = gaps == g
        if m.sum() >= 2:
            om_g = est[m].mean(0)
            s_g = np.cov(est[m].T) / m.sum() + cov
            z = float(np.sqrt(max(0.0, (om_g - omega) @ np.linalg.pinv(s_g) @ (om_g - omega)) / 3))
            gap_info[str(g)] = {"rate_rpm": float(np.linalg.norm(om_g)) * RPM_PER_RADPS, "sigmas": z}
            worst = max(worst, z if np.linalg.norm(om_g - omega) > 0.02 * np.linalg.norm(omega) + 2.0 else 0.0)
    base["gaps"] = gap_info
    rate = float(np.linalg.norm(omega))
    if base["match"] < 0.45:
        return _no(f"the surface did not match between frames (correlation {base['match']:.2f}): too blurred, "
                   "too noisy or too compressed", **base)
    if rate * dt1 > 0.8 * math.pi:
        return _no(f"the ball turns {math.degrees(rate * dt1):.0f} degrees a frame, near half a turn: the spin "
                   "may be aliased; film at a higher frame rate", **base)
    if worst > 4.0:
        return _no("frame gaps 1, 2 and 3 disagree (a false match or aliasing)", **base)
    if exposure_s is not None and rate * exposure_s > 0.5:
        return _no(f"the spin smears the surface by {math.degrees(rate * exposure_s):.0f} degrees during the "
                   "exposure: use a shorter shutter", **base)
    sig_rate = math.sqrt(max(0.0, float(np.trace(cov))))
    if sig_rate > max(0.1 * rate, 5.0):
        return _no(f"the spin is too uncertain ({sig_rate * RPM_PER_RADPS:.0f} rpm)", **base)
    decay = decay_sig = None
    if fit_decay:
        decay, decay_sig = _decay(mids[one], np.linalg.norm(est[one], axis=1))
    frame = "camera"
    if camera is not None:
        Rc = camera.R
        omega, cov, frame = Rc.T @ omega, Rc.T @ cov @ Rc, "world"
    return SurfaceSpin(readable=True, spin_radps=omega, covariance=cov, frame=frame, decay_s=decay,
                       decay_sigma_s=decay_sig, **base)


def _robust_mean(x, w, c=2.0, iterations=10):
    """Huber-weighted mean of vectors x (N, 3) with prior weights w (N,); returns (mean, final weights)."""
    m = (w[:, None] * x).sum(0) / w.sum()
    wf = w
    for _ in range(iterations):
        e = np.linalg.norm(x - m, axis=1) * np.sqrt(w)
        s = max(1.4826 * float(np.median(e)), 1e-9)
        wf = w / np.maximum(1.0, e / (c * s))
        m = (wf[:, None] * x).sum(0) / wf.sum()
    return m, wf


def _decay(t, rate):
    """Decay time (and sigma) [s] from a straight-line fit of the rate against time (short windows)."""
    if len(t) < 4 or np.ptp(t) <= 0:
        return None, None
    A = np.stack([np.ones_like(t), t - t.mean()], 1)
    coef, res, *_ = np.linalg.lstsq(A, rate, rcond=None)
    s2 = float(((rate - A @ coef) ** 2).sum()) / (len(t) - 2)
    cov = s2 * np.linalg.inv(A.T @ A)
    slope, sig = float(coef[1]), math.sqrt(cov[1, 1])
    if slope >= 0 or abs(slope) < 2 * sig:
        return None, None
    tau = -float(coef[0]) / slope
    return tau, tau * sig / abs(slope)
