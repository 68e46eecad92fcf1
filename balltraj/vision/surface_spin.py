"""The full spin vector (gyro part included) from the ball's surface in a high-speed clip.

Per frame the ball's disc is fitted as a shaded, blurred sphere (:mod:`balltraj.vision.surface_ball`)
and its surface is resampled onto a fixed grid of the visible hemisphere (the patch: relative albedo,
the shading divided out, undistorted through the camera model when one is given). Between frames k
and k + g the surface turns by R = exp(omega dt): a point n of frame k is seen at R n in frame k + g.
The spin omega is found by registering the surfaces on the sphere (normalised cross-correlation of
the band-passed albedo at n in frame k and at R n in frame k + g):

1. a coarse grid over all rotations per frame up to half a turn, on smoothed patches, gap 1 (a pair
   whose surfaces do not overlap under a spin counts as no match for it);
2. the best few candidates refined on every pair of frames 1, 2 and 3 apart at once (a constant
   spin must map all of them; a false match of a symmetric texture does not);
3. every pair refined on its own from that spin, giving one spin estimate per pair, and a robust
   (Huber) weighted mean of them: one constant spin vector over the window (optionally a decay);
   the covariance from the scatter of the independent gap-1 estimates, plus the apparent radius's
   scatter, the centre's and an allowance (fitted to the benchmark's renders) for the ball's
   movement during the exposure;
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

import numpy as np

from ..camera.model import Camera
from .surface_ball import BallDisc, fit_ball_disc, rough_ball
from .surface_register import (SurfaceFrame, joint_scores, local_grid, pair_scores, rotation_matrices, subsample,
                               unwrap)

RPM_PER_RADPS = 60 / (2 * math.pi)
_MAX_SMEAR = 0.3  # largest motion blur read, in radii (beyond it the smear biases the turn; bench_surface_spin)
# the ball's movement across the image during the exposure biases the registered turn: a smear that is
# symmetric in the image is not on the sphere (the image-to-sphere map curves towards the limb), so to
# second order each marking's centroid moves by about (smear / radius)^2. Its size is fitted to one
# renderer's clips, not derived: 1.5-2 % low at 0.24 radii (1/4000 s) and no bias seen at 0.12 radii
# (1/8000 s) in bench_surface_spin (tests/surface_render.py), so a systematic sigma of this coefficient
# times (smear / radius)^2 of the rate is added in every direction (1.4 % at 0.24 radii, 0.35 % at 0.12)
_SMEAR_SIGMA = 0.25
_MAX_TURN = math.radians(75)  # longest baseline used: the surfaces of both frames still overlap


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
    good = [d for d in discs if d is not None]
    if len(good) >= 3:
        # one blur and edge width for the window (median, signs aligned), then every frame again with them
        b = np.array([d.blur_px for d in good])
        b = b * np.where(b @ b[int(np.argmax(np.linalg.norm(b, axis=1)))] < 0, -1.0, 1.0)[:, None]
        bm, em = np.median(b, axis=0), float(np.median([d.edge_px for d in good]))
        for k, d in enumerate(discs):
            if d is not None:
                st = BallDisc(d.centre_px, d.radius_px, bm, em, d.shading, d.light, d.background, d.noise)
                d2 = fit_ball_disc(frames[k], d.centre_px, d.radius_px, bm, start=st, fix_blur=True)
                discs[k] = d2 if d2.ok else None
    ok = [k for k, d in enumerate(discs) if d is not None]
    kept = tuple(d for d in discs if d is not None)
    if len(ok) < 4:
        return _no(f"the ball was measured in only {len(ok)} of {n} frames (need 4)", n_frames=len(ok), discs=kept)
    r_med = float(np.median([discs[k].radius_px for k in ok]))
    base = dict(n_frames=len(ok), radius_px=r_med, discs=kept)
    if r_med < min_radius_px:
        return _no(f"the ball is too small in the image (radius {r_med:.1f} px, need {min_radius_px:g} px): "
                   "film closer or zoom in", **base)
    smear = float(np.median([np.hypot(*discs[k].blur_px) for k in ok]))
    if smear > _MAX_SMEAR * r_med:
        # the longest shutter that would do, from the ball's speed across the image over the window
        c_ok = np.array([discs[k].centre_px for k in ok])
        speed = float(np.median(np.hypot(*np.diff(c_ok, axis=0).T) / np.diff(times[ok])))
        advice = (f"a shutter of 1/{math.ceil(speed / (_MAX_SMEAR * r_med)):.0f} s or shorter" if speed > 0
                  else "a shorter shutter")
        return _no(f"the ball moves {smear:.1f} px ({100 * smear / r_med:.0f} % of its radius) during the exposure, "
                   f"which smears its markings: use {advice}", **base)
    fr = {k: SurfaceFrame(frames[k], discs[k], camera, times[k]) for k in ok}
    noise_rel = float(np.median([_patch_noise(discs[k]) for k in ok]))
    texture = float(np.median([fr[k].texture for k in ok]))
    # the band-passed surface's spread is markings and noise in quadrature: below 1.5 times the noise the
    # markings are weaker than the noise itself (s < 1.1 n); above, the registration's own checks (match,
    # frame gaps, sigma) decide
    if texture < max(0.02, 1.5 * noise_rel):
        return _no(f"no surface markings to follow (contrast {texture:.3f}, noise {noise_rel:.3f})", **base)
    pairs = [(a, b) for i, a in enumerate(ok) for b in ok[i + 1:] if 1 <= b - a <= max_gap]
    dt1 = float(np.median(np.diff(times[ok]) / np.diff(ok)))
    phi_max = 0.97 * math.pi
    if max_rate_rpm is not None:
        phi_max = min(phi_max, max_rate_rpm / RPM_PER_RADPS * dt1)
    # 1. coarse: every turn per frame up to phi_max, smoothed surfaces, a few gap-1 pairs
    g1 = [p for p in pairs if p[1] - p[0] == 1]
    g1c = [g1[i] for i in np.unique(np.linspace(0, len(g1) - 1, min(4, len(g1))).round().astype(int))]
    sels_c = [subsample(fr[a], 160, rng) for a, _ in g1c]
    h = 0.14
    ax = np.arange(-phi_max, phi_max + 1e-9, h)
    grid = np.stack(np.meshgrid(ax, ax, ax, indexing="ij"), -1).reshape(-1, 3)
    grid = grid[np.linalg.norm(grid, axis=1) <= phi_max]
    sc = joint_scores(fr, g1c, grid / dt1, "coarse", sels_c, all_pairs=True)
    order = np.argsort(-sc)
    cands = []
    for i in order:
        if all(np.linalg.norm(grid[i] - grid[j]) > 2.5 * h for j in cands):
            cands.append(i)
        if len(cands) == 5:
            break
    # 2. refine the best candidates on all gaps at once
    sels = [subsample(fr[a], 400, rng) for a, _ in pairs]
    best, best_val = None, -np.inf
    for i in cands:
        w, v = local_grid(lambda om: joint_scores(fr, pairs, om, "coarse", sels), grid[i] / dt1,
                           np.array([h / 2.5, h / 6]) / dt1)
        if v > best_val:
            best, best_val = w, v
    omega0, _ = local_grid(lambda om: joint_scores(fr, pairs, om, "fine", sels), best,
                            np.array([0.06, 0.025, 0.01, 0.004, 0.0016]) / dt1)
    # 3. longer baselines (every pair turning less than _MAX_TURN): joint refinement, then each pair alone
    rate0 = float(np.linalg.norm(omega0))
    if rate0 * (times[ok[-1]] - times[ok[0]]) > 1.5:
        # what stays put in the camera frame while the ball turns (shading the model left, the smear of the
        # motion blur, the limb) pulls matches towards no turn: remove the median over the frames
        for f in fr.values():
            f.fine = np.where(f.valid > 0, f.fine, np.nan)
        stack = np.stack([f.fine for f in fr.values()])
        stack[:, np.all(np.isnan(stack), axis=0)] = 0.0
        static = np.nanmedian(stack, axis=0)
        for f in fr.values():
            f.fine = np.nan_to_num(f.fine - static).astype(np.float32)
    g_long = int(max(1, min(ok[-1] - ok[0], math.floor(_MAX_TURN / max(rate0 * dt1, 1e-9)))))
    use_gaps = set(range(1, max_gap + 1)) | {g_long, (g_long + 1) // 2}
    longp = [(a, b) for i, a in enumerate(ok) for b in ok[i + 1:] if b - a in use_gaps]
    sels_l = [subsample(fr[a], 400, rng) for a, _ in longp]
    dt_long = max(times[b] - times[a] for a, b in longp)
    omega0, _ = local_grid(lambda om: joint_scores(fr, longp, om, "fine", sels_l), omega0,
                           np.array([0.03, 0.012, 0.005, 0.002, 0.0008]) / dt_long)
    est, used, nccs = [], [], []
    for (a, b), sel in zip(longp, sels_l):
        dt = fr[b].t - fr[a].t
        phi_pred = omega0 * dt
        R0 = rotation_matrices(phi_pred)[0]
        if pair_scores(fr[a], fr[b], R0[None], "fine", sel)[1][0] == 0:
            continue
        delta, v = local_grid(lambda d: pair_scores(fr[a], fr[b], rotation_matrices(d) @ R0, "fine", sel)[0],
                              np.zeros(3), [0.03, 0.012, 0.005, 0.002, 0.0008])
        est.append(unwrap(rotation_matrices(delta)[0] @ R0, phi_pred))
        used.append((a, b))
        nccs.append(v)
    base.update(n_pairs=len(est), match=float(np.mean(nccs)) if nccs else math.nan)
    if sum(1 for a, b in used if b - a == 1) < 3:
        # the overlap of consecutive surfaces depends on the turn a frame and its axis, not on pixels
        return _no(f"the ball turns too far between frames to compare its surface (the best match turns it "
                   f"{math.degrees(rate0 * dt1):.0f} degrees a frame, and fewer than 3 consecutive frames then show "
                   "a quarter of the same surface; or the match is false): film at a higher frame rate", **base)
    # 4. one constant spin: per-frame orientations from the pairs, a straight line through them
    omega, cov, x, tk = _orientation_line(used, np.array(est), omega0, times)
    # a second estimate of the same error: the scatter of the consecutive-frame spins over their number;
    # the larger is kept (the line fit alone misses errors that neighbouring frames share)
    dts_used = np.array([times[b] - times[a] for a, b in used])
    p1 = (np.array(est) / dts_used[:, None])[np.array([b - a for a, b in used]) == 1]
    cov_pairs = np.cov(p1.T) / len(p1)
    if np.trace(cov_pairs) > np.trace(cov):
        cov = cov_pairs
    # the apparent radius is the scale of every turn: its frame-to-frame scatter scales the rate
    radius_rel = float(np.std([discs[k].radius_px for k in ok], ddof=1)) / r_med
    cov = cov + radius_rel ** 2 * np.outer(omega, omega)
    # a common offset of the centre tilts the axis by about offset / radius: take the centres' scatter
    # about a smooth track as that offset's size
    tc = times[ok] - times[ok].mean()
    C = np.array([discs[k].centre_px for k in ok])
    A = np.stack([np.ones_like(tc), tc, tc ** 2], 1)
    cres = C - A @ np.linalg.lstsq(A, C, rcond=None)[0]
    centre_sd = math.sqrt(float((cres ** 2).sum()) / max(2 * (len(ok) - 3), 1))
    a_hat = omega / max(np.linalg.norm(omega), 1e-12)
    cov = cov + (centre_sd / r_med) ** 2 * float(omega @ omega) * (np.eye(3) - np.outer(a_hat, a_hat))
    cov = cov + (_SMEAR_SIGMA * (smear / r_med) ** 2) ** 2 * float(omega @ omega) * np.eye(3)
    gaps = np.array([b - a for a, b in used])
    per_pair = np.array(est) / np.array([times[b] - times[a] for a, b in used])[:, None]
    gap_info, worst = {}, 0.0
    for g in range(1, max_gap + 1):
        m = gaps == g
        if m.sum() >= 2:
            om_g = per_pair[m].mean(0)
            s_g = np.cov(per_pair[m].T) / m.sum() + cov
            z = float(np.sqrt(max(0.0, (om_g - omega) @ np.linalg.pinv(s_g) @ (om_g - omega)) / 3))
            gap_info[str(g)] = {"rate_rpm": float(np.linalg.norm(om_g)) * RPM_PER_RADPS, "sigmas": z}
            worst = max(worst, z if np.linalg.norm(om_g - omega) > 0.02 * np.linalg.norm(omega) + 2.0 else 0.0)
    base["gaps"] = gap_info
    rate = float(np.linalg.norm(omega))
    if base["match"] < 0.45:
        return _no(f"the surface did not match between frames (correlation {base['match']:.2f}): too blurred, "
                   "too noisy or too compressed, or turning too far between frames (then film at a higher frame "
                   "rate)", **base)
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
    if fit_decay and rate > 0:
        decay, decay_sig = _decay(tk, x @ (omega / rate), rate)
    frame = "camera"
    if camera is not None:
        Rc = camera.R
        omega, cov, frame = Rc.T @ omega, Rc.T @ cov @ Rc, "world"
    return SurfaceSpin(readable=True, spin_radps=omega, covariance=cov, frame=frame, decay_s=decay,
                       decay_sigma_s=decay_sig, **base)


def _patch_noise(d: BallDisc) -> float:
    """The pixel noise of the surface patch (relative albedo): the fit's noise over the shading, median over
    the part of the disc the registration uses."""
    g = np.linspace(-0.8, 0.8, 9)
    gx, gy = np.meshgrid(g, g)
    m = gx ** 2 + gy ** 2 < 0.64
    S = d.shade(d.centre_px + d.radius_px * np.stack([gx[m], gy[m]], 1))
    return float(d.noise) * float(np.median(1.0 / np.maximum(S, 1.0)))


def _orientation_line(pairs, phis, omega0, times, c=2.0, iterations=8):
    """Constant spin from pairwise turns.

    Each pair (a, b) measured a turn phi_ab (rotation vector [rad]); with small per-frame orientation
    errors e_k, phi_ab - omega0 dt_ab = x_b - x_a where x_k = d_omega t_k + e_k. The x_k are solved by
    weighted least squares over the pair graph (Huber weights on the pair residuals, x of the first
    frame fixed), then a straight line x_k = x_0 + d_omega t_k gives the spin correction, and the
    scatter of the x_k about it (one orientation error per frame) its covariance.

    Returns omega (3,) [rad/s], covariance (3, 3), the orientations x (N, 3) [rad] and their times (N,) [s].
    """
    frames = sorted({k for p in pairs for k in p})
    col = {k: i for i, k in enumerate(frames)}
    dts = np.array([times[b] - times[a] for a, b in pairs])
    rho = phis - omega0[None] * dts[:, None]
    D = np.zeros((len(pairs), len(frames)))
    for r, (a, b) in enumerate(pairs):
        D[r, col[b]], D[r, col[a]] = 1.0, -1.0
    D = D[:, 1:]
    w = np.ones(len(pairs))
    for _ in range(iterations):
        sw = np.sqrt(w)[:, None]
        x = np.vstack([np.zeros(3), np.linalg.lstsq(D * sw, rho * sw, rcond=None)[0]])
        e = np.linalg.norm(rho - D @ x[1:], axis=1)
        s = max(1.4826 * float(np.median(e)), 1e-6)
        w = 1.0 / np.maximum(1.0, e / (c * s))
    t = np.array([times[k] for k in frames])
    A = np.stack([np.ones_like(t), t - t.mean()], 1)
    coef = np.linalg.lstsq(A, x, rcond=None)[0]
    res = x - A @ coef
    n = len(t)
    cov = (res.T @ res) / max(n - 2, 1) / float(((t - t.mean()) ** 2).sum())
    # orientation errors of neighbouring frames are alike when the surface hardly moves between them:
    # inflate by the AR(1) factor (1 + r1) / (1 - r1) of the residuals' lag-1 correlation (Bartlett 1946)
    if n > 4:
        r1 = float((res[1:] * res[:-1]).sum() / max((res * res).sum(), 1e-300))
        r1 = min(max(r1, 0.0), 0.9)
        cov = cov * (1 + r1) / (1 - r1)
    return omega0 + coef[1], cov, x + omega0[None] * t[:, None], t


def _decay(t, angle, rate):
    """Decay time (and sigma) [s] from a quadratic fit of the turned angle [rad] against time [s]:
    angle = c + w (t - tm) + q (t - tm)^2, so rate = w - (t - tm) w / tau with tau = -w / (2 q)."""
    if len(t) < 5:
        return None, None
    tm = t.mean()
    A = np.stack([np.ones_like(t), t - tm, (t - tm) ** 2], 1)
    coef = np.linalg.lstsq(A, angle, rcond=None)[0]
    s2 = float(((angle - A @ coef) ** 2).sum()) / max(len(t) - 3, 1)
    cov = s2 * np.linalg.inv(A.T @ A)
    w, q = float(coef[1]), float(coef[2])
    sq = math.sqrt(cov[2, 2])
    if q >= 0 or abs(q) < 2 * sq:
        return None, None
    tau = -w / (2 * q)
    return tau, tau * sq / abs(q)
