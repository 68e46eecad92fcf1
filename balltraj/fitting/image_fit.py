"""The flight fit in image space: reprojection error in pixels through one or more cameras.

Extra unknowns: one time offset per camera after the first (unsynchronised phones). Rolling
shutter: an observation at row v is taken at t + offset + (v / height) * readout_s.

With one camera the depth along the line of sight trades off against the unknown lift almost
perfectly, so every honest constraint is used: the ``start_near`` hint (three residuals, see
:mod:`.flight_fit`), the ball's apparent radius (r_px = f R / depth, when observations carry
``radius_px``), gravity and drag. The remaining depth uncertainty is reported.
"""

from __future__ import annotations

import math
from dataclasses import replace

import numpy as np

from ..camera.model import Camera
from ..camera.triangulate import triangulate_observations
from ..errors import BallTrajError, FitError
from ..physics.flight import FlightModel
from .drag_law import drag_law_secant
from .flight_fit import FitOptions, _Problem, _start, common_fields, solve
from .results import ImageFit

RADIUS_SIGMA_PX = 0.5  # floor of the apparent-radius noise [px] (common practice: sub-pixel edges)
RADIUS_SIGMA_REL = 0.05  # and 5 % of the radius, per point
PIXEL_SIGMA_FLOOR = 0.15  # px: centroids are not better than this (compression, blur, shading)
RADIUS_BIAS_SIGMA_PX = 0.3  # and a common additive bias (edge threshold, blur): prior 0.3 px
RADIUS_SCALE_SIGMA = 0.06  # a common scale error of all measured radii (blur, edge threshold): prior 6 %
RADIUS_NOISE_FLOOR_PX = 0.15  # the per-point radius noise, estimated from the fit's radius residuals, is floored here
_CHI3_MEDIAN, _CHI2_MEDIAN = 1.5382, math.sqrt(2.0 * math.log(2.0))  # medians of 3D / 2D unit-Gaussian norms


class _ImageProblem(_Problem):
    def __init__(self, model, t, cam_idx, uv, radius, cameras: list[Camera], sigma_px, basis, options,
                 fit_offsets: bool, rung=()):
        self.t_obs = np.asarray(t, float)
        self.cam_idx = np.asarray(cam_idx, int)
        self.uv = np.asarray(uv, float)
        self.cameras = cameras
        self.fit_offsets = fit_offsets and len(cameras) > 1
        names, typ = [], []
        if self.fit_offsets:
            names += [f"time_offset_{c.name}" for c in cameras[1:]]
            typ += [0.01 for _ in cameras[1:]]
        self.use_radius = radius is not None and np.isfinite(np.asarray(radius, float)).any()
        if self.use_radius:
            names += ["log_radius_scale", "radius_bias_px"]
            typ += [0.01, 0.01]
        self.extra_names, self.extra_typical = tuple(names), tuple(typ)
        self.base_offset = np.array([c.time_offset_s for c in cameras])
        h = np.array([c.image_size[1] for c in cameras], float)
        ro = np.array([c.readout_s for c in cameras])
        self.shutter = ro[self.cam_idx] * self.uv[:, 1] / h[self.cam_idx]
        self.radius = np.asarray(radius, float) if self.use_radius else None
        self.R_ball = model.radius_m
        rig_t = self.t_obs + self.base_offset[self.cam_idx] + self.shutter
        super().__init__(model, float(rig_t.min()), sigma_px, basis, options, rung)
        if self.radius is not None:
            r = np.where(np.isfinite(self.radius), self.radius, 0.0)
            self.radius_sigma = np.maximum(RADIUS_SIGMA_PX, RADIUS_SIGMA_REL * r)
        self.focal = np.array([c.focal_px for c in cameras])

    def offsets(self, P) -> np.ndarray:
        """(B, C) time offsets."""
        B = P.shape[0]
        off = np.tile(self.base_offset, (B, 1))
        if self.fit_offsets:
            off[:, 1:] += P[:, self.n_phys:self.n_phys + len(self.cameras) - 1]
        return off

    def radius_scale(self, P) -> np.ndarray:
        return np.exp(P[:, -2]) if self.use_radius else np.ones(P.shape[0])

    def radius_bias(self, P) -> np.ndarray:
        return P[:, -1] if self.use_radius else np.zeros(P.shape[0])

    def residuals(self, P):
        r = super().residuals(P)
        if self.use_radius:
            P = np.atleast_2d(P)
            r = np.concatenate([r, P[:, -2:-1] / RADIUS_SCALE_SIGMA, P[:, -1:] / RADIUS_BIAS_SIGMA_PX], axis=1)
        return r

    def times(self, P) -> np.ndarray:
        return self.t_obs[None, :] + self.offsets(P)[:, self.cam_idx] + self.shutter[None, :]

    def span(self, P):
        tt = self.times(P)
        return float(tt.min()) - 1e-3, float(tt.max()) + 1e-3

    def first_position(self):
        return self._first_xyz

    def positions(self, tr, P):
        return tr.positions_rows(self.times(P))

    def point_residuals(self, tr, P):
        pos = self.positions(tr, P)
        B, N = pos.shape[:2]
        ncol = 3 if self.use_radius else 2
        scale = self.radius_scale(np.atleast_2d(P))[:, None]
        bias = self.radius_bias(np.atleast_2d(P))[:, None]
        out = np.zeros((B, N, ncol))
        for c, cam in enumerate(self.cameras):
            m = self.cam_idx == c
            if not m.any():
                continue
            pred = cam.project(pos[:, m])
            pred = np.where(np.isfinite(pred), pred, 1e6)  # behind the camera: huge residual
            out[:, m, :2] = (pred - self.uv[m]) / self.sigma[m, None]
            if self.use_radius:
                depth = cam.depth(pos[:, m])
                r_pred = scale * self.focal[c] * self.R_ball / np.maximum(depth, 1e-3) + bias
                ok = np.isfinite(self.radius[m])
                out[:, m, 2] = np.where(ok, (r_pred - np.nan_to_num(self.radius[m])) / self.radius_sigma[m], 0.0)
        return out

    def point_norms(self, p):
        """Pixel residual norms in sigma units, scaled so that :func:`.flight_fit.solve`'s noise estimate
        (median norm / 1.5382, the median of a 3D unit-Gaussian norm) holds for these 2D norms, whose
        median is sqrt(2 ln 2) = 1.1774 (Rayleigh distribution). Outlier flags (norm / median) are unchanged."""
        tr = self.trajectories(p[None])
        return np.linalg.norm(self.point_residuals(tr, p[None])[0, :, :2], axis=1) * (_CHI3_MEDIAN / _CHI2_MEDIAN)

    def radius_noise_factor(self, p) -> float:
        """Robust RMS (1.4826 MAD about 0) of the inlier apparent-radius residuals in units of their
        assumed sigma: how far the assumed radius noise is off (1: as assumed)."""
        tr = self.trajectories(np.asarray(p)[None])
        rr = self.point_residuals(tr, np.asarray(p)[None])[0, :, 2]
        ok = self.mask & np.isfinite(self.radius)
        return float(1.4826 * np.median(np.abs(rr[ok]))) if ok.sum() >= 6 else 1.0

    def rescale_radius_sigma(self, factor: float) -> None:
        self.radius_sigma = np.maximum(self.radius_sigma * factor, RADIUS_NOISE_FLOOR_PX)
        self._cache.clear()


def _pseudo_point_sets(t, cam_idx, uv, radius, cameras, model, hint):
    """Candidate rough 3D tracks for start values, each (t, xyz, how): triangulated (several
    cameras); or, with one camera, each ray taken to a depth from the apparent radius, to the plane
    through the start hint that faces the camera, or to the hint's depth. The fit is run from each
    and the best kept: small, noisy radii alone can start it in a wrong valley."""
    names = [cameras[i].name for i in cam_idx]
    if len(set(cam_idx)) >= 2:
        try:
            tt, xyz = triangulate_observations(t, names, uv, cameras)
            if len(tt) >= 6:
                return [(tt, xyz, "triangulated")]
        except BallTrajError:
            pass
    c0 = int(np.bincount(cam_idx).argmax())
    cam = cameras[c0]
    m = cam_idx == c0
    tm = t[m] + cam.time_offset_s
    origin, rays = cam.rays(uv[m])
    axis = cam.R[2]
    out = []
    if radius is not None and np.isfinite(radius[m]).sum() >= 0.5 * m.sum():
        r = radius[m]
        depth = cam.focal_px * model.radius_m / np.where(np.isfinite(r), r, np.nan)
        good = np.isfinite(depth)
        depth = np.interp(np.arange(len(depth)), np.nonzero(good)[0], depth[good])
        depth = np.polyval(np.polyfit(tm - tm[0], depth, 2), tm - tm[0])  # smooth the noisy depths
        depth = np.maximum(depth, 0.3)
        out.append((tm, origin + rays * (depth / (rays @ axis))[:, None], "apparent radius"))
    if hint is not None:
        h = np.asarray(hint, float)
        normal = np.array([axis[0], axis[1], 0.0])
        if np.linalg.norm(normal) > 1e-6 and abs(normal[0]) / np.linalg.norm(normal) < 0.7:
            normal /= np.linalg.norm(normal)  # a camera beside the flight: the upright plane through the hint
            s_ = ((h - origin) @ normal) / np.where(np.abs(rays @ normal) > 1e-6, rays @ normal, np.nan)
            if np.all(np.isfinite(s_)) and np.all(s_ > 0):
                out.append((tm, origin + rays * s_[:, None], "plane through the start hint"))
        if not out:
            depth = np.full(m.sum(), max(float((h - origin) @ axis), 0.3))
            out.append((tm, origin + rays * (depth / (rays @ axis))[:, None], "start hint depth"))
    if not out:
        raise FitError("one camera cannot place the ball in depth without help",
                       hint="give the start point X,Y,Z (where the flight starts) or observations with radius_px", about="start_near")
    return out


def fit_flight_image(model: FlightModel, t, camera_names, uv, cameras: list[Camera], radius_px=None,
                     options: FitOptions = FitOptions(), sigma_px: float | None = None,
                     fit_offsets: bool = True) -> ImageFit:
    """Fit the flight model to pixel observations of one or more cameras.

    Parameters
    ----------
    t : ndarray, shape (N,) [s]; camera_names : N names; uv : ndarray, shape (N, 2) [px]
    cameras : the rig; radius_px : ndarray, shape (N,) [px] or None; sigma_px : pixel noise or None

    The best start's catalogue solution climbs the aerodynamic ladder as in
    :func:`.flight_fit.fit_flight` (``options.aero_model``).
    """
    t = np.asarray(t, float)
    uv = np.asarray(uv, float)
    names = [c.name for c in cameras]
    idx = {n: i for i, n in enumerate(names)}
    missing = sorted(set(camera_names) - set(names))
    if missing:
        raise FitError(f"observations name camera(s) {', '.join(missing)} that the camera file does not define",
                       hint=f"the camera file defines: {', '.join(names)}")
    cam_idx = np.array([idx[c] for c in camera_names])
    used = sorted(set(cam_idx.tolist()))
    cams = [cameras[i] for i in used]
    remap = {old: new for new, old in enumerate(used)}
    cam_idx = np.array([remap[i] for i in cam_idx])
    n = len(t)
    n_unknowns = 8 + int(options.fit_drag) + (len(cams) - 1 if fit_offsets else 0)
    if 2 * n < n_unknowns + 4 or n < 6:
        raise FitError(f"{n} observations are too few to fit {n_unknowns} unknowns",
                       hint="a flight needs at least 6 observed frames; 20 or more for a useful spin estimate")
    for c, cam in enumerate(cams):
        m = cam_idx == c
        w, h = cam.image_size
        if np.any((uv[m, 0] < -0.5 * w) | (uv[m, 0] > 1.5 * w) | (uv[m, 1] < -0.5 * h) | (uv[m, 1] > 1.5 * h)):
            raise FitError(f"observations of camera {cam.name!r} lie far outside its {w}x{h} image",
                           hint="check that the camera file matches the clip (image size, orientation)")
    radius = None if radius_px is None else np.asarray(radius_px, float)
    given = sigma_px is not None
    best = None
    for tp, xyz_p, how in _pseudo_point_sets(t, cam_idx, uv, radius, cams, model, options.start_near):
        try:
            p0, basis, _ = _start(tp, xyz_p, np.ones(len(tp)), model, options)
        except FitError:
            continue
        sig = np.full(n, float(sigma_px) if given else 1.0)
        prob = _ImageProblem(model, t, cam_idx, uv, radius, cams, sig, basis, options, fit_offsets)
        # launch at the first rig time: move the start state there
        dt0 = prob.t0 - tp[0]
        p0[:3] = p0[:3] + p0[3:6] * dt0
        prob._first_xyz = p0[:3]
        if prob.fit_offsets:
            p0 = np.concatenate([p0, np.zeros(len(cams) - 1)])
        if prob.use_radius:
            p0 = np.concatenate([p0, [0.0, 0.0]])
        prob.set_hint_span(float(np.linalg.norm(p0[3:6])))
        res = solve(prob, p0, options, estimate_sigma=not given, min_points=6, sigma_floor=PIXEL_SIGMA_FLOOR,
                    tight=True)
        score = _robust_cost(prob, res.p)
        if best is None or score < best[0]:
            best = (score, prob, res, how)
    if best is None:
        raise FitError("no start could be found for the fit", hint="check the camera file, or give the start point", about="start_near")
    _, prob0, res0, how = best
    if prob0.use_radius and not given:
        # the per-point radius noise is estimated like the pixel noise (not assumed), so that the residual
        # variance that scales the covariance is not pulled down by over-wide radius sigmas
        factor = prob0.radius_noise_factor(res0.p)
        if abs(factor - 1.0) > 0.1:
            prob0.rescale_radius_sigma(factor)
            res0 = solve(prob0, res0.p, options, estimate_sigma=False, robust=False, min_points=6,
                         sigma_floor=PIXEL_SIGMA_FLOOR, tight=True)
    from .climb import climb, misfit_noise
    from .misfit import noise_estimate

    noise = float(np.nanmedian([noise_estimate(t[cam_idx == c], uv[cam_idx == c]) for c in range(len(cams))]))
    noise_sigma, noise_source = misfit_noise([sigma_px] if given else None, noise)
    if noise_source.startswith("local"):
        noise_source = "local-cubic noise estimate of the pixel track"
        noise_sigma = max(noise_sigma, PIXEL_SIGMA_FLOOR)
    ncol = 3 if prob0.use_radius else 2

    def new_problem(rung):
        if not rung:
            return prob0
        prob = _ImageProblem(model, t, cam_idx, uv, radius, cams, prob0.sigma, prob0.basis, options, fit_offsets, rung)
        prob._first_xyz = prob0._first_xyz
        prob.back_s = prob0.back_s
        if prob0.use_radius:
            prob.radius_sigma = prob0.radius_sigma.copy()
        return prob

    class _Done:  # the catalogue rung is already solved: hand its result to the climb
        def __init__(self):
            self.first = True

        def __call__(self, prob, p0, opts, estimate, **kw):
            if self.first and prob is prob0:
                self.first = False
                return res0
            return solve(prob, p0, opts, estimate, **kw)

    climb_opts = options
    if options.aero_model == "auto" and not options.image_ladder:
        # held on the catalogue rung: the drag law's own uncertainty is marginalised instead (.nuisance)
        climb_opts = replace(options, aero_model="catalogue", drag_law_priors=True)
    solve_kw = dict(min_points=6, sigma_floor=PIXEL_SIGMA_FLOOR, tight=True)

    def compensate(prob, res, nuisance):
        return drag_law_secant(prob, res, nuisance, lambda m: _ImageProblem(
            m, t, cam_idx, uv, radius, cams, prob.sigma, prob.basis, options, fit_offsets, prob.rung), options, solve_kw)

    c = climb(new_problem, res0.p, climb_opts, solve=_Done(), estimate_sigma=False, noise_sigma=noise_sigma,
              noise_source=noise_source, cols=ncol, data_cols=2, solve_kw=solve_kw,
              compensate=compensate if climb_opts.drag_law_priors else None)
    if climb_opts is not options:
        c.model_choice["pinned"] = False
        c.model_choice["reason"] = ("image fit: the catalogue rung; in pixels the ladder is climbed only when asked "
                                    "(FitOptions.image_ladder or a pinned rung), as depth trades off against the "
                                    "aerodynamics")
    prob, res = c.prob, c.res
    p = res.p
    tr = prob.trajectories(p[None])
    pos = prob.positions(tr, p[None])[0]
    pred = np.zeros_like(uv)
    for c_, cam in enumerate(cams):
        m = cam_idx == c_
        pred[m] = cam.project(pos[m])
    states = prob.unpack(p[None])[0]
    sig_p = np.sqrt(np.clip(np.diag(c.covariance), 0, None))
    offsets = offset_sigma = None
    if prob.fit_offsets:
        offsets = {cm.name: float(cm.time_offset_s + (p[prob.n_phys + k - 1] if k else 0.0))
                   for k, cm in enumerate(cams)}
        offset_sigma = {cm.name: float(sig_p[prob.n_phys + k - 1]) if k else 0.0 for k, cm in enumerate(cams)}
    cov_pos = c.covariance[:3, :3]
    depth_sigma = {}
    for cam in cams:
        d = states[0, :3] - cam.centre
        d /= np.linalg.norm(d)
        depth_sigma[cam.name] = float(math.sqrt(max(d @ cov_pos @ d, 0.0))) if np.all(np.isfinite(cov_pos)) else math.nan
    return ImageFit(
        observed=uv, fitted=pred, residuals=uv - pred, fitted_xyz=pos,
        cameras=tuple(cams), camera_index=cam_idx, start_from=how, time_offsets_s=offsets,
        time_offset_sigma_s=offset_sigma, launch_depth_sigma_m=depth_sigma, radius_px=radius,
        radius_scale=float(prob.radius_scale(p[None])[0]), radius_bias_px=float(prob.radius_bias(p[None])[0]),
        **common_fields(prob, res, c, prob.basis, t, options))


def _robust_cost(prob: "_ImageProblem", p) -> float:
    """A cost comparable between starts: soft-L1 of all residuals at a common 1-pixel scale."""
    saved, saved_mask = prob.sigma, prob.mask
    prob.sigma, prob.mask = np.ones_like(saved), np.ones(len(saved), bool)
    try:
        r = prob.residuals(np.asarray(p)[None])[0]
    finally:
        prob.sigma, prob.mask = saved, saved_mask
    return float(np.sum(2.0 * (np.sqrt(1.0 + r * r) - 1.0)))


def constant_acceleration_image_fit(fit: ImageFit, cameras: list[Camera], model: FlightModel, radius_px=None):
    """The nine-parameter (constant-acceleration) baseline fitted in image space to the same
    inlier observations: r(t) = r0 + v0 dt + a dt^2 / 2 projected through the cameras, with the
    apparent radius and the start hint as in the full fit. Returns a ConstantAccelerationFit."""
    from scipy.optimize import least_squares

    from .baseline import ConstantAccelerationFit

    names = fit.extra["cameras"]
    cams = {c.name: c for c in cameras}
    cam_list = [cams[n] for n in names]
    offsets = fit.extra.get("time_offsets_s") or {n: cams[n].time_offset_s for n in names}
    cam_of = np.asarray(fit.extra["camera_index"])
    inl = ~fit.outliers
    t = fit.t + np.array([offsets[names[i]] for i in cam_of])
    t, uv, ci = t[inl], fit.observed[inl], cam_of[inl]
    rad = None if radius_px is None else np.asarray(radius_px, float)[inl]
    sig = float(np.median(fit.sigma))
    t0 = fit.t0
    opt = fit.options
    hint = None if opt.start_near is None else np.asarray(opt.start_near, float)

    def positions(p, tt):
        dt = (tt - t0)[:, None]
        return p[:3] + p[3:6] * dt + 0.5 * p[6:9] * dt * dt

    def residuals(p):
        pos = positions(p, t)
        out = []
        for c, cam in enumerate(cam_list):
            m = ci == c
            pred = cam.project(pos[m])
            out.append(((np.nan_to_num(pred, nan=1e6) - uv[m]) / sig).ravel())
            if rad is not None:
                ok = np.isfinite(rad[m])
                r_pred = cam.focal_px * model.radius_m / np.maximum(cam.depth(pos[m]), 1e-3)
                s_r = np.maximum(RADIUS_SIGMA_PX, 0.08 * np.nan_to_num(rad[m]))
                out.append(np.where(ok, (r_pred - np.nan_to_num(rad[m])) / s_r, 0.0))
        if hint is not None:
            # the constant-acceleration path passes the hint's plane x = X before the first observation
            vx = p[3]
            dt_h = (hint[0] - p[0]) / vx if abs(vx) > 1e-6 else 0.0
            ph = p[:3] + p[3:6] * dt_h + 0.5 * p[6:9] * dt_h * dt_h
            out.append((ph - hint) / opt.start_sigma)
        return np.concatenate(out)

    a0 = (fit.fitted_xyz[-1] - fit.fitted_xyz[0] - fit.state0[3:] * (fit.t[-1] - fit.t[0])) * 2 / max(
        (fit.t[-1] - fit.t[0]) ** 2, 1e-6)
    p0 = np.concatenate([fit.state0[:3], fit.state0[3:], a0])
    sol = least_squares(residuals, p0, method="trf", x_scale="jac")
    J = sol.jac
    dof = max(1, J.shape[0] - 9)
    s2 = float(sol.fun @ sol.fun / dof)
    try:
        cov = np.linalg.pinv(J.T @ J) * s2
    except np.linalg.LinAlgError:
        cov = np.full((9, 9), np.nan)
    pos = positions(sol.x, t)
    return ConstantAccelerationFit(t_ref=t0, position=sol.x[:3], velocity=sol.x[3:6], acceleration=sol.x[6:9],
                                   covariance=cov, residuals=np.full_like(pos, np.nan), inliers=np.ones(len(t), bool),
                                   t_span=(float(t.min()), float(t.max())))
