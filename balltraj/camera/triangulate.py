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
