"""The no-spin reference path and the deflection at a target plane (docs/architecture.md, conventions).

Deflection = where the spinning (measured or predicted) path crosses x = X minus where the no-spin
reference crosses it; the reference starts from the same launch position and velocity at the same
time, with the same drag model and zero spin.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..errors import PhysicsError
from .flight import FlightModel, FlightParameters, Trajectory, fly


@dataclass(frozen=True)
class Deflection:
    target_x_m: float
    horizontal_m: float  # +y, to the left looking along +x
    vertical_m: float  # +z, up
    time_s: float  # time the spinning path crosses the plane
    reference_time_s: float
    crossing_m: tuple[float, float, float]  # spinning path at the plane
    reference_crossing_m: tuple[float, float, float]
    speed_at_plane_mps: float
    straight_line_m: tuple[float, float, float]  # launch direction extended to the plane
    spin_path: Trajectory
    reference_path: Trajectory

    def drop_summary(self) -> dict:
        """How much of the drop and the sideways move at the plane came from spin."""
        z_line, y_line = self.straight_line_m[2], self.straight_line_m[1]
        total_drop = z_line - self.crossing_m[2]
        nospin_drop = z_line - self.reference_crossing_m[2]
        total_side = self.crossing_m[1] - y_line
        share = (total_drop - nospin_drop) / total_drop if abs(total_drop) > 1e-9 else float("nan")
        return {
            "total_drop_m": total_drop,
            "drop_without_spin_m": nospin_drop,
            "drop_from_spin_m": total_drop - nospin_drop,
            "spin_share_of_drop": share,
            "total_sideways_m": total_side,
            "sideways_from_spin_m": self.horizontal_m,
        }


def spin_and_reference(model: FlightModel, t0: float, state0, params: FlightParameters, *,
                       target_x: float, t_max: float = 30.0, max_step: float = 0.01):
    """Fly the spinning flights and their no-spin references as one batch of 2N.

    Returns (spin_traj, ref_traj) with N flights each.
    """
    s0 = np.atleast_2d(np.asarray(state0, dtype=float))
    n = s0.shape[0]
    both = FlightParameters(
        spin=np.concatenate([params.spin, np.zeros_like(params.spin)]),
        drag_scale=np.concatenate([params.drag_scale, params.drag_scale]),
        lift_override=np.concatenate([params.lift_override, np.full(n, np.nan)]),
        spin_decay_s=np.concatenate([params.spin_decay_s, params.spin_decay_s]),
    )
    tr = fly(model.tiled(2), t0, np.concatenate([s0, s0]), both, stop_x=target_x, ground_z=None,
             t_max=t_max, max_step=max_step)
    a = Trajectory(tr.t, tr.state[:n], tr.accel[:n])
    b = Trajectory(tr.t, tr.state[n:], tr.accel[n:])
    return a, b


def plane_deflection(model: FlightModel, t0: float, state0, params: FlightParameters, target_x: float,
                     *, ground_z: float | None = 0.0, max_step: float = 0.01) -> Deflection:
    """Deflection of one flight at the plane x = target_x (raises PhysicsError if not reached)."""
    s0 = np.asarray(state0, dtype=float).reshape(6)
    if s0[3] <= 0.02 * np.linalg.norm(s0[3:]):
        raise PhysicsError("the ball does not move toward +x (a straight-up or backward launch), so it never reaches a "
                           "target plane",
                           hint="check the launch azimuth, or set up the world frame with x toward the target")
    if target_x <= s0[0]:
        raise PhysicsError(f"the target plane x = {target_x:g} m is not ahead of the launch point "
                           f"(x = {s0[0]:.3f} m)", hint="choose a target plane beyond the launch point", about="target_x")
    sp, rf = spin_and_reference(model, t0, s0[None], params, target_x=target_x, max_step=max_step)
    tc, sc = sp.first_crossing(0, target_x, +1)
    tr, srf = rf.first_crossing(0, target_x, +1)
    if not np.isfinite(tc[0]) or not np.isfinite(tr[0]):
        path = sp if not np.isfinite(tc[0]) else rf
        end = path.state[0, -1]
        which = "flight" if path is sp else "no-spin reference"
        raise PhysicsError(
            f"the {which} never reaches the target plane x = {target_x:g} m; it was at x = {end[0]:.2f} m, "
            f"y = {end[1]:.2f} m, z = {end[2]:.2f} m when it stopped", hint="choose a nearer target plane", about="target_x")
    if ground_z is not None:
        tg, sg = sp.first_crossing(2, ground_z, -1)
        if np.isfinite(tg[0]) and tg[0] < tc[0]:
            raise PhysicsError(
                f"the flight comes down at x = {sg[0, 0]:.2f} m, y = {sg[0, 1]:.2f} m before reaching the "
                f"target plane x = {target_x:g} m", hint="choose a target plane before the landing point", about="target_x")
    line = s0[:3] + s0[3:] * (target_x - s0[0]) / s0[3]
    return Deflection(
        target_x_m=float(target_x), horizontal_m=float(sc[0, 1] - srf[0, 1]),
        vertical_m=float(sc[0, 2] - srf[0, 2]), time_s=float(tc[0]), reference_time_s=float(tr[0]),
        crossing_m=tuple(map(float, sc[0, :3])), reference_crossing_m=tuple(map(float, srf[0, :3])),
        speed_at_plane_mps=float(np.linalg.norm(sc[0, 3:])), straight_line_m=tuple(map(float, line)),
        spin_path=sp, reference_path=rf,
    )


def batch_deflections(model: FlightModel, t0: float, states0, params: FlightParameters, target_x: float,
                      *, max_step: float = 0.01) -> np.ndarray:
    """(N, 2) sideways and up-down deflections at x = target_x for a batch (NaN if not reached)."""
    sp, rf = spin_and_reference(model, t0, states0, params, target_x=target_x, max_step=max_step)
    _, sc = sp.first_crossing(0, target_x, +1)
    _, srf = rf.first_crossing(0, target_x, +1)
    return sc[:, 1:3] - srf[:, 1:3]
