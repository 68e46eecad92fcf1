"""Pinhole camera with Brown-Conrady lens distortion, in plain numpy (batched, no OpenCV).

Convention (OpenCV's): x_cam = R(rvec) X_world + tvec; x' = x/z, y' = y/z; with r^2 = x'^2 + y'^2,
x'' = x' (1 + k1 r^2 + k2 r^4 + k3 r^6) + 2 p1 x'y' + p2 (r^2 + 2x'^2),
y'' = y' (1 + k1 r^2 + k2 r^4 + k3 r^6) + p1 (r^2 + 2y'^2) + 2 p2 x'y';
u = fx x'' + s y'' + cx, v = fy y'' + cy. Pixel origin at the top-left of the image, u right, v down.

References
----------
Brown 1966, "Decentering distortion of lenses", Photogrammetric Engineering 32(3):444-462;
Conrady 1919; the OpenCV calib3d documentation uses the same model (from memory).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

from ..errors import InputError


def rodrigues(rvec) -> np.ndarray:
    """Rotation matrix of a rotation vector (axis times angle), as ``cv2.Rodrigues``.

    Parameters
    ----------
    rvec : array_like, shape (3,) [rad]

    Returns
    -------
    ndarray, shape (3, 3)

    >>> import numpy as np
    >>> np.round(rodrigues([0, 0, np.pi / 2]) @ [1, 0, 0], 12).tolist()
    [0.0, 1.0, 0.0]
    """
    r = np.asarray(rvec, dtype=float).reshape(3)
    th = float(np.linalg.norm(r))
    if th < 1e-12:
        return np.eye(3)
    k = r / th
    Kx = np.array([[0, -k[2], k[1]], [k[2], 0, -k[0]], [-k[1], k[0], 0]])
    return np.eye(3) + math.sin(th) * Kx + (1 - math.cos(th)) * Kx @ Kx


def rotation_vector(R) -> np.ndarray:
    """Rotation vector, shape (3,) [rad], of a rotation matrix, shape (3, 3) (inverse of :func:`rodrigues`)."""
    R = np.asarray(R, dtype=float)
    c = (np.trace(R) - 1) / 2
    th = math.acos(max(-1.0, min(1.0, c)))
    if th < 1e-12:
        return np.zeros(3)
    if abs(th - math.pi) < 1e-6:
        w, V = np.linalg.eigh((R + np.eye(3)) / 2)
        k = V[:, np.argmax(w)]
        return k * th
    v = np.array([R[2, 1] - R[1, 2], R[0, 2] - R[2, 0], R[1, 0] - R[0, 1]]) / (2 * math.sin(th))
    return v * th


@dataclass(frozen=True)
class Camera:
    name: str
    image_size: tuple[int, int]  # (width, height) [px]
    K: np.ndarray  # (3, 3)
    dist: np.ndarray  # (5,) k1 k2 p1 p2 k3
    rvec: np.ndarray  # (3,)
    tvec: np.ndarray  # (3,) [m]
    readout_s: float = 0.0  # rolling-shutter readout time over the full height [s]
    time_offset_s: float = 0.0  # added to this camera's observation times to get rig time [s]
    #: the field template the scene calibration used (``balltraj.camera.calibrate.TEMPLATES``) and
    #: the world frame it defined, in words; None for cameras placed otherwise (old files too)
    template: str | None = field(default=None, compare=False)
    world_frame: str | None = field(default=None, compare=False)
    R: np.ndarray = field(init=False, repr=False, compare=False)

    def __post_init__(self):
        object.__setattr__(self, "K", np.asarray(self.K, dtype=float).reshape(3, 3))
        object.__setattr__(self, "dist", np.asarray(self.dist, dtype=float).reshape(5))
        object.__setattr__(self, "rvec", np.asarray(self.rvec, dtype=float).reshape(3))
        object.__setattr__(self, "tvec", np.asarray(self.tvec, dtype=float).reshape(3))
        object.__setattr__(self, "R", rodrigues(self.rvec))

    @property
    def centre(self) -> np.ndarray:
        """Camera centre in world coordinates [m]."""
        return -self.R.T @ self.tvec

    @property
    def focal_px(self) -> float:
        return 0.5 * (self.K[0, 0] + self.K[1, 1])

    def to_cam(self, X) -> np.ndarray:
        """World points, shape (..., 3) [m] -> camera coordinates R X + t, shape (..., 3) [m]."""
        return np.asarray(X, dtype=float) @ self.R.T + self.tvec

    def distort(self, xn) -> np.ndarray:
        """Brown–Conrady distortion: normalised undistorted coordinates, shape (..., 2) -> normalised
        distorted coordinates, shape (..., 2) (k1, k2, k3 radial; p1, p2 tangential; OpenCV order)."""
        k1, k2, p1, p2, k3 = self.dist
        x, y = xn[..., 0], xn[..., 1]
        r2 = x * x + y * y
        radial = 1 + r2 * (k1 + r2 * (k2 + r2 * k3))
        xd = x * radial + 2 * p1 * x * y + p2 * (r2 + 2 * x * x)
        yd = y * radial + p1 * (r2 + 2 * y * y) + 2 * p2 * x * y
        return np.stack([xd, yd], axis=-1)

    def project(self, X) -> np.ndarray:
        """Project world points.

        Parameters
        ----------
        X : array_like, shape (..., 3) [m]
            Points in the world frame.

        Returns
        -------
        ndarray, shape (..., 2) [px]
            Pixel positions (origin top-left, x right, y down); NaN for points behind the camera.
        """
        Xc = self.to_cam(X)
        z = Xc[..., 2]
        zs = np.where(z > 1e-9, z, np.nan)
        xn = np.stack([Xc[..., 0] / zs, Xc[..., 1] / zs], axis=-1)
        xd = self.distort(xn)
        K = self.K
        u = K[0, 0] * xd[..., 0] + K[0, 1] * xd[..., 1] + K[0, 2]
        v = K[1, 1] * xd[..., 1] + K[1, 2]
        return np.stack([u, v], axis=-1)

    def depth(self, X) -> np.ndarray:
        """Distance along the optical axis [m] of world points, shape (..., 3) -> (...)."""
        return self.to_cam(X)[..., 2]

    def undistort_normalised(self, uv, iterations: int = 50) -> np.ndarray:
        """Pixels (..., 2) -> normalised undistorted coordinates (fixed-point iteration, as
        OpenCV's undistortPoints; 50 iterations reach 1e-10 px for moderate distortion)."""
        uv = np.asarray(uv, dtype=float)
        K = self.K
        yd = (uv[..., 1] - K[1, 2]) / K[1, 1]
        xd = (uv[..., 0] - K[0, 2] - K[0, 1] * yd) / K[0, 0]
        k1, k2, p1, p2, k3 = self.dist
        x, y = xd.copy(), yd.copy()
        for _ in range(iterations):
            r2 = x * x + y * y
            radial = 1 + r2 * (k1 + r2 * (k2 + r2 * k3))
            dx = 2 * p1 * x * y + p2 * (r2 + 2 * x * x)
            dy = p1 * (r2 + 2 * y * y) + 2 * p2 * x * y
            x = (xd - dx) / radial
            y = (yd - dy) / radial
        return np.stack([x, y], axis=-1)

    def rays(self, uv) -> tuple[np.ndarray, np.ndarray]:
        """Back-project pixels into rays.

        Parameters
        ----------
        uv : array_like, shape (..., 2) [px]

        Returns
        -------
        origin : ndarray, shape (3,) [m]
            The camera centre in the world frame.
        directions : ndarray, shape (..., 3)
            Unit ray directions in the world frame (lens distortion removed).
        """
        xn = self.undistort_normalised(uv)
        d_cam = np.concatenate([xn, np.ones(xn.shape[:-1] + (1,))], axis=-1)
        d = d_cam @ self.R  # R^T d for row vectors
        return self.centre, d / np.linalg.norm(d, axis=-1, keepdims=True)

    def to_dict(self) -> dict:
        d = {"name": self.name, "image_size": [int(self.image_size[0]), int(self.image_size[1])],
             "K": self.K.tolist(), "dist": self.dist.tolist(), "rvec": self.rvec.tolist(),
             "tvec": self.tvec.tolist()}
        if self.readout_s:
            d["readout_s"] = self.readout_s
        if self.time_offset_s:
            d["time_offset_s"] = self.time_offset_s
        if self.template is not None:
            d["template"] = {"name": self.template, "world_frame": self.world_frame or ""}
        return d


def _num_list(v, n, key):
    if not isinstance(v, list) or len(v) != n:
        raise InputError(f"{key!r} must be a list of {n} numbers")
    out = []
    for x in v:
        if isinstance(x, bool) or not isinstance(x, (int, float)) or not math.isfinite(x):
            raise InputError(f"{key!r} must hold finite numbers")
        out.append(float(x))
    return out


def camera_from_dict(d) -> Camera:
    """Validate a camera object of the camera-file contract (docs/formats.md)."""
    if not isinstance(d, dict):
        raise InputError("a camera must be a JSON object")
    for key in ("name", "image_size", "K", "dist", "rvec", "tvec"):
        if key not in d:
            raise InputError(f"missing key {key!r}", hint="a camera needs name, image_size, K, dist, rvec, tvec")
    if not isinstance(d["name"], str) or not d["name"].strip():
        raise InputError("'name' must be a non-empty string")
    size = _num_list(d["image_size"], 2, "image_size")
    if not all(s >= 16 and s <= 20000 and float(s).is_integer() for s in size):
        raise InputError("'image_size' must be two whole numbers of pixels (width, height)")
    K = d["K"]
    if not (isinstance(K, list) and len(K) == 3):
        raise InputError("'K' must be a 3x3 matrix (list of three rows)")
    Km = np.array([_num_list(row, 3, "K") for row in K])
    if abs(np.linalg.det(Km)) < 1e-9 or Km[0, 0] <= 0 or Km[1, 1] <= 0 or abs(Km[2, 2] - 1) > 1e-9 \
            or np.any(np.abs(Km[[1, 2, 2], [0, 0, 1]]) > 1e-9):
        raise InputError("'K' is not a camera matrix [[fx, s, cx], [0, fy, cy], [0, 0, 1]] with fx, fy > 0",
                         hint="check the calibration file")
    dist = d["dist"]
    if not isinstance(dist, list) or len(dist) not in (4, 5):
        raise InputError(f"'dist' must hold 5 numbers k1, k2, p1, p2, k3 (got {len(dist) if isinstance(dist, list) else 'no list'})")
    dl = _num_list(dist, len(dist), "dist") + ([0.0] if len(dist) == 4 else [])
    if max(abs(x) for x in dl) > 100:
        raise InputError("'dist' coefficients are absurdly large")
    readout = d.get("readout_s", 0.0)
    offset = d.get("time_offset_s", 0.0)
    for key, val, lo, hi in (("readout_s", readout, 0.0, 0.1), ("time_offset_s", offset, -3600.0, 3600.0)):
        if isinstance(val, bool) or not isinstance(val, (int, float)) or not (lo <= val <= hi):
            raise InputError(f"{key!r} must be a number in {lo}..{hi} s")
    template, frame = _template_key(d.get("template"))
    return Camera(name=d["name"].strip(), image_size=(int(size[0]), int(size[1])), K=Km, dist=np.array(dl),
                  rvec=np.array(_num_list(d["rvec"], 3, "rvec")), tvec=np.array(_num_list(d["tvec"], 3, "tvec")),
                  readout_s=float(readout), time_offset_s=float(offset), template=template, world_frame=frame)


def _template_key(v) -> tuple[str | None, str | None]:
    """The optional ``template`` key: {"name": template name, "world_frame": the frame in words}.
    Absent (files from before the key, or cameras not placed on a template): (None, None)."""
    if v is None:
        return None, None
    if not isinstance(v, dict) or not isinstance(v.get("name"), str) or not v["name"].strip():
        raise InputError("'template' must be an object with a non-empty 'name' (the field template the scene "
                         "calibration used) and its 'world_frame'", hint="re-run the scene calibration, or drop the key")
    frame = v.get("world_frame", "")
    if not isinstance(frame, str):
        raise InputError("'template.world_frame' must be a string (the world frame in words)")
    return v["name"].strip(), frame


def cameras_from_json(obj) -> list[Camera]:
    """A camera file (one camera) or a rig file ({"cameras": [...]})."""
    if isinstance(obj, dict) and "cameras" in obj:
        cams = obj["cameras"]
        if not isinstance(cams, list) or not cams:
            raise InputError("'cameras' must be a non-empty list")
        out = []
        for i, c in enumerate(cams):
            try:
                out.append(camera_from_dict(c))
            except InputError as e:
                raise InputError(f"camera {i + 1}: {e.problem}", hint=e.hint) from None
        names = [c.name for c in out]
        if len(set(names)) != len(names):
            raise InputError("two cameras in the rig share a name")
        return out
    return [camera_from_dict(obj)]


def look_at_camera(name, centre, target, focal_px, image_size, dist=(0, 0, 0, 0, 0), up=(0, 0, 1),
                   readout_s=0.0, time_offset_s=0.0) -> Camera:
    """A camera at ``centre`` looking at ``target`` (for synthetic scenes and tests)."""
    c = np.asarray(centre, float)
    f = np.asarray(target, float) - c
    f /= np.linalg.norm(f)
    r = np.cross(f, up)
    r /= np.linalg.norm(r)
    d = np.cross(f, r)  # image y (down)
    R = np.stack([r, d, f])
    w, h = image_size
    K = np.array([[focal_px, 0, w / 2], [0, focal_px, h / 2], [0, 0, 1]])
    return Camera(name, (w, h), K, np.asarray(dist, float), rotation_vector(R), -R @ c, readout_s, time_offset_s)
