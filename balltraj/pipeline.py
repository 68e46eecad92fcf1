"""The one path from typed inputs to flight records, shared by the CLI, batch runs, the demo and the
workbench. Each entry point reads top to bottom as the recipe it is:

- :func:`fit_track` — a 3D track → flight fit in metres → flight record
- :func:`fit_observations` — pixel observations + their cameras → image-space fit → flight record
- :func:`fit_input` — either of the two, as read by :func:`balltraj.formats.read_fit_input`
- :func:`track` — a clip (+ camera) → timed pixel observations of each flight
- :func:`analyze_clip` — a clip → tracking → one image-space fit per flight → flight records
- :func:`analyze_rig` — one clip per camera of a rig, unsynchronised → one fit per flight through all cameras
- :func:`simulate` — a launch state and spin → predicted flight → flight record

Inputs are typed objects (files are read by :mod:`balltraj.formats`); every quantity is SI.
Nothing here prints or touches files other than reading the clip it is given.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field, replace
from pathlib import Path
from typing import Callable, Optional, Sequence

import numpy as np

from .camera.anchors import apply_anchor
from .camera.model import Camera
from .errors import BallTrajError, InputError
from .fitting.flight_fit import FitOptions, fit_flight
from .fitting.image_fit import fit_flight_image
from .fitting.ladder import check_rung
from .formats import CameraObservations, Track
from .physics.air import AirConditions
from .physics.balls import Ball
from .physics.flight import FlightModel, check_launch, launch_state
from .physics.reference import Deflection
from .pipeline_depth import depth_warnings, flight_anchor
from .pipeline_spin import FlightSurfaces, apply_surface_spin
from .record.build import fit_record, simulate_record
from .vision.pipeline import TrackResult, no_ball_error, track_clip
from .pipeline_rig import (concatenate_observations as _concatenate, matching_flight as _matching_flight,
                           rig_surface_spin)

Progress = Optional[Callable[[int, Optional[int]], None]]


@dataclass(frozen=True)
class FitSettings:
    """What a fit needs besides the data.

    Attributes
    ----------
    ball : Ball
        The ball (size, mass, drag and lift laws).
    air : AirConditions
        Density and viscosity of the air [kg/m^3, Pa s].
    target_x_m : float or None
        Target plane x = X for the deflection [m]; None: the last tracked x.
    start_near_m : tuple of 3 floats or None
        Where the flight roughly starts (release point, ball spot) [m].
    start_sigma_m : float
        How rough ``start_near_m`` is [m].
    fit_drag : bool
        Also fit a scale on the ball's drag law.
    free_lift : bool
        Fit a free constant lift coefficient instead of the ball's lift law.
    aero_model : str
        "auto" (the data choose a rung of the aerodynamic ladder) or a rung name to pin it.
    wind_mps : tuple of 3 floats or None
        Constant wind [m/s] for the fit and the no-spin reference; None: still air.
    wind_sigma_mps : float
        How well the wind is known: one-sigma [m/s] of each horizontal component; 0: exactly as given.
    start_source : str
        What gave the start point, in words ("start hint", "ground contact", ...).
    force : bool
        Keep a fit whose numbers are physically impossible for the ball (a warning instead of
        an error).
    """

    ball: Ball
    air: AirConditions
    target_x_m: float | None = None
    start_near_m: tuple[float, float, float] | None = None
    start_sigma_m: float = 0.3
    fit_drag: bool = False
    free_lift: bool = False
    aero_model: str = "auto"
    wind_mps: tuple[float, float, float] | None = None
    wind_sigma_mps: float = 0.0
    force: bool = False
    start_source: str = "start hint"

    def __post_init__(self):
        check_rung(self.aero_model)
        if not (math.isfinite(self.start_sigma_m) and self.start_sigma_m > 0):
            raise InputError(f"the start point's uncertainty must be a positive number of metres, "
                             f"got {self.start_sigma_m}")
        if self.target_x_m is not None and not math.isfinite(self.target_x_m):
            raise InputError(f"the target plane must be a finite x in metres, got {self.target_x_m}")
        if not (math.isfinite(self.wind_sigma_mps) and 0 <= self.wind_sigma_mps <= 30):
            raise InputError(f"the wind's uncertainty must be 0..30 m/s, got {self.wind_sigma_mps}")

    def model(self) -> FlightModel:
        """The flight model of this ball in this air."""
        return FlightModel.for_ball(self.ball, self.air)

    def options(self) -> FitOptions:
        return FitOptions(fit_drag=self.fit_drag, free_lift=self.free_lift,
                          start_near=None if self.start_near_m is None else tuple(map(float, self.start_near_m)),
                          start_sigma=self.start_sigma_m, aero_model=self.aero_model,
                          wind_mps=None if self.wind_mps is None else tuple(map(float, self.wind_mps)),
                          wind_sigma_mps=float(self.wind_sigma_mps))


@dataclass(frozen=True)
class FlightResult:
    """A flight record (the flight-file contract) and the deflection it was computed from (the
    measured path and its no-spin reference)."""

    record: dict
    deflection: Deflection
    #: the FlightFit the record was built from (None for a prediction)
    fit: object = None


@dataclass(frozen=True)
class ClipInput:
    """A clip to analyse, the camera(s) that filmed it, and how to read it.

    Attributes
    ----------
    path : Path
        The video file.
    cameras : list of Camera
        Its calibrated camera (the first is used for tracking).
    capture_fps : float or None
        True capture rate of a slow-motion file stored time-stretched [frames/s].
    start_s, end_s : float
        Part of the clip to read [s] (decoded in order, never seeked).
    """

    path: Path
    cameras: Sequence[Camera] = ()
    capture_fps: float | None = None
    start_s: float = 0.0
    end_s: float | None = None

    def __post_init__(self):
        if self.start_s < 0 or (self.end_s is not None and self.end_s <= self.start_s):
            raise InputError("the part of the clip to read must start at 0 s or later and end after it starts")
        if self.capture_fps is not None and not (1 <= self.capture_fps <= 10000):
            raise InputError(f"a capture rate must be 1..10000 frames/s, got {self.capture_fps}")

    @property
    def camera(self) -> Camera | None:
        return self.cameras[0] if self.cameras else None


@dataclass(frozen=True)
class ClipResult:
    """Flight records of a clip (one a flight that could be fitted), the tracking result, and one
    message per tracked flight that could not be fitted."""

    records: list[dict]
    tracking: TrackResult
    failures: list[str] = field(default_factory=list)
    #: with a rig: the tracking of each further camera's clip, in the rig's order
    other_trackings: list[TrackResult] = field(default_factory=list)


def fit_track(track: Track, settings: FitSettings) -> FlightResult:
    """Fit the flight model to a 3D track.

    Parameters
    ----------
    track : Track
        Times ``t`` shape (N,) [s], positions ``xyz`` shape (N, 3) [m], optional ``sigma`` (N,) [m].
    settings : FitSettings

    Returns
    -------
    FlightResult
        The record, with residuals in metres.
    """
    return _fit_to_record(lambda model, options: fit_flight(model, track.t, track.xyz, track.sigma, options),
                          track.path, settings)


def fit_observations(data: CameraObservations, settings: FitSettings) -> FlightResult:
    """Fit the flight model in image space: the reprojection error of pixel observations through
    their cameras (plus the apparent radius, when observed).

    Parameters
    ----------
    data : CameraObservations
        Times (N,) [s], camera names (N,), pixel positions ``uv`` (N, 2) [px], optional apparent
        radius (N,) [px], and the cameras.
    settings : FitSettings

    Returns
    -------
    FlightResult
        The record, with residuals in pixels.
    """
    obs = data.observations
    return _fit_to_record(lambda model, options: fit_flight_image(model, obs.t, obs.camera, obs.uv, list(data.cameras),
                                                                  radius_px=obs.radius_px, options=options),
                          obs.path, settings)


def _fit_to_record(run_fit, path: str, settings: FitSettings) -> FlightResult:
    """Run a fit (``run_fit(model, options)``), build its record, refuse the impossible."""
    model = settings.model()
    try:
        fit = run_fit(model, settings.options())
        rec, d = fit_record(fit, settings.ball, settings.air, model, target_x=settings.target_x_m, source=path,
                            start_source=settings.start_source)
    except BallTrajError as e:
        raise e.with_path(path) from None
    _refuse_impossible(rec, settings, path)
    rec["air_note"] = settings.air.source
    return FlightResult(rec, d, fit)


def _refuse_impossible(rec: dict, settings: FitSettings, path: str) -> None:
    """A fit whose numbers no ball of this kind can have (feet read as metres, the wrong ball) is
    refused unless forced; a merely unusual one keeps its warning in the record."""
    bad = [i["message"] for i in rec.get("plausibility", []) if i["severity"] == "impossible"]
    if bad and not settings.force:
        raise InputError(f"the fitted flight is impossible for a {settings.ball.title.lower()}: {bad[0]}", path=path,
                         hint="check the units of the file, the ball and the camera; force to keep it", about="force")


def fit_input(data: Track | CameraObservations, settings: FitSettings) -> FlightResult:
    """:func:`fit_track` or :func:`fit_observations`, by the kind of data."""
    if isinstance(data, CameraObservations):
        return fit_observations(data, settings)
    return fit_track(data, settings)


def track(clip: ClipInput, ball: Ball | None = None, *, overlay_path: Path | None = None,
          progress: Progress = None) -> TrackResult:
    """Find and track the ball in a clip: timed pixel observations of each flight.

    Parameters
    ----------
    clip : ClipInput
    ball : Ball, optional
        Its radius gates the detections' size in pixels (with a camera).
    overlay_path : Path, optional
        Also write a video with the detections and tracks drawn.
    progress : callable, optional
        Called as ``progress(frames_done, frames_total_or_None)``.
    """
    return track_clip(clip.path, clip.camera, None if ball is None else ball.radius_m, capture_fps=clip.capture_fps,
                      start_s=clip.start_s, end_s=clip.end_s, overlay_path=overlay_path, progress=progress)


def analyze_clip(clip: ClipInput, settings: FitSettings, *, progress: Progress = None) -> ClipResult:
    """The whole job on one clip: track the ball, fit every flight in image space.

    Raises
    ------
    InputError
        When no flight is found, or none of the flights found could be fitted.
    """
    if clip.camera is None:
        raise InputError("a clip is analysed through the camera that filmed it; none was given", path=str(clip.path))
    res = track(clip, settings.ball, progress=progress)
    if not res.flights:
        raise no_ball_error(clip.path, res)
    cam = clip.camera
    hint = None if settings.start_near_m is None else (settings.start_near_m, settings.start_sigma_m)
    records, failures = [], []
    surfaces = FlightSurfaces(clip.path, res.flights, cam, capture_fps=clip.capture_fps,  # windows decoded once
                              refinements=res.radii)
    for i, f in enumerate(res.flights):
        # the depth along the line of sight: a ball at rest where the flight starts, a bounce that
        # starts it, the user's hint, the template's launch zone, or only the apparent size (said in the record)
        prev = res.flights[i - 1] if i > 0 and res.flights[i - 1].bounce else None
        anchor, keep, anchor_section = flight_anchor(clip, cam, settings.ball.radius_m, f, prev, hint)
        data = CameraObservations(_flight_observations(clip.path, f, cam.name, keep), [cam])
        try:
            fitted = fit_observations(data, replace(apply_anchor(settings, anchor), start_source=anchor.name))
        except BallTrajError as e:
            failures.append(f"flight {f.flight}: {e.one_line()}")
            continue
        # the full spin, gyro part included, from the ball's surface where the clip shows it
        rec = apply_surface_spin(fitted.record, fitted.fit, surfaces.read(f), model=settings.model())
        rec["source"] = f"{clip.path}#flight-{f.flight}"
        rec["clip"] = {"path": str(clip.path), "flight": f.flight, "frames": len(f.t), "bounce": f.bounce,
                       "end_reason": f.end_reason}
        rec["depth_anchor"] = anchor_section
        radius = res.radii[i].summary() if res.radii else None  # how the apparent radii were measured
        rec["clip"]["radius"] = radius or {"method": "detector"}
        rec["warnings"] = list(rec.get("warnings", [])) + depth_warnings(anchor, radius)
        records.append(rec)
    if not records:
        raise InputError("the tracked flight(s) could not be fitted: " + "; ".join(failures), path=str(clip.path),
                         hint="check the camera file, or give a start point")
    return ClipResult(records, res, failures)


def analyze_rig(clips: Sequence[ClipInput], settings: FitSettings, *, progress: Progress = None) -> ClipResult:
    """The whole job on one clip per camera of a rig, filmed unsynchronised: track each clip, pair
    each flight of the first camera with the same flight in the others (the clock offsets found by
    triangulating the two tracks consistently, then fitted with the flight), fit each flight through
    all cameras at once. Times and the launch are on the first camera's clock.

    Raises
    ------
    InputError
        When a clip has no camera, the first clip has no flight, or no flight could be fitted.
    """
    if len(clips) < 2:
        return analyze_clip(clips[0], settings, progress=progress)
    if any(c.camera is None for c in clips):
        raise InputError("every clip of a rig is analysed through its own camera; one has none")
    results = [track(c, settings.ball, progress=progress) for c in clips]
    if not results[0].flights:
        raise no_ball_error(clips[0].path, results[0])
    records, failures = [], []
    readers = [FlightSurfaces(c.path, r.flights, c.camera, capture_fps=c.capture_fps, refinements=r.radii)
               for c, r in zip(clips, results)]
    first = replace(clips[0].camera, time_offset_s=0.0)  # times and the launch on the first camera's clock
    for f in results[0].flights:
        cams, seen = [first], [(0, f)]
        parts = [_flight_observations(clips[0].path, f, clips[0].camera.name)]
        for j, (clip, res) in enumerate(zip(clips[1:], results[1:]), 1):
            match = _matching_flight(first, f, clip.camera, res.flights)
            if match is None:
                failures.append(f"flight {f.flight}: not seen by camera {clip.camera.name!r}")
                continue
            g, offset = match
            cams.append(replace(clip.camera, time_offset_s=offset))
            seen.append((j, g))
            parts.append(_flight_observations(clip.path, g, clip.camera.name))
        data = CameraObservations(_concatenate(parts, f"{clips[0].path}#flight-{f.flight}"), cams)
        try:
            fitted = fit_observations(data, settings)
        except BallTrajError as e:
            failures.append(f"flight {f.flight}: {e.one_line()}")
            continue
        # the full spin from the ball's surface, read in the fastest clip that shows it
        rec = rig_surface_spin(fitted.record, fitted.fit, seen, readers, model=settings.model())
        rec["source"] = f"{clips[0].path}#flight-{f.flight}"
        rec["clip"] = {"path": str(clips[0].path), "flight": f.flight, "frames": len(f.t), "bounce": f.bounce,
                       "end_reason": f.end_reason, "cameras": [c.name for c in cams],
                       "other_clips": [str(c.path) for c in clips[1:]]}
        records.append(rec)
    if not records:
        raise InputError("the tracked flight(s) could not be fitted: " + "; ".join(failures),
                         path=str(clips[0].path), hint="check the rig file and that every camera saw the flight")
    return ClipResult(records, results[0], failures, results[1:])


def _flight_observations(path, f, camera_name: str, keep=None):
    """The tracked points of flight ``f`` as observations (only those ``keep`` marks, if given)."""
    from .formats import Observations

    k = np.ones(len(f.t), bool) if keep is None else np.asarray(keep, bool)
    return Observations(f"{path}#flight-{f.flight}", np.asarray(f.t, float)[k], [camera_name] * int(k.sum()),
                        np.asarray(f.uv, float)[k], np.asarray(f.radius_px, float)[k],
                        np.asarray(f.quality, float)[k], None)


@dataclass(frozen=True)
class Launch:
    """A launch to predict: where, how fast, which way, and the spin.

    Attributes
    ----------
    position_m : tuple of 3 floats
        Launch point [m].
    speed_mps : float
        Launch speed [m/s].
    elevation_rad, azimuth_rad : float
        Launch angle above the horizontal, and direction from +x toward +y (left) [rad].
    spin_radps : float
        Spin rate [rad/s].
    spin_axis : tuple of 3 floats
        Spin axis (any length), right-hand rule.
    """

    position_m: tuple[float, float, float]
    speed_mps: float
    elevation_rad: float
    azimuth_rad: float = 0.0
    spin_radps: float = 0.0
    spin_axis: tuple[float, float, float] = (0.0, -1.0, 0.0)

    def state(self) -> np.ndarray:
        """Position and velocity, shape (6,) [m, m/s]."""
        return launch_state(np.asarray(self.position_m, float), self.speed_mps, self.elevation_rad, self.azimuth_rad)

    def spin(self) -> np.ndarray:
        """Spin vector, shape (3,) [rad/s]."""
        axis = np.asarray(self.spin_axis, float)
        n = float(np.linalg.norm(axis))
        if self.spin_radps == 0:
            return np.zeros(3)
        if not n > 0:
            raise InputError("the spin axis must not be zero")
        return self.spin_radps * axis / n


def simulate(launch: Launch, ball: Ball, air: AirConditions, *, drag_coefficient: float | None = None,
             lift_model: str | None = None, lift_coefficient: float | None = None,
             spin_decay_s: float | None = None, target_x_m: float | None = None) -> FlightResult:
    """Predict a flight from a launch state and spin.

    Parameters
    ----------
    launch : Launch
    ball, air
    drag_coefficient : float, optional
        A constant C_D instead of the ball's drag law.
    lift_model : str, optional
        A lift law by name instead of the ball's (see :func:`balltraj.physics.aero.available_models`).
    lift_coefficient : float, optional
        A constant C_L instead of a lift law.
    spin_decay_s : float, optional
        Time constant of an exponential spin decay [s]; None: no decay.
    target_x_m : float, optional
        Target plane x = X [m]; None: where the flight comes down to z = 0.
    """
    check_launch(np.asarray(launch.position_m, float), launch.speed_mps, np.asarray(launch.spin_axis, float))
    model = FlightModel.for_ball(ball, air, drag_coefficient=drag_coefficient, lift_model=lift_model,
                                 lift_coefficient=lift_coefficient)
    rec, d = simulate_record(ball, air, model, launch.state(), launch.spin(), target_x=target_x_m,
                             spin_decay_s=math.inf if spin_decay_s is None else spin_decay_s)
    rec["air_note"] = air.source
    return FlightResult(rec, d)
