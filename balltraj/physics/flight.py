"""Equations of motion of a spinning ball and a fixed-step integrator batched over many flights.

m dv/dt = m g - 1/2 rho A C_D |v| v + 1/2 rho A C_L |v|^2 (omega_perp_hat x v_hat)

with v the air-relative velocity, omega_perp the spin component perpendicular to it (only that
part makes lift; docs/architecture.md (conventions)), S = r |omega_perp| / |v|, and optional spin decay
omega(t) = omega0 exp(-(t - t0)/tau).

The integrator is classical fourth-order Runge-Kutta on a fixed grid, advancing every flight of a
batch in the same numpy operations, so a fit's finite-difference Jacobian costs one call. Between
grid nodes, positions and velocities are interpolated with cubic Hermite polynomials (they use the
stored derivatives), and plane crossings are refined on those polynomials.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field, replace
from typing import Mapping

import numpy as np

from ..errors import InputError
from .aero import model_info
from .air import STANDARD_GRAVITY, AirConditions
from .balls import Ball

DEFAULT_MAX_STEP_S = 0.005


@dataclass(frozen=True)
class FlightModel:
    """Everything about a flight that is not its launch state or spin."""

    mass_kg: float
    diameter_m: float
    air_density: float
    air_viscosity: float
    gravity: float = STANDARD_GRAVITY
    wind_mps: tuple[float, float, float] = (0.0, 0.0, 0.0)
    drag_model: str = "constant"
    drag_params: Mapping[str, float] = field(default_factory=lambda: {"value": 0.35})
    lift_model: str = "sawicki2003"
    lift_params: Mapping[str, float] = field(default_factory=dict)
    spin_decay_s: float = math.inf  # used for flights whose FlightParameters give no decay [s]

    @classmethod
    def for_ball(
        cls,
        ball: Ball,
        air: AirConditions,
        *,
        gravity: float = STANDARD_GRAVITY,
        wind_mps=(0.0, 0.0, 0.0),
        drag_coefficient: float | None = None,
        lift_model: str | None = None,
        lift_coefficient: float | None = None,
    ) -> "FlightModel":
        """The ball's default models, optionally replaced by a constant C_D, another lift model
        or a constant C_L."""
        drag_model, drag_params = ball.drag_model, dict(ball.drag_params)
        if drag_coefficient is not None:
            drag_model, drag_params = "constant", {"value": float(drag_coefficient)}
        lm, lp = ball.lift_model, dict(ball.lift_params)
        if lift_model is not None:
            model_info("lift", lift_model)
            lm, lp = lift_model, {}
        if lift_coefficient is not None:
            lm, lp = "constant", {"value": float(lift_coefficient)}
        return cls(
            mass_kg=ball.mass_kg, diameter_m=ball.diameter_m, air_density=air.density,
            air_viscosity=air.viscosity, gravity=float(gravity),
            wind_mps=tuple(float(w) for w in wind_mps), drag_model=drag_model,
            drag_params=drag_params, lift_model=lm, lift_params=lp,
        )

    @property
    def radius_m(self) -> float:
        return 0.5 * self.diameter_m

    @property
    def k_factor(self) -> float:
        """K = rho A / (2 m) [1/m]."""
        return self._k

    def __post_init__(self):
        # resolve the models once (raises for unknown names); frozen, so set through object
        object.__setattr__(self, "_drag_fn", model_info("drag", self.drag_model).function)
        object.__setattr__(self, "_lift_fn", model_info("lift", self.lift_model).function)
        const = self.drag_params.get("value") if self.drag_model == "constant" else None
        object.__setattr__(self, "_cd_const", None if const is None else float(const))
        object.__setattr__(self, "_k", self.air_density * math.pi * (0.5 * self.diameter_m) ** 2 / (2 * self.mass_kg))

    def tiled(self, reps: int) -> "FlightModel":
        """The same model for a batch repeated ``reps`` times: per-flight (array) parameters and
        wind components are tiled to match."""
        def tile(v):
            if isinstance(v, np.ndarray) and v.ndim:
                return np.tile(v, reps)
            if isinstance(v, dict):
                return {k: tile(x) for k, x in v.items()}
            return v

        if not any(isinstance(w, np.ndarray) for w in self.wind_mps) and not any(
                isinstance(v, np.ndarray) for v in list(self.drag_params.values()) + list(self.lift_params.values())):
            return self
        return replace(self, wind_mps=tuple(tile(w) for w in self.wind_mps), drag_params=tile(dict(self.drag_params)),
                       lift_params=tile(dict(self.lift_params)))

    def drag(self, reynolds, spin_parameter):
        if self._cd_const is not None:
            return np.full(np.shape(reynolds), self._cd_const)
        return self._drag_fn(reynolds, spin_parameter, **self.drag_params)

    def lift(self, spin_parameter, reynolds):
        return self._lift_fn(spin_parameter, reynolds, **self.lift_params)

    def reynolds(self, speed):
        return self.air_density * np.asarray(speed) * self.diameter_m / self.air_viscosity

    def spin_parameter(self, spin_rate, speed):
        return self.radius_m * np.asarray(spin_rate) / np.asarray(speed)


@dataclass(frozen=True)
class FlightParameters:
    """Per-flight quantities of a batch, each with a leading axis of length N.

    spin : (N, 3) spin vector at t0 [rad/s]
    drag_scale : (N,) multiplier on the drag model's C_D [-]
    lift_override : (N,) constant C_L used instead of the lift model where finite [-]; the lift
        then acts along omega_perp_hat x v_hat with the direction of ``spin``
    spin_decay_s : (N,) spin decay time constant tau [s]; inf for none
    """

    spin: np.ndarray
    drag_scale: np.ndarray
    lift_override: np.ndarray
    spin_decay_s: np.ndarray

    def __post_init__(self):
        object.__setattr__(self, "decays", not bool(np.all(np.isinf(self.spin_decay_s))))
        object.__setattr__(self, "has_override", np.isfinite(self.lift_override))
        object.__setattr__(self, "overrides", bool(np.any(self.has_override)))

    @classmethod
    def make(cls, n: int, spin=None, drag_scale=None, lift_override=None, spin_decay_s=None):
        def arr(x, shape, fill):
            if x is None:
                return np.full(shape, fill, dtype=float)
            return np.broadcast_to(np.asarray(x, dtype=float), shape).copy()

        return cls(
            spin=arr(spin, (n, 3), 0.0), drag_scale=arr(drag_scale, (n,), 1.0),
            lift_override=arr(lift_override, (n,), np.nan), spin_decay_s=arr(spin_decay_s, (n,), np.inf),
        )


def acceleration(model: FlightModel, params: FlightParameters, t0: float, t: float, state: np.ndarray):
    """dv/dt for every flight of a batch, state (N, 6) -> (N, 3) [m/s^2].

    Written component by component: on small batches numpy's per-call overhead dominates, and this
    form needs the fewest calls.
    """
    wx, wy, wz = model.wind_mps
    vx = state[:, 3] - wx
    vy = state[:, 4] - wy
    vz = state[:, 5] - wz
    speed = np.sqrt(vx * vx + vy * vy + vz * vz)
    inv = 1.0 / np.where(speed > 0, speed, 1.0)
    ux, uy, uz = vx * inv, vy * inv, vz * inv
    tau = params.spin_decay_s if params.decays else model.spin_decay_s
    if params.decays or math.isfinite(model.spin_decay_s):
        f = np.exp(-(t - t0) / tau)
        ox, oy, oz = params.spin[:, 0] * f, params.spin[:, 1] * f, params.spin[:, 2] * f
    else:
        ox, oy, oz = params.spin[:, 0], params.spin[:, 1], params.spin[:, 2]
    dot = ox * ux + oy * uy + oz * uz
    px, py, pz = ox - dot * ux, oy - dot * uy, oz - dot * uz
    wp = np.sqrt(px * px + py * py + pz * pz)
    S = model.radius_m * wp * inv
    Re = (model.air_density * model.diameter_m / model.air_viscosity) * speed
    cd = params.drag_scale * model.drag(Re, S)
    cl = model.lift(S, Re)
    if params.overrides:
        cl = np.where(params.has_override, params.lift_override, cl)
    k = model.k_factor
    lift = k * cl * speed * speed / np.where(wp > 0, wp, 1.0)
    drag = k * cd * speed
    out = np.empty((state.shape[0], 3))
    out[:, 0] = -drag * vx + lift * (py * uz - pz * uy)
    out[:, 1] = -drag * vy + lift * (pz * ux - px * uz)
    out[:, 2] = -drag * vz + lift * (px * uy - py * ux) - model.gravity
    return out


@dataclass(frozen=True)
class Trajectory:
    """Integrated flights on a common time grid.

    t : (M,) grid times [s], increasing
    state : (N, M, 6) positions [m] and velocities [m/s]
    accel : (N, M, 3) accelerations [m/s^2] at the nodes
    """

    t: np.ndarray
    state: np.ndarray
    accel: np.ndarray

    @property
    def n_flights(self) -> int:
        return self.state.shape[0]

    def _hermite(self, times):
        times = np.asarray(times, dtype=float)
        if times.size and (times.min() < self.t[0] - 1e-12 or times.max() > self.t[-1] + 1e-12):
            raise ValueError("sample times outside the integrated span")
        i = np.clip(np.searchsorted(self.t, times, side="right") - 1, 0, len(self.t) - 2)
        h = self.t[i + 1] - self.t[i]
        s = (times - self.t[i]) / h
        return i, h, s

    def sample(self, times) -> np.ndarray:
        """State (N, T, 6) at arbitrary times within the grid (cubic Hermite)."""
        i, h, s = self._hermite(times)
        y0, y1 = self.state[:, i, :], self.state[:, i + 1, :]
        d0 = np.concatenate([self.state[:, i, 3:], self.accel[:, i, :]], axis=2)
        d1 = np.concatenate([self.state[:, i + 1, 3:], self.accel[:, i + 1, :]], axis=2)
        s2, s3 = s * s, s * s * s
        h00 = (2 * s3 - 3 * s2 + 1)[None, :, None]
        h10 = ((s3 - 2 * s2 + s) * h)[None, :, None]
        h01 = (-2 * s3 + 3 * s2)[None, :, None]
        h11 = ((s3 - s2) * h)[None, :, None]
        return h00 * y0 + h10 * d0 + h01 * y1 + h11 * d1

    def positions(self, times) -> np.ndarray:
        """Positions (N, T, 3) at the given times."""
        i, h, s = self._hermite(times)
        y0, y1 = self.state[:, i, :3], self.state[:, i + 1, :3]
        d0, d1 = self.state[:, i, 3:], self.state[:, i + 1, 3:]
        s2, s3 = s * s, s * s * s
        return ((2 * s3 - 3 * s2 + 1)[None, :, None] * y0 + ((s3 - 2 * s2 + s) * h)[None, :, None] * d0
                + (-2 * s3 + 3 * s2)[None, :, None] * y1 + ((s3 - s2) * h)[None, :, None] * d1)

    def positions_rows(self, times) -> np.ndarray:
        """Positions (N, T, 3) with one row of times per flight, ``times`` (N, T)."""
        times = np.asarray(times, dtype=float)
        i = np.clip(np.searchsorted(self.t, times, side="right") - 1, 0, len(self.t) - 2)
        h = self.t[i + 1] - self.t[i]
        s = (times - self.t[i]) / h
        rows = np.arange(self.n_flights)[:, None]
        y0, y1 = self.state[rows, i, :3], self.state[rows, i + 1, :3]
        d0, d1 = self.state[rows, i, 3:], self.state[rows, i + 1, 3:]
        s2, s3 = s * s, s * s * s
        return ((2 * s3 - 3 * s2 + 1)[..., None] * y0 + ((s3 - 2 * s2 + s) * h)[..., None] * d0
                + (-2 * s3 + 3 * s2)[..., None] * y1 + ((s3 - s2) * h)[..., None] * d1)

    def first_crossing(self, component: int, level, direction: int = +1, after=None):
        """First time each flight's coordinate ``component`` crosses ``level`` going ``direction``.

        Returns (t (N,), state (N, 6)); NaN where it never does. The crossing is refined on the
        cubic Hermite polynomial of the step by bisection to machine precision in time.
        """
        level = np.broadcast_to(np.asarray(level, dtype=float), (self.n_flights,))
        c = (self.state[:, :, component] - level[:, None]) * direction
        ok = c >= 0
        if after is not None:
            ok &= (self.t >= after)[None, :]
        ok[:, 0] = False  # a crossing needs a node before it
        prev_below = np.zeros_like(ok)
        prev_below[:, 1:] = c[:, :-1] < 0
        hit = ok & prev_below
        has = hit.any(axis=1)
        j = np.argmax(hit, axis=1)  # first node at/after the crossing
        t_out = np.full(self.n_flights, np.nan)
        s_out = np.full((self.n_flights, 6), np.nan)
        if not has.any():
            return t_out, s_out
        rows = np.nonzero(has)[0]
        lo = self.t[j[rows] - 1].copy()
        hi = self.t[j[rows]].copy()
        for _ in range(60):
            mid = 0.5 * (lo + hi)
            val = self._point(rows, mid)[:, component]
            below = (val - level[rows]) * direction < 0
            lo = np.where(below, mid, lo)
            hi = np.where(below, hi, mid)
        tc = 0.5 * (lo + hi)
        t_out[rows] = tc
        s_out[rows] = self._point(rows, tc)
        return t_out, s_out

    def _point(self, rows, times):
        """State of flight rows[k] at times[k] (one time per flight)."""
        i = np.clip(np.searchsorted(self.t, times, side="right") - 1, 0, len(self.t) - 2)
        h = self.t[i + 1] - self.t[i]
        s = ((times - self.t[i]) / h)[:, None]
        y0, y1 = self.state[rows, i, :], self.state[rows, i + 1, :]
        d0 = np.concatenate([self.state[rows, i, 3:], self.accel[rows, i, :]], axis=1)
        d1 = np.concatenate([self.state[rows, i + 1, 3:], self.accel[rows, i + 1, :]], axis=1)
        s2, s3 = s * s, s * s * s
        return ((2 * s3 - 3 * s2 + 1) * y0 + (s3 - 2 * s2 + s) * h[:, None] * d0
                + (-2 * s3 + 3 * s2) * y1 + (s3 - s2) * h[:, None] * d1)


def integrate(
    model: FlightModel,
    t0: float,
    state0,
    params: FlightParameters,
    t_span: tuple[float, float],
    max_step: float = DEFAULT_MAX_STEP_S,
    spin_t0: float | None = None,
) -> Trajectory:
    """Integrate N flights from ``state0`` (N, 6) at ``t0`` over ``t_span`` (may start before t0).

    ``spin_t0`` is the time at which ``params.spin`` holds (default t0).
    """
    y0 = np.atleast_2d(np.asarray(state0, dtype=float))
    lo, hi = float(t_span[0]), float(t_span[1])
    if not (lo <= t0 <= hi):
        raise ValueError("t0 must lie within t_span")
    ref = t0 if spin_t0 is None else spin_t0
    parts_t, parts_y, parts_a = [], [], []
    if lo < t0:
        tb, yb, ab = _rk4_leg_ref(model, params, t0, y0, lo, max_step, ref)
        parts_t.append(tb[::-1][:-1])
        parts_y.append(yb[:, ::-1][:, :-1])
        parts_a.append(ab[:, ::-1][:, :-1])
    if hi > t0 or not parts_t:
        tf, yf, af = _rk4_leg_ref(model, params, t0, y0, max(hi, t0 + 1e-9), max_step, ref)
    else:
        a0 = acceleration(model, params, ref, t0, y0)
        tf, yf, af = np.array([t0]), y0[:, None, :], a0[:, None, :]
    parts_t.append(tf)
    parts_y.append(yf)
    parts_a.append(af)
    return Trajectory(np.concatenate(parts_t), np.concatenate(parts_y, axis=1), np.concatenate(parts_a, axis=1))


def _rk4_leg_ref(model, params, t0, y0, t_end, max_step, ref):
    """RK4 from t0 to t_end (either direction); spin decay measured from ``ref``."""
    span = t_end - t0
    n = max(1, int(math.ceil(abs(span) / max_step - 1e-9)))
    h = span / n
    ts = t0 + h * np.arange(n + 1)
    N = y0.shape[0]
    ys = np.empty((N, n + 1, 6))
    acc = np.empty((N, n + 1, 3))

    def f(t, y):
        a = acceleration(model, params, ref, t, y)
        return np.concatenate([y[:, 3:], a], axis=1)

    y = y0.copy()
    ys[:, 0] = y
    k1 = f(ts[0], y)
    acc[:, 0] = k1[:, 3:]
    for m in range(n):
        t = ts[m]
        k2 = f(t + 0.5 * h, y + (0.5 * h) * k1)
        k3 = f(t + 0.5 * h, y + (0.5 * h) * k2)
        k4 = f(t + h, y + h * k3)
        y = y + (h / 6.0) * (k1 + 2 * k2 + 2 * k3 + k4)
        ys[:, m + 1] = y
        k1 = f(ts[m + 1], y)
        acc[:, m + 1] = k1[:, 3:]
    return ts, ys, acc


def fly(
    model: FlightModel,
    t0: float,
    state0,
    params: FlightParameters,
    *,
    stop_x: float | None = None,
    ground_z: float | None = 0.0,
    t_max: float = 30.0,
    max_step: float = DEFAULT_MAX_STEP_S,
    chunk_s: float = 0.5,
) -> Trajectory:
    """Integrate forward until every flight has crossed ``stop_x`` or come down below
    ``ground_z`` (whichever are given), or ``t_max`` seconds have passed."""
    y = np.atleast_2d(np.asarray(state0, dtype=float))
    ts, ys, accs = [], [], []
    t = float(t0)
    done = np.zeros(y.shape[0], bool)
    while t < t0 + t_max - 1e-12 and not done.all():
        t_end = min(t + chunk_s, t0 + t_max)
        tc, yc, ac = _rk4_leg_ref(model, params, t, y, t_end, max_step, t0)
        skip = 1 if ts else 0
        ts.append(tc[skip:])
        ys.append(yc[:, skip:])
        accs.append(ac[:, skip:])
        t, y = tc[-1], yc[:, -1]
        if stop_x is not None:
            done |= (yc[:, :, 0] >= stop_x).any(axis=1)
        if ground_z is not None:
            done |= (yc[:, :, 2] < ground_z).any(axis=1)
    return Trajectory(np.concatenate(ts), np.concatenate(ys, axis=1), np.concatenate(accs, axis=1))


def launch_state(position, speed, elevation_rad, azimuth_rad) -> np.ndarray:
    """State (6,) from position [m], speed [m/s], elevation above horizontal and azimuth from +x
    toward +y (left) [rad]."""
    p = np.asarray(position, dtype=float)
    ce = math.cos(elevation_rad)
    v = speed * np.array([ce * math.cos(azimuth_rad), ce * math.sin(azimuth_rad), math.sin(elevation_rad)])
    return np.concatenate([p, v])


def velocity_angles(velocity) -> tuple[float, float, float]:
    """(speed [m/s], elevation [rad], azimuth [rad]) of a velocity vector."""
    v = np.asarray(velocity, dtype=float)
    sp = float(np.linalg.norm(v))
    if sp == 0:
        return 0.0, 0.0, 0.0
    return sp, math.asin(max(-1.0, min(1.0, v[2] / sp))), math.atan2(v[1], v[0])


def transverse_spin(spin, velocity) -> tuple[np.ndarray, np.ndarray]:
    """Split a spin vector into (transverse, gyro) parts relative to a velocity."""
    w = np.asarray(spin, dtype=float)
    v = np.asarray(velocity, dtype=float)
    vhat = v / np.linalg.norm(v)
    gyro = np.dot(w, vhat) * vhat
    return w - gyro, gyro


def check_launch(position, speed, spin_axis=None) -> None:
    """Validate a launch request, raising InputError with a fix."""
    p = np.asarray(position, dtype=float)
    if p.shape != (3,) or not np.all(np.isfinite(p)):
        raise InputError("position must be three finite numbers X,Y,Z [m]")
    if not (math.isfinite(speed) and speed > 0):
        raise InputError(f"launch speed must be a positive finite number, got {speed}")
    if speed > 150:
        raise InputError(f"launch speed {speed:g} m/s is beyond any thrown or struck ball",
                         hint="give metres per second, or a unit such as 92mph or 150kmh")
    if spin_axis is not None:
        a = np.asarray(spin_axis, dtype=float)
        if a.shape != (3,) or not np.all(np.isfinite(a)):
            raise InputError("spin axis must be three finite numbers X,Y,Z")
        if np.linalg.norm(a) < 1e-12:
            raise InputError("spin axis has zero length", hint="give a direction such as 0,-1,0 for backspin")
