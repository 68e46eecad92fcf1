"""What each CLI command does, as plain functions: read inputs, call the library, write outputs,
return the text to print. The CLI only parses options and prints; tests call these directly too.
"""

from __future__ import annotations

import math
from pathlib import Path
from typing import Optional, Sequence

import numpy as np

from .errors import InputError
from .units import RPM, length_text, parse_quantity, parse_vector, speed_text, spin_text


def balls_text(models: bool = False) -> str:
    from .physics.aero import available_models, model_info
    from .physics.balls import _CATALOGUE

    lines = [f"{'name':<13} {'mass (g)':>15} {'diameter (mm)':>15}  drag / lift model   rule"]
    for b in _CATALOGUE.values():
        m = f"{b.mass_range_kg[0] * 1e3:.1f}-{b.mass_range_kg[1] * 1e3:.1f}"
        d = f"{b.diameter_range_m[0] * 1e3:.1f}-{b.diameter_range_m[1] * 1e3:.1f}"
        lines.append(f"{b.name:<13} {m:>15} {d:>15}  {b.drag_model + ' / ' + b.lift_model:<18} {b.rule}")
    if models:
        lines.append("")
        for kind, names in available_models().items():
            for n in names:
                info = model_info(kind, n)
                lines.append(f"{kind:<5} {n:<15} {info.source}")
    return "\n".join(lines)


def _target(target_x: Optional[str]) -> Optional[float]:
    return None if target_x is None else parse_quantity(target_x, "length", "--target-x")


def _len(x, units, sigma):
    return length_text(x, units, sigma, small=abs(x) < 2.0)


def flight_summary(rec: dict, units: str = "metric") -> str:
    """A one-screen text summary of a flight record."""
    L, S, D, A = rec["launch"], rec["spin"], rec["deflection"], rec["aero"]
    U = rec.get("uncertainty", {})

    def u(sec, key):
        return (U.get(sec) or {}).get(key)

    lines = [
        f"ball            {rec['ball_properties']['title']}",
        f"launch speed    {speed_text(L['speed_mps'], units, u('launch', 'speed_mps'))}",
        f"launch angles   elevation {L['elevation_deg']:.2f} deg, azimuth {L['azimuth_deg']:.2f} deg",
        f"spin            {spin_text(S['transverse_rate_rpm'] * RPM, (u('spin', 'transverse_rate_rpm') or 0) * RPM or None)}"
        f" transverse" + ("" if S["gyro_observed"] else " (gyro spin not observable)"),
        f"transverse axis ({', '.join(f'{a:+.2f}' for a in S['transverse_axis'])})",
        f"coefficients    C_D {A['drag_coefficient']:.3f}, C_L {A['lift_coefficient']:.3f}, "
        f"S {A['spin_parameter']:.3f}, Re {A['reynolds_number']:.3g}",
        f"deflection at x = {D['target_x_m']:.2f} m from spin: "
        f"horizontal {_len(D['horizontal_m'], units, u('deflection', 'horizontal_m'))} (+ = left), "
        f"vertical {_len(D['vertical_m'], units, u('deflection', 'vertical_m'))} (+ = up)",
    ]
    f = rec["fit"]
    if f["n_points"]:
        lines.append(f"fit             {f['n_points']} points, {f['n_outliers']} outliers, "
                     f"rms residual {f['rms_residual'] * 1000:.1f} mm")
    for w in rec.get("warnings", []):
        lines.append(f"warning: {w}")
    return "\n".join(lines)


def run_simulate(*, ball, air, position, speed, elevation, azimuth, spin_rpm, spin_axis,
                 drag_coefficient, lift_model, lift_coefficient, spin_decay, target_x, path_csv, out) -> str:
    from .fitting.record import simulate_record
    from .formats import check_output_path, write_csv, write_json
    from .physics.flight import FlightModel, check_launch, launch_state

    pos = np.array(parse_vector(position, "--position"))
    v = parse_quantity(speed, "speed", "--speed")
    el = parse_quantity(elevation, "angle", "--elevation")
    az = parse_quantity(azimuth, "angle", "--azimuth")
    rate = parse_quantity(spin_rpm, "spin", "--spin-rpm")
    bare = str(spin_rpm).strip().lstrip("+-").replace(".", "", 1).isdigit()
    rate = rate * RPM if bare else rate  # bare --spin-rpm is rpm
    axis = np.array(parse_vector(spin_axis, "--spin-axis", kind="length"))
    check_launch(pos, v, axis)
    if not math.isfinite(rate) or rate < 0:
        raise InputError(f"--spin-rpm must be zero or positive, got {spin_rpm}")
    if abs(el) > math.pi / 2:
        raise InputError(f"--elevation must be within -90..90 degrees, got {elevation}")
    for name, val in (("--drag-coefficient", drag_coefficient), ("--lift-coefficient", lift_coefficient)):
        if val is not None and not (math.isfinite(val) and 0 <= val <= 5):
            raise InputError(f"{name} must be a finite number in 0..5, got {val}")
    if drag_coefficient is not None and drag_coefficient <= 0:
        raise InputError("--drag-coefficient must be positive")
    if spin_decay is not None and not (math.isfinite(spin_decay) and spin_decay > 0):
        raise InputError(f"--spin-decay must be a positive number of seconds, got {spin_decay}")
    out_p = check_output_path(out)
    if path_csv is not None:
        check_output_path(path_csv, [out])
    model = FlightModel.for_ball(ball, air, drag_coefficient=drag_coefficient, lift_model=lift_model,
                                 lift_coefficient=lift_coefficient)
    s0 = launch_state(pos, v, el, az)
    spin = rate * axis / np.linalg.norm(axis)
    rec, d = simulate_record(ball, air, model, s0, spin, target_x=_target(target_x),
                             spin_decay_s=math.inf if spin_decay is None else spin_decay)
    rec["air_note"] = air.source
    if path_csv is not None:
        tr = d.spin_path
        keep = tr.t <= d.time_s + 1e-12
        write_csv(path_csv, ["t", "x", "y", "z", "vx", "vy", "vz"],
                  (list(map(float, [t, *s])) for t, s in zip(tr.t[keep], tr.state[0, keep])))
    write_json(out_p, rec)
    return flight_summary(rec) + f"\nair             {air.source}; density {air.density:.4f} kg/m^3\nwrote {out_p}"
