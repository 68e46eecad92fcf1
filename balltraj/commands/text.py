"""Console text: the tables and summaries commands print. Pure formatting of records and results."""

from __future__ import annotations

from ..units import RPM, length_text, speed_text, spin_text


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
        f"up {_len(D['vertical_m'], units, u('deflection', 'vertical_m'))} (+ = up)",
    ]
    f = rec["fit"]
    if f["n_points"]:
        lines.append(f"fit             {f['n_points']} points, {f['n_outliers']} outliers, "
                     + (f"rms residual {f['rms_residual'] * 1000:.1f} mm" if f["residual_unit"] == "m"
                        else f"rms residual {f['rms_residual']:.2f} px"))
    for w in rec.get("warnings", []):
        lines.append(f"warning: {w}")
    return "\n".join(lines)


def flight_line(rec: dict) -> str:
    """One line of a flight's headline numbers (for lists of flights)."""
    D = rec["deflection"]
    return (f"{rec['launch']['speed_mps']:.2f} m/s, {rec['spin']['transverse_rate_rpm']:.0f} rpm transverse, "
            f"moved {D['horizontal_m'] * 100:+.1f} cm left / {D['vertical_m'] * 100:+.1f} cm up by spin at "
            f"x = {D['target_x_m']:.2f} m")


def balls_table(catalogue, models: dict | None = None) -> str:
    """The ball catalogue, and (``models``: kind -> [(name, source)]) the aerodynamic models."""
    lines = [f"{'name':<13} {'mass (g)':>15} {'diameter (mm)':>15}  drag / lift model   rule"]
    for b in catalogue:
        m = f"{b.mass_range_kg[0] * 1e3:.1f}-{b.mass_range_kg[1] * 1e3:.1f}"
        d = f"{b.diameter_range_m[0] * 1e3:.1f}-{b.diameter_range_m[1] * 1e3:.1f}"
        lines.append(f"{b.name:<13} {m:>15} {d:>15}  {b.drag_model + ' / ' + b.lift_model:<18} {b.rule}")
    if models:
        lines.append("")
        for kind, entries in models.items():
            for name, source in entries:
                lines.append(f"{kind:<5} {name:<15} {source}")
    return "\n".join(lines)


def tracking_lines(res) -> list[str]:
    """What tracking found in a clip: frames, rate, one line a flight, warnings."""
    lines = [f"{res.n_frames} frames at {res.fps_measured:.1f} frames/s; {len(res.flights)} flight(s)"]
    lines += [f"  flight {f.flight}: {len(f.t)} points, {f.t[0]:.3f}-{f.t[-1]:.3f} s, ended: {f.end_reason}"
              + (" (bounce)" if f.bounce else "") for f in res.flights]
    lines += [f"warning: {w}" for w in res.warnings]
    return lines


def library_clips_table(rows) -> str:
    if not rows:
        return "the library is empty"
    lines = [f"{'id':>4} {'status':<7} {'flights':>7} {'session':<20} {'athlete':<16} clip"]
    for r in rows:
        lines.append(f"{r['id']:>4} {r['status']:<7} {r['n_flights']:>7} {(r['session'] or '')[:20]:<20} "
                     f"{(r['athlete'] or '')[:16]:<16} {r['path']}" + (f"  ({r['error']})" if r["error"] else ""))
    return "\n".join(lines)


def comparison_table(by: str, res: list[dict]) -> str:
    lines = [f"{by:<10} {'flights':>7} {'speed m/s':>16} {'spin rpm':>14} {'left cm':>14} {'up cm':>14}"]
    for d in res:
        sp, sr, dh, dv = (d[k] for k in ("launch_speed_mps", "transverse_rate_rpm", "deflection_horizontal_m",
                                         "deflection_vertical_m"))
        lines.append(f"{d['name'][:10]:<10} {d['n']:>7} {sp[0]:>9.2f} ± {sp[1]:<4.2f} {sr[0]:>8.0f} ± {sr[1]:<3.0f} "
                     f"{dh[0] * 100:>7.1f} ± {dh[1] * 100:<4.1f} {dv[0] * 100:>7.1f} ± {dv[1] * 100:<4.1f}")
    lines.append("(mean ± standard deviation of the flights)")
    return "\n".join(lines)
