"""Depth from the scene for one camera: ground contacts, field zones and the anchor that fixes the depth.

From one camera the distance along the line of sight trades off against the unknown lift. A ball
that touches the ground (at rest before the kick or hit, or at a bounce) has its centre on the
plane z = R (R the ball radius), so the ray through its image centre meets that plane at one 3D
point: the depth comes from the scene, not from the flight.

- :func:`ground_point` — pixel + camera + plane height -> 3D point with its covariance (pixel
  noise, calibration error as an equivalent pixel error, and the plane height's uncertainty, all
  propagated through the ray-plane intersection by first-order (delta-method) differentiation).
- :func:`bounce_pixel` — the image point of a bounce's contact from the tracks before and after it.
- :class:`RadiusCorrection` / :func:`radius_correction` — the detector's radius bias measured on
  a ball whose distance is known.
- :func:`choose_anchor` / :func:`apply_anchor` — which of the found anchors fixes the depth, as
  (start_near_m, start_sigma_m, name, note) for the fit settings.

Pure numpy; SI units; no printing, no files.

References
----------
Hartley & Zisserman 2004, "Multiple View Geometry", 2nd ed., sec. 8.1 (back-projection of a
point to a ray) and sec. 5.2 (first-order covariance propagation through a function).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, replace

import numpy as np

from ..errors import InputError
from .model import Camera

MIN_GRAZING_SIN = 0.02  # rays meeting the plane at under ~1 deg give no usable depth


@dataclass(frozen=True)
class GroundPoint:
    """A ball centre on a horizontal plane, from one camera.

    Attributes
    ----------
    position_m : ndarray, shape (3,) [m]
        World position of the ball centre.
    covariance_m2 : ndarray, shape (3, 3) [m^2]
        Its covariance.
    range_m : float
        Distance from the camera centre [m].
    grazing_deg : float
        Angle between the ray and the plane [deg] (small: the depth is poorly fixed).
    """

    position_m: np.ndarray
    covariance_m2: np.ndarray
    range_m: float
    grazing_deg: float

    @property
    def sigma_m(self) -> float:
        """RMS one-sigma position error per axis, sqrt(trace(C)/3) [m]."""
        return float(math.sqrt(max(np.trace(self.covariance_m2), 0.0) / 3.0))

    @property
    def horizontal_sigma_m(self) -> float:
        """Semi-major axis of the one-sigma ellipse on the plane [m]."""
        return float(math.sqrt(max(np.linalg.eigvalsh(self.covariance_m2[:2, :2]).max(), 0.0)))


def _intersect(camera: Camera, uv, z_plane: float) -> np.ndarray:
    """Points (..., 3) where the rays through pixels ``uv`` (..., 2) meet z = z_plane (NaN if not ahead)."""
    origin, d = camera.rays(np.asarray(uv, float))
    dz = d[..., 2]
    with np.errstate(divide="ignore", invalid="ignore"):
        s = (z_plane - origin[2]) / dz
    s = np.where((np.abs(dz) > 1e-12) & (s > 0), s, np.nan)
    return origin + d * s[..., None]


def ground_point(camera: Camera, uv, z_plane_m: float, *, pixel_sigma_px: float = 0.5,
                 calibration_rms_px: float = 0.0, plane_sigma_m: float = 0.0) -> GroundPoint:
    """The 3D point where the ray through an image point meets the horizontal plane z = z_plane_m.

    Parameters
    ----------
    camera : Camera
        Calibrated camera (pixels are undistorted through its Brown-Conrady model).
    uv : array_like, shape (2,) [px]
        Image point (for a ball: the centre of its image).
    z_plane_m : float [m]
        Height of the plane (for a ball on the ground: its radius).
    pixel_sigma_px : float [px]
        One-sigma error of the image point per axis.
    calibration_rms_px : float [px]
        RMS landmark error of the scene calibration; treated as an extra, independent pixel error
        (a pose error shifts a nearby ground point as a pixel error of that size would).
    plane_sigma_m : float [m]
        One-sigma uncertainty of the plane height (grass, a tee, a ball pressed into turf).

    Returns
    -------
    GroundPoint

    Raises
    ------
    InputError
        When the ray does not meet the plane in front of the camera, or meets it at a grazing angle.
    """
    uv = np.asarray(uv, float).reshape(2)
    X = _intersect(camera, uv, z_plane_m)
    if not np.all(np.isfinite(X)):
        raise InputError("the image point's ray does not meet the ground plane in front of the camera",
                         hint="check the camera file (pose, height) and that the point is on the ground")
    c = camera.centre
    ray = X - c
    rng = float(np.linalg.norm(ray))
    sin_g = abs(ray[2]) / rng
    if sin_g < MIN_GRAZING_SIN:
        raise InputError(f"the ray meets the ground at {math.degrees(math.asin(sin_g)):.1f} deg: the depth of a "
                         "ground point is not fixed from this camera", hint="raise the camera or give a start point")
    # Jacobian wrt the pixel by central differences (the undistortion has no closed form)
    h = 0.05
    J = np.empty((3, 2))
    for k in range(2):
        e = np.zeros(2)
        e[k] = h
        J[:, k] = (_intersect(camera, uv + e, z_plane_m) - _intersect(camera, uv - e, z_plane_m)) / (2 * h)
    s2 = pixel_sigma_px**2 + calibration_rms_px**2
    cov = s2 * (J @ J.T)
    if plane_sigma_m > 0:
        # moving the plane by dz moves the point along the ray by dz / (ray_z / |ray|)
        dXdz = ray / ray[2]
        cov = cov + plane_sigma_m**2 * np.outer(dXdz, dXdz)
    return GroundPoint(X, cov, rng, math.degrees(math.asin(sin_g)))


def bounce_pixel(t_before, uv_before, t_after, uv_after, n_fit: int = 6) -> tuple[np.ndarray, float, float]:
    """The image point and time of a bounce's contact from the tracks before and after it.

    Each side's last (first) ``n_fit`` image positions get a quadratic in time; the contact is the
    time between the two tracks where the two extrapolations come closest, and its pixel the mean
    of the two there.

    Parameters
    ----------
    t_before, uv_before : array_like, shapes (N,), (N, 2) [s, px]
        The falling flight (ends at the bounce).
    t_after, uv_after : array_like, shapes (M,), (M, 2) [s, px]
        The rising flight (starts at the bounce).

    Returns
    -------
    uv : ndarray, shape (2,) [px]
    t_contact : float [s]
    gap_px : float [px]
        Distance between the two extrapolations at the contact (an error estimate of ``uv``).
    """
    tb, ub = np.asarray(t_before, float)[-n_fit:], np.asarray(uv_before, float)[-n_fit:]
    ta, ua = np.asarray(t_after, float)[:n_fit], np.asarray(uv_after, float)[:n_fit]
    if len(tb) < 3 or len(ta) < 3:
        raise InputError("a bounce needs at least 3 tracked frames before and after it")
    t_ref = float(tb[-1])
    deg_b, deg_a = min(2, len(tb) - 1), min(2, len(ta) - 1)
    pb = [np.polyfit(tb - t_ref, ub[:, k], deg_b) for k in range(2)]
    pa = [np.polyfit(ta - t_ref, ua[:, k], deg_a) for k in range(2)]
    lo, hi = float(tb[-1]), float(ta[0])
    if hi < lo:
        lo, hi = hi, lo
    grid = np.linspace(lo, hi, 201) - t_ref
    gb = np.stack([np.polyval(p, grid) for p in pb], axis=-1)
    ga = np.stack([np.polyval(p, grid) for p in pa], axis=-1)
    gap = np.linalg.norm(gb - ga, axis=1)
    i = int(np.argmin(gap))
    return 0.5 * (gb[i] + ga[i]), float(grid[i] + t_ref), float(gap[i])


# ------------------------------------------------------------------------------ apparent size
@dataclass(frozen=True)
class RadiusCorrection:
    """The detector's radius bias measured on a ball at a known distance.

    The detector's radius (second moments of a soft matte) is biased by the edge threshold, the
    blur and the shading by about the same number of pixels for every ball image of a clip, so
    the bias is carried as an additive term: corrected = measured - bias_px.

    Attributes
    ----------
    bias_px : float [px]
        Measured minus projected radius.
    bias_sigma_px : float [px]
        Its one-sigma uncertainty (the measurement's scatter and the anchor's range error).
    scale : float
        Measured / projected radius (the same bias read as a scale, for reference).
    projected_px : float [px]
        The projected radius f R / depth at the anchor.
    """

    bias_px: float
    bias_sigma_px: float
    scale: float
    projected_px: float

    def apply(self, radius_px):
        """Corrected radii (same shape as ``radius_px``) [px]: measured minus the bias."""
        r = np.asarray(radius_px, float) - self.bias_px
        return np.where(r > 0, r, np.nan)


def radius_correction(camera: Camera, anchor: GroundPoint, ball_radius_m: float, measured_px,
                      ) -> RadiusCorrection:
    """The detector's radius bias from a ball whose centre ``anchor`` is known.

    Parameters
    ----------
    camera : Camera
    anchor : GroundPoint
        The ball's centre (e.g. from :func:`ground_point` on the resting ball).
    ball_radius_m : float [m]
    measured_px : array_like, shape (K,) [px]
        The detector's radius of the ball in K frames (or one value).

    Returns
    -------
    RadiusCorrection
    """
    m = np.asarray(measured_px, float).ravel()
    m = m[np.isfinite(m)]
    if len(m) == 0:
        raise InputError("no measured radius of the resting ball")
    depth = float(camera.depth(anchor.position_m[None])[0])
    if depth <= ball_radius_m:
        raise InputError("the anchor lies behind or at the camera")
    proj = camera.focal_px * ball_radius_m / depth
    meas = float(np.median(m))
    scatter = float(1.4826 * np.median(np.abs(m - meas)) / math.sqrt(len(m))) if len(m) > 1 else 0.3
    # range error of the anchor: d(proj)/d(depth) = -proj / depth
    axis = camera.R[2]
    depth_sigma = float(math.sqrt(max(axis @ anchor.covariance_m2 @ axis, 0.0)))
    sig = math.hypot(scatter, proj * depth_sigma / depth)
    return RadiusCorrection(meas - proj, sig, meas / proj, proj)


# ------------------------------------------------------------------------------ choosing the anchor
ANCHOR_NAMES = ("ground contact", "bounce contact", "start hint", "template zone", "apparent size", "none")


@dataclass(frozen=True)
class Anchor:
    """What fixes the depth of a one-camera fit.

    Attributes
    ----------
    name : str
        One of :data:`ANCHOR_NAMES`.
    start_near_m : tuple of 3 floats or None [m]
        The start point for the fit (``FitSettings.start_near_m``).
    start_sigma_m : float [m]
        Its one-sigma uncertainty (``FitSettings.start_sigma_m``).
    note : str
        One sentence for the console, the record and the report.
    """

    name: str
    start_near_m: tuple[float, float, float] | None
    start_sigma_m: float
    note: str

    def as_tuple(self):
        """(start_near_m, start_sigma_m, name, note)."""
        return self.start_near_m, self.start_sigma_m, self.name, self.note


def _fmt(p) -> str:
    return "(" + ", ".join(f"{x:.2f}" for x in p) + ") m"


def choose_anchor(*, resting: GroundPoint | None = None, bounce: GroundPoint | None = None,
                  zone: tuple[np.ndarray, float, str] | None = None,
                  hint: tuple[tuple[float, float, float], float] | None = None,
                  radii_observed: bool = False, min_sigma_m: float = 0.02) -> Anchor:
    """Pick the anchor that fixes the depth, best first: a ball at rest where the flight starts,
    then a bounce contact that starts the flight, then the user's start hint, then a template's
    launch zone; otherwise the apparent size (if radii were measured) or nothing.

    Parameters
    ----------
    resting, bounce : GroundPoint, optional
        Ground contacts found in the clip.
    zone : (centre (3,), sigma, label), optional
        A soft prior from the scene template [m, m].
    hint : ((x, y, z), sigma), optional
        The user's start point [m, m].
    radii_observed : bool
        The observations carry apparent radii.
    min_sigma_m : float [m]
        Floor of a ground contact's sigma (the ball is not a point; the flight's first observed
        frame is not the contact).

    Returns
    -------
    Anchor
        (``start_near_m`` is None for "apparent size" and "none").
    """
    notes = []
    if hint is not None:
        h, hs = np.asarray(hint[0], float), float(hint[1])
    for label, gp in (("ground contact", resting), ("bounce contact", bounce)):
        if gp is None:
            continue
        sig = max(min_sigma_m, gp.sigma_m)
        what = "the ball at rest before the flight" if label == "ground contact" else "the bounce that starts the flight"
        note = (f"depth from {what}: its centre on the ground plane at {_fmt(gp.position_m)} ± {100 * sig:.0f} cm "
                f"({gp.range_m:.1f} m from the camera)")
        if hint is not None:
            gap = float(np.linalg.norm(gp.position_m - h))
            if gap > 3 * math.hypot(hs, sig) * math.sqrt(3):
                notes.append(f"the given start point {_fmt(h)} is {gap:.2f} m from it and was not used")
            else:
                notes.append("the given start point agrees with it")
        return Anchor(label, tuple(map(float, gp.position_m)), sig, "; ".join([note] + notes))
    if hint is not None:
        return Anchor("start hint", tuple(map(float, h)), hs, f"depth from the given start point {_fmt(h)} ± {hs:.2f} m")
    if zone is not None:
        c, s, label = np.asarray(zone[0], float), float(zone[1]), zone[2]
        return Anchor("template zone", tuple(map(float, c)), s,
                      f"depth from the field: the launch zone '{label}' at {_fmt(c)} ± {s:.2f} m (no contact seen)")
    if radii_observed:
        return Anchor("apparent size", None, 0.3, "depth from the ball's apparent size only (no contact, zone or "
                      "start point): the launch depth is uncertain, see its sigma")
    return Anchor("none", None, 0.3, "nothing fixes the depth from this camera")


def apply_anchor(settings, anchor: Anchor):
    """``settings`` (a ``balltraj.pipeline.FitSettings``) with the anchor's start point and sigma;
    unchanged when the anchor gives no start point."""
    if anchor.start_near_m is None:
        return settings
    return replace(settings, start_near_m=tuple(anchor.start_near_m), start_sigma_m=float(anchor.start_sigma_m))


__all__ = ["GroundPoint", "ground_point", "bounce_pixel", "RadiusCorrection", "radius_correction", "Anchor",
           "ANCHOR_NAMES", "choose_anchor", "apply_anchor"]
