"""Options and result types of the flight fits.

``TrackFit`` (residuals in metres, shape (N, 3)) and ``ImageFit`` (residuals in pixels, shape
(N, 2), with the cameras, time offsets and apparent-radius nuisances as typed fields) share the
base ``FlightFit``. Both carry the chosen aerodynamic rung's model (``model``), the ladder's
record (``model_choice``), the misfit test (``misfit``) and warnings.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

from ..physics.flight import FlightModel, FlightParameters

OUTLIER_THRESHOLD = 4.6  # sqrt(chi2_3 quantile 0.9999): residual norm in sigmas


@dataclass(frozen=True)
class FitOptions:
    """Choices of a flight fit.

    aero_model : "auto" (the data choose a rung of :mod:`.ladder`) or a rung name to pin it
    wind_mps : constant wind (3,) [m/s] used by the fit and the no-spin reference instead of the
        model's (still air by default)
    fit_drag, free_lift : the older single-model options (a fitted drag scale; a free constant
        lift coefficient); either one pins the fit to that model and skips the ladder
    max_nfev : evaluation budget of each least-squares pass (far above what converging fits use)
    wind_sigma_mps : one-sigma uncertainty [m/s] of each horizontal component of ``wind_mps`` (or of still
        air): with it, the deflection's uncertainty carries what an unknown wind could do (:mod:`.nuisance`)
    image_ladder : let "auto" climb the ladder in image fits too (off by default: from one camera
        the depth trades off against the aerodynamics, and richer rungs soak up depth error; the
        image fit then stays on the catalogue rung unless a rung is pinned)
    drag_law_priors : marginalise priors on the drag law (level, crisis position, speed slope:
        :data:`.nuisance.DRAG_LAW_SIGMAS`) into the uncertainties; set by the image fit when it holds
        the catalogue rung without climbing the ladder
    """

    fit_drag: bool = False
    free_lift: bool = False
    robust: bool = True
    outlier_threshold: float = OUTLIER_THRESHOLD
    start_near: tuple[float, float, float] | None = None
    start_sigma: float = 0.3
    max_step: float = 0.04  # RK4 + Hermite sampling error stays below 1e-8 m on ball flights
    max_nfev: int = 400
    aero_model: str = "auto"
    wind_mps: tuple[float, float, float] | None = None
    image_ladder: bool = False
    criterion: str = "aicc"  # or "bic"; AICc suits a model set that never holds the true law (Burnham & Anderson 2002)
    drag_law_priors: bool = False
    wind_sigma_mps: float = 0.0  # how well the user knows each horizontal wind component [m/s]; 0: as given (still air)

    @property
    def legacy(self) -> bool:
        return bool(self.fit_drag or self.free_lift)


@dataclass(frozen=True)
class FlightFit:
    """Result of a flight fit. ``success`` False carries the reason in ``message``."""

    success: bool
    message: str
    names: tuple[str, ...]
    params: np.ndarray
    covariance: np.ndarray
    t0: float
    state0: np.ndarray  # (6,)
    spin: np.ndarray  # (3,) transverse spin vector [rad/s] (model mode) or lift direction (free lift)
    drag_scale: float
    lift_override: float  # NaN unless free_lift
    basis: np.ndarray  # (2, 3): e1, e2
    t: np.ndarray
    observed: np.ndarray
    fitted: np.ndarray
    residuals: np.ndarray  # observed - fitted
    sigma: np.ndarray  # (N,) per-point sigma used
    outliers: np.ndarray  # (N,) bool
    residual_scale: float  # sqrt(chi2 / dof) of the final pass
    nfev: int
    options: FitOptions = field(default_factory=FitOptions)
    undetermined: tuple[str, ...] = ()
    fitted_xyz: np.ndarray | None = None  # (N, 3) fitted positions at the observation times [m]
    model: FlightModel | None = None  # the chosen rung's model with its fitted values
    base_model: FlightModel | None = None  # the catalogue model the ladder started from (with the wind)
    rung: str = "catalogue"
    spin_decay_s: float = math.inf
    model_choice: dict = field(default_factory=dict)
    misfit: dict = field(default_factory=dict)
    warnings: tuple[str, ...] = ()
    covariance_method: str = "linearised (Jacobian) covariance scaled by the residual variance"
    nuisance: dict = field(default_factory=dict)  # unknowns one flight cannot tell, marginalised (.nuisance)

    residual_unit = "m"

    @property
    def n_points(self) -> int:
        return len(self.t)

    @property
    def n_outliers(self) -> int:
        return int(self.outliers.sum())

    @property
    def rms_residual(self) -> float:
        r = self.residuals[~self.outliers]
        return float(np.sqrt(np.mean(np.sum(r**2, axis=1)))) if len(r) else math.nan

    def sigmas(self) -> np.ndarray:
        return np.sqrt(np.clip(np.diag(self.covariance), 0, None))

    def flight_parameters(self) -> FlightParameters:
        """Spin, drag scale, lift override and spin decay of the fitted flight (one flight)."""
        return FlightParameters.make(1, spin=self.spin, drag_scale=self.drag_scale,
                                     lift_override=self.lift_override, spin_decay_s=self.spin_decay_s)

    @property
    def extra(self) -> dict:
        return {}


@dataclass(frozen=True)
class TrackFit(FlightFit):
    """A fit to a 3D track: observed, fitted and residuals are (N, 3) [m]."""

    residual_unit = "m"


@dataclass(frozen=True)
class ImageFit(FlightFit):
    """A fit to pixel observations: observed, fitted and residuals are (N, 2) [px].

    cameras : the cameras used (in the order of ``camera_index``)
    camera_index : (N,) index into ``cameras`` of each observation
    start_from : which rough 3D start won ("triangulated", "apparent radius", ...)
    time_offsets_s, time_offset_sigma_s : fitted clock offset of each camera [s] (None: not fitted)
    launch_depth_sigma_m : one-sigma launch position along each camera's line of sight [m]
    radius_px : (N,) apparent radius observations [px] or None
    radius_scale, radius_bias_px : fitted nuisances of the apparent radius (1, 0 when unused)
    """

    cameras: tuple = ()
    camera_index: np.ndarray | None = None
    start_from: str = ""
    time_offsets_s: dict | None = None
    time_offset_sigma_s: dict | None = None
    launch_depth_sigma_m: dict = field(default_factory=dict)
    radius_px: np.ndarray | None = None
    radius_scale: float = 1.0
    radius_bias_px: float = 0.0

    residual_unit = "px"

    @property
    def camera_names(self) -> list[str]:
        return [c.name for c in self.cameras]

    @property
    def extra(self) -> dict:
        """The older dict view of the image-specific items (kept for callers that read it)."""
        out = {"cameras": self.camera_names, "start_from": self.start_from,
               "camera_index": None if self.camera_index is None else self.camera_index.tolist(),
               "camera_objects": list(self.cameras), "radius_px": self.radius_px,
               "launch_depth_sigma_m": self.launch_depth_sigma_m}
        if self.time_offsets_s is not None:
            out["time_offsets_s"] = self.time_offsets_s
            out["time_offset_sigma_s"] = self.time_offset_sigma_s
        return out
