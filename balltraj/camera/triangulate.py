"""Triangulation of pixel observations from two or more calibrated cameras (linear DLT on
undistorted normalised coordinates; Hartley & Zisserman, Multiple View Geometry, 2nd ed., 12.2)."""

from __future__ import annotations

import numpy as np

from ..errors import InputError
from .model import Camera


def triangulate_points(cameras: list[Camera], uvs: list[np.ndarray]) -> np.ndarray:
    """Triangulate points seen by several cameras (the linear DLT solution over all views, by SVD).

    Parameters
    ----------
    cameras : list of Camera
    uvs : list of ndarray, each shape (N, 2) [px]
        The pixels of the same N points in each camera; a NaN row skips that view.

    Returns
    -------
    ndarray, shape (N, 3) [m]
        World points; NaN where fewer than two views see a point.
    """
    n = uvs[0].shape[0]
    rows = []
    for cam, uv in zip(cameras, uvs):
        xn = cam.undistort_normalised(uv)
        P = np.hstack([cam.R, cam.tvec[:, None]])
        rows.append((xn, P))
    out = np.full((n, 3), np.nan)
    for i in range(n):
        A = []
        for xn, P in rows:
            x, y = xn[i]
            if not (np.isfinite(x) and np.isfinite(y)):
                continue
            A.append(x * P[2] - P[0])
            A.append(y * P[2] - P[1])
        if len(A) < 4:
            continue
        _, _, vt = np.linalg.svd(np.asarray(A))
        X = vt[-1]
        if abs(X[3]) > 1e-12:
            out[i] = X[:3] / X[3]
    return out


def interpolate_track(t, uv, t_new) -> np.ndarray:
    """Linear interpolation of one camera's pixel track at other times (NaN outside or across gaps
    longer than three frame intervals)."""
    t = np.asarray(t, float)
    out = np.column_stack([np.interp(t_new, t, uv[:, 0], left=np.nan, right=np.nan),
                           np.interp(t_new, t, uv[:, 1], left=np.nan, right=np.nan)])
    if len(t) > 1:
        dt = np.median(np.diff(t))
        j = np.clip(np.searchsorted(t, t_new), 1, len(t) - 1)
        gap = (t[j] - t[j - 1]) > 3 * dt
        out[gap] = np.nan
    return out


def triangulate_observations(t, camera_names, uv, cameras: list[Camera]):
    """A 3D track (t, xyz) from observations of several cameras: at each time of the camera with
    the most observations, the other cameras' tracks are interpolated (times shifted by each
    camera's ``time_offset_s``) and the point triangulated."""
    names = [c.name for c in cameras]
    unknown = sorted(set(camera_names) - set(names))
    if unknown:
        raise InputError(f"observations name camera(s) {', '.join(unknown)} not in the camera file",
                         hint=f"the rig holds: {', '.join(names)}")
    t = np.asarray(t, float)
    per = {}
    cn = np.asarray(camera_names)
    for cam in cameras:
        m = cn == cam.name
        if m.sum() >= 2:
            per[cam.name] = (t[m] + cam.time_offset_s, uv[m])
    if len(per) < 2:
        raise InputError("triangulation needs observations from at least two cameras")
    ref = max(per, key=lambda k: len(per[k][0]))
    t_ref = per[ref][0]
    cams = [c for c in cameras if c.name in per]
    uvs = [per[c.name][1] if c.name == ref else interpolate_track(*per[c.name], t_ref) for c in cams]
    xyz = triangulate_points(cams, uvs)
    ok = np.all(np.isfinite(xyz), axis=1)
    return t_ref[ok], xyz[ok]


def reprojection_spread(cam_a: Camera, t_a, uv_a, cam_b: Camera, t_b, uv_b, offset_s: float) -> tuple[float, int]:
    """Median reprojection error [px] of the points triangulated from two cameras' tracks when
    camera b's clock runs ``offset_s`` [s] behind camera a's (b's time + offset = a's time), and
    the number of points that overlap in time."""
    t_a = np.asarray(t_a, float)
    uv_b_at_a = interpolate_track(np.asarray(t_b, float) + offset_s, np.asarray(uv_b, float), t_a)
    ok = np.all(np.isfinite(uv_b_at_a), axis=1)
    if ok.sum() < 4:
        return float("inf"), int(ok.sum())
    X = triangulate_points([cam_a, cam_b], [np.asarray(uv_a, float)[ok], uv_b_at_a[ok]])
    good = np.all(np.isfinite(X), axis=1)
    if good.sum() < 4:
        return float("inf"), int(good.sum())
    err = np.concatenate([np.linalg.norm(cam_a.project(X[good]) - np.asarray(uv_a, float)[ok][good], axis=1),
                          np.linalg.norm(cam_b.project(X[good]) - uv_b_at_a[ok][good], axis=1)])
    err = np.where(np.isfinite(err), err, 1e6)  # a point triangulated behind a camera: far off
    return float(np.median(err)), int(good.sum())


def estimate_time_offset(cam_a: Camera, t_a, uv_a, cam_b: Camera, t_b, uv_b, *, guess_s: float = 0.0,
                         search_s: float = 0.5, step_s: float = 0.002) -> tuple[float, float]:
    """The clock offset [s] between two unsynchronised cameras that film the same flight: the shift
    of camera b's times that makes the two tracks triangulate most consistently (a scan of the
    median reprojection error over ``guess_s`` ± ``search_s``, refined by a parabola through the
    best three steps). Returns (offset [s], median reprojection error there [px]); the error is
    infinite when the tracks never overlap.

    Parameters
    ----------
    cam_a, cam_b : Camera
    t_a, t_b : array_like, shape (N,), (M,) [s]
        Each camera's own observation times.
    uv_a, uv_b : array_like, shape (N, 2), (M, 2) [px]
    """
    # the two tracks must overlap by at least a quarter of the shorter one
    grid = np.arange(guess_s - search_s, guess_s + search_s + step_s / 2, step_s)
    need = max(4, min(len(t_a), len(t_b)) // 4)
    costs = np.full(len(grid), np.inf)
    for i, o in enumerate(grid):
        err, n = reprojection_spread(cam_a, t_a, uv_a, cam_b, t_b, uv_b, float(o))
        if n >= need:
            costs[i] = err
    k = int(np.argmin(costs))
    if not np.isfinite(costs[k]):
        return float(guess_s), float("inf")
    best = float(grid[k])
    if 0 < k < len(grid) - 1 and np.all(np.isfinite(costs[k - 1:k + 2])):
        c0, c1, c2 = costs[k - 1:k + 2]
        den = c0 - 2 * c1 + c2
        if den > 0:
            best += 0.5 * step_s * (c0 - c2) / den
    return best, float(costs[k])
