"""The full spin of a tracked flight: the ball's surface read over the first frames of the flight
(:mod:`balltraj.vision.surface_spin`), fused with the flight fit's transverse spin
(:mod:`balltraj.vision.surface_fusion`) into the record's spin section.

Used by :func:`balltraj.pipeline.analyze_clip`. When the surface cannot be read (the clip too slow, the
ball too small, no markings, ...) the record keeps the flight fit's transverse-only spin and says why
under ``spin.surface``. Reads only the clip it is given.
"""
from __future__ import annotations

import math

import numpy as np

from .camera.model import Camera
from .errors import BallTrajError
from .fitting.analysis import effective_spin, spin_axis_words
from .fitting.flight_fit import FlightFit, transverse_basis
from .vision.surface_fusion import fuse_spin
from .vision.surface_spin import SurfaceSpin, estimate_surface_spin
from .vision.surface_window import read_windows

#: the surface is read over this long a window from the first tracked frame [s]
WINDOW_S = 0.04
#: smallest median apparent radius read [px] (bench_surface_spin: the targets hold from 10 px)
MIN_RADIUS_PX = 10.0
#: slowest frame rate read [frames/s] (bench_surface_spin: the targets hold from 240 frames/s)
MIN_FPS = 240.0


def read_flight_surface(path, flight, camera: Camera, *, capture_fps: float | None = None,
                        window_s: float = WINDOW_S) -> SurfaceSpin:
    """Read the spin from the ball's surface over the first ``window_s`` of a tracked flight.

    Parameters
    ----------
    path : path-like
        The clip the flight was tracked in.
    flight : TrackedFlight
        Its tracked points: times ``t`` (N,) [s], frame indices ``frame`` (N,), centres ``uv`` (N, 2) [px],
        apparent radii ``radius_px`` (N,) [px].
    camera : Camera
        The camera that filmed it (undistorts the surface; the spin comes out in the world frame).
    capture_fps : float, optional [frames/s]
        True capture rate of a time-stretched slow-motion file.

    Returns
    -------
    SurfaceSpin
        ``readable`` False with a ``reason`` when the clip, the ball's size or the surface do not allow it.
    """
    return FlightSurfaces(path, [flight], camera, capture_fps=capture_fps, window_s=window_s).read(flight)


def frame_rate(flight) -> float:
    """Frame rate [frames/s] of a tracked flight (median spacing of its times); 0 when unknown."""
    dts = np.diff(np.asarray(flight.t, float))
    return 1.0 / float(np.median(dts)) if len(dts) and np.median(dts) > 0 else 0.0


class FlightSurfaces:
    """The surface spin of the tracked flights of one clip; the frames of every flight's window are decoded
    once, in one pass through the clip, the first time a flight is read (and only when one can be).

    Parameters
    ----------
    path : path-like
        The clip.
    flights : sequence of TrackedFlight
        Its tracked flights.
    camera : Camera
        The camera that filmed it.
    capture_fps : float, optional [frames/s]
        True capture rate of a time-stretched slow-motion file.
    window_s : float [s]
        The surface is read over this long a window from each flight's first tracked frame.
    refinements : sequence of RadiusRefinement, optional
        The flights' edge fits (``vision/ball_size.py``), in the same order: their silhouette centres start
        the surface reader's disc fits (the blob centroid of a shaded ball sits up to a third of a radius
        toward its lit side, outside the disc fit's reach; docs/validation.md).
    """

    def __init__(self, path, flights, camera: Camera, *, capture_fps: float | None = None,
                 window_s: float = WINDOW_S, refinements=None):
        self.path, self.camera, self.capture_fps, self.window_s = path, camera, capture_fps, window_s
        self._centres = {f.flight: r.centre_px for f, r in zip(flights, refinements or [])
                         if getattr(r, "centre_px", None) is not None}
        self._plans = {f.flight: _plan(f, window_s) for f in flights}
        self._times = {f.flight: np.asarray(f.t, float) for f in flights}
        self._frames: dict | None = None
        self._error = ""

    def read(self, flight) -> SurfaceSpin:
        """The spin read from the surface of ``flight`` (one of the flights given), or why it could not be."""
        if flight.flight not in self._plans:  # a flight not given at first: decode again with it
            self._plans[flight.flight] = _plan(flight, self.window_s)
            self._times[flight.flight] = np.asarray(flight.t, float)
            self._frames = None
        plan = self._plans[flight.flight]
        if isinstance(plan, SurfaceSpin):
            return plan
        if self._frames is None:
            self._decode()
        if flight.flight not in (self._frames or {}):
            return SurfaceSpin(readable=False, reason=f"the frames could not be read again: {self._error}")
        frames, times, index = self._frames[flight.flight]
        win, fps = plan
        frame_idx = np.asarray(flight.frame, int)[win]
        # every frame of the window (a frame the tracker missed keeps the frame gaps honest): the centre and
        # radius of the tracked neighbours, interpolated
        keep = (index >= frame_idx[0]) & (index <= frame_idx[-1])
        uv = np.asarray(self._centres.get(flight.flight, flight.uv), float)[win]
        radius = np.asarray(flight.radius_px, float)[win]
        k = index[keep]
        centres = np.stack([np.interp(k, frame_idx, uv[:, 0]), np.interp(k, frame_idx, uv[:, 1])], 1)
        good = np.isfinite(radius)
        radii = np.interp(k, frame_idx[good], radius[good])
        return estimate_surface_spin([f for f, m in zip(frames, keep) if m], times[keep], centres, radii,
                                     camera=self.camera)

    def _decode(self):
        todo = [(fl, p) for fl, p in self._plans.items() if not isinstance(p, SurfaceSpin)]
        windows = []
        for fl, (win, fps) in todo:
            t = self._times[fl][win]
            windows.append((float(t[0]) - 0.5 / fps, float(t[-1]) + 0.5 / fps))
        try:
            got = read_windows(self.path, windows, capture_fps=self.capture_fps)
        except BallTrajError as e:
            self._frames, self._error = {}, e.one_line()
            return
        self._frames = {fl: g for (fl, _), g in zip(todo, got)}


def _plan(flight, window_s):
    """The window of a flight to read (its mask over the tracked points, the frame rate), or a SurfaceSpin
    that says why there is none."""
    t = np.asarray(flight.t, float)
    win = t <= t[0] + window_s
    if win.sum() < 4:
        return SurfaceSpin(readable=False, reason=f"only {int(win.sum())} frames in the first "
                           f"{1000 * window_s:.0f} ms of the flight (need 4)")
    dts = np.diff(t[win])
    fps = 1.0 / float(np.median(dts)) if len(dts) and np.median(dts) > 0 else 0.0
    if fps < 0.98 * MIN_FPS:  # a container clock a little off the nominal rate still counts
        return SurfaceSpin(readable=False, reason=f"the clip runs at {fps:.0f} frames/s; reading the spin from "
                           f"the ball's surface needs at least {MIN_FPS:.0f} frames/s")
    radius = np.asarray(flight.radius_px, float)[win]
    r_med = float(np.nanmedian(radius)) if np.isfinite(radius).any() else math.nan
    if not r_med >= MIN_RADIUS_PX:
        return SurfaceSpin(readable=False, reason=f"the ball is {r_med:.1f} px in radius in the image; reading the "
                           f"spin from its surface needs at least {MIN_RADIUS_PX:.0f} px: film closer or zoom in")
    return win, fps


def flight_spin_covariance(fit: FlightFit, v0, model=None) -> tuple[np.ndarray, np.ndarray]:
    """The flight fit's transverse spin vector and its covariance in the world frame.

    Parameters
    ----------
    fit : FlightFit
        The fit (its two spin unknowns are components on the basis across its start velocity).
    v0 : array_like, shape (3,) [m/s]
        Velocity the spin is referred to (launch).
    model : FlightModel, optional
        The fit's flight model (needed only with a free lift coefficient).

    Returns
    -------
    spin : ndarray, shape (3,) [rad/s]
    covariance : ndarray, shape (3, 3) [rad^2/s^2]
        Rank 2 (nothing along the velocity). With a free lift coefficient the components are lift
        coefficients: scaled by the rate the ball's lift law gives per unit of lift.
    """
    names = list(fit.names)
    i = names.index("lift_1") if "lift_1" in names else names.index("spin_1")
    C2 = np.asarray(fit.covariance, float)[i:i + 2, i:i + 2]
    e1, e2 = transverse_basis(np.asarray(fit.state0[3:], float))
    B = np.stack([e1[0], e2[0]], 1)  # (3, 2)
    w = np.asarray(fit.spin, float)
    scale = 1.0
    if math.isfinite(fit.lift_override):
        w_eff = effective_spin(fit.spin, fit.lift_override, v0, model) if model is not None else w * math.nan
        n = float(np.linalg.norm(fit.spin))
        scale = float(np.linalg.norm(w_eff)) / n if n > 0 else math.nan
        w = w_eff
    return np.nan_to_num(w), scale ** 2 * B @ C2 @ B.T


def apply_surface_spin(record: dict, fit: FlightFit | None, surface: SurfaceSpin, *, model=None,
                       camera_name: str | None = None) -> dict:
    """Put the surface reading into a fitted flight's record (in place; also returned).

    Readable: ``record["spin"]`` becomes the fused full spin (:func:`fuse_spin`, keys of the flight-file
    contract kept, ``gyro_observed`` true, ``agreement`` with the flight fit) and
    ``record["uncertainty"]["spin"]`` its sigmas. Not readable: the transverse-only spin is kept and
    ``record["spin"]["surface"]`` says why.

    Parameters
    ----------
    record : dict
        A flight record of :func:`balltraj.record.build.fit_record`.
    fit : FlightFit or None
        The fit it was built from (None: the surface is not used).
    surface : SurfaceSpin
        The spin read from the ball's surface, in the world frame.
    model : FlightModel, optional
        The flight model of the fit (needed only with a free lift coefficient).
    camera_name : str, optional
        The camera whose clip the surface was read from (a rig), named under ``spin.surface.camera``.
    """
    _apply(record, fit, surface, model)
    if camera_name is not None:
        record["spin"]["surface"]["camera"] = camera_name
    return record


def _apply(record: dict, fit: FlightFit | None, surface: SurfaceSpin, model=None) -> dict:
    old = record["spin"]
    if fit is None or not surface.readable or surface.frame != "world":
        reason = surface.reason or ("no flight fit to compare with" if fit is None else
                                    "the surface was read without a camera")
        old["surface"] = {"readable": False, "reason": reason}
        return record
    v0 = np.asarray(record["launch"]["velocity_mps"], float)
    w_f, C_f = flight_spin_covariance(fit, v0, model)
    if not (np.all(np.isfinite(w_f)) and np.all(np.isfinite(C_f))):
        old["surface"] = {"readable": False, "reason": "the flight fit's spin has no finite uncertainty to compare "
                                                       "the surface with", "reading": surface.to_dict()}
        return record
    fused = fuse_spin(surface.spin_radps, surface.covariance, w_f, C_f, v0, surface=surface.to_dict())
    fused["transverse_share"] = fused.pop("spin_efficiency")
    unc = fused.pop("uncertainty")
    unc["transverse_share"] = unc.pop("spin_efficiency")
    fused["observable"] = True
    fused["axis_in_words"] = spin_axis_words(fused["transverse_axis"], v0)
    old_unc = record.setdefault("uncertainty", {}).get("spin") or {}
    unc["transverse_axis_deg"] = _transverse_axis_sigma(fused, surface, old_unc, v0)
    record["spin"] = fused
    record["uncertainty"]["spin"] = unc
    ag = fused["agreement"]
    if not ag["agrees"]:
        record.setdefault("warnings", []).append(
            f"the spin across the flight read from the ball's surface ({ag['surface_transverse_rpm']:.0f} rpm) "
            f"disagrees with the one the flight's curve needs ({ag['flight_transverse_rpm']:.0f} rpm) by "
            f"{ag['difference_sigmas']:.1f} sigmas: the surface reading is reported alone; check the camera file "
            "and the ball")
    return record


def _transverse_axis_sigma(fused: dict, surface: SurfaceSpin, old_unc: dict, v0) -> float | None:
    """One-sigma angle of the transverse axis [deg]: combined with the flight, the flight's alone (an
    upper bound); the surface alone, from its covariance across the velocity."""
    if fused["agreement"]["combined"]:
        return old_unc.get("transverse_axis_deg")
    vhat = v0 / np.linalg.norm(v0)
    w = np.asarray(fused["spin_vector_radps"], float)
    wp = w - (w @ vhat) * vhat
    n = float(np.linalg.norm(wp))
    if n == 0:
        return None
    p = np.cross(vhat, wp / n)
    return math.degrees(math.sqrt(max(0.0, float(p @ surface.covariance @ p))) / n)
