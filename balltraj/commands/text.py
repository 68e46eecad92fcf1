"""Console text: the tables and summaries commands print. Pure formatting of records and results,
in the unit system the user chose (``--units metric|imperial``)."""

from __future__ import annotations

from ..record.words import air_text, model_words, source_words
from ..units import INCH, MPH, RPM, length_text, speed_text, spin_text

#: what ``balls`` can and cannot say about its numbers (shown under the table)
BALLS_CHECKS = (
    "Checked: each mass and size range is the one the game's rule states, as transcribed in the catalogue; a rule "
    "marked '(from memory)' or '(section from memory)' was not re-read against the rule book.\n"
    "Not checked: drag and lift values marked '(from memory)' were recalled, not read in their source; tests "
    "compare the drag laws with an independent library (fluids) and the lift laws with their published formulas, "
    "not with wind-tunnel data. See `balltraj balls --models` for each model's source.")


def _len(x, units, sigma=None):
    return length_text(x, units, sigma, small=abs(x) < 2.0)


def _far(x, units):
    return length_text(x, units, None, small=False)


def flight_summary(rec: dict, units: str = "metric") -> str:
    """A one-screen text summary of a flight record: every headline number with its one-sigma
    uncertainty, the target plane in words, and every warning."""
    L, S, D, A = rec["launch"], rec["spin"], rec["deflection"], rec["aero"]
    U = rec.get("uncertainty", {})

    def u(sec, key):
        v = (U.get(sec) or {}).get(key)
        return v if isinstance(v, (int, float)) else None

    def pm(x, sec, key, digits):
        s = u(sec, key)
        return f"{x:.{digits}f}" + (f" ± {s:.{digits}f}" if s else "")

    measured = rec.get("fit", {}).get("n_points", 0) > 0
    lines = [
        f"ball            {rec['ball_properties']['title']}" + ("" if measured else " (predicted flight, not measured)"),
        f"launch speed    {speed_text(L['speed_mps'], units, u('launch', 'speed_mps'))}",
        f"launch angles   {pm(abs(L['elevation_deg']), 'launch', 'elevation_deg', 2)} deg "
        f"{'up' if L['elevation_deg'] >= 0 else 'down'}, "
        f"{pm(abs(L['azimuth_deg']), 'launch', 'azimuth_deg', 2)} deg {'left' if L['azimuth_deg'] >= 0 else 'right'}",
        f"spin            {spin_text(S['transverse_rate_rpm'] * RPM, (u('spin', 'transverse_rate_rpm') or 0) * RPM or None)}"
        f" transverse" + ("" if S["gyro_observed"] else " (gyro spin not observable)"),
        f"transverse axis ({', '.join(f'{a:+.2f}' for a in S['transverse_axis'])})"
        + (f" {S['axis_in_words']['text']}" if (S.get("axis_in_words") or {}).get("text") else ""),
        f"coefficients    C_D {pm(A['drag_coefficient'], 'aero', 'drag_coefficient', 3)}, "
        f"C_L {pm(A['lift_coefficient'], 'aero', 'lift_coefficient', 3)}, "
        f"S {pm(A['spin_parameter'], 'aero', 'spin_parameter', 3)}, Re {A['reynolds_number']:.3g}",
        f"models          drag: {source_words(A.get('drag_source') or rec['model']['drag_model'])}; "
        f"lift: {source_words(A.get('lift_source') or rec['model']['lift_model'])}",
        f"deflection      {_len(abs(D['horizontal_m']), units, u('deflection', 'horizontal_m'))} "
        f"{'left' if D['horizontal_m'] >= 0 else 'right'}, "
        f"{_len(abs(D['vertical_m']), units, u('deflection', 'vertical_m'))} "
        f"{'up' if D['vertical_m'] >= 0 else 'down'} from spin, at x = {_far(D['target_x_m'], units)}",
    ]
    if S.get("gyro_observed") and S.get("axis"):
        lines.insert(5, _full_spin_line(S, U.get("spin") or {}))
        ag = S.get("agreement")
        if ag:
            lines.insert(6, f"spin check      across the flight: surface {ag['surface_transverse_rpm']:.0f} rpm, "
                            f"flight's curve {ag['flight_transverse_rpm']:.0f} rpm, "
                            f"{ag['difference_sigmas']:.1f} sigma apart: "
                            + ("they agree, combined" if ag["agrees"] else "they disagree, the surface is used alone"))
    if D.get("target_plane"):
        lines.append(f"target plane    {D['target_plane']}")
    if rec.get("air"):
        lines.append(f"air             {air_text(rec['air'], units)}")
    f = rec["fit"]
    if f["n_points"]:
        lines.append(f"fit             {f['n_points']} points, {f['n_outliers']} outliers, "
                     + (f"rms residual {_len(f['rms_residual'], units)}" if f["residual_unit"] == "m"
                        else f"rms residual {f['rms_residual']:.2f} px"))
    if measured:
        lines.append("(± one standard deviation; left and right as seen looking along the flight)")
    for w in rec.get("warnings", []):
        lines.append(f"warning: {w}")
    return "\n".join(lines)


def _full_spin_line(S: dict, U: dict) -> str:
    """The whole spin (gyro part included) with its sigmas, in one line."""
    def pm(key, digits=0, scale=1.0, unit=""):
        x, e = S.get(key), U.get(key)
        if not isinstance(x, (int, float)):
            return "—"
        return f"{x * scale:.{digits}f}" + (f" ± {e * scale:.{digits}f}" if isinstance(e, (int, float)) else "") + unit

    axis = f"axis ({', '.join(f'{a:+.2f}' for a in S['axis'])})"
    if isinstance(U.get("axis_deg"), (int, float)):
        axis += f" ± {U['axis_deg']:.1f} deg"
    text = f"full spin       {pm('rate_rpm', unit=' rpm')}, {axis}"
    if isinstance(S.get("gyro_rate_rpm"), (int, float)):
        text += f"; gyro {pm('gyro_rate_rpm', unit=' rpm')} along the flight"
    if isinstance(S.get("transverse_share"), (int, float)):
        text += f", {pm('transverse_share', scale=100, unit=' %')} across it"
    return text


def flight_line(rec: dict, units: str = "metric") -> str:
    """One line of a flight's headline numbers with their sigmas (for lists of flights)."""
    D, U = rec["deflection"], rec.get("uncertainty", {})
    sp = (U.get("launch") or {}).get("speed_mps")
    sr = (U.get("spin") or {}).get("transverse_rate_rpm")
    sh = (U.get("deflection") or {}).get("horizontal_m")
    sv = (U.get("deflection") or {}).get("vertical_m")
    return (f"{speed_text(rec['launch']['speed_mps'], units, sp).split(' (')[0]}, "
            f"{spin_text(rec['spin']['transverse_rate_rpm'] * RPM, sr * RPM if sr else None)} transverse, "
            f"moved {_len(D['horizontal_m'], units, sh)} left / {_len(D['vertical_m'], units, sv)} up by spin at "
            f"x = {_far(D['target_x_m'], units)}")


def balls_table(catalogue, models: dict | None = None, units: str = "metric") -> str:
    """The ball catalogue in aligned columns, what was and was not checked, and (``models``:
    kind -> [(name, source)]) the aerodynamic models."""
    imp = units == "imperial"
    mu, du = ("oz", "in") if imp else ("g", "mm")
    mf, df = (1 / 0.028349523125, 1 / INCH) if imp else (1e3, 1e3)
    dig = 2 if imp else 1
    rows = [("name", f"mass ({mu})", f"diameter ({du})", "drag / lift model", "rule")]
    for b in catalogue:
        rows.append((b.name, f"{b.mass_range_kg[0] * mf:.{dig}f}-{b.mass_range_kg[1] * mf:.{dig}f}",
                     f"{b.diameter_range_m[0] * df:.{dig}f}-{b.diameter_range_m[1] * df:.{dig}f}",
                     f"{b.drag_model} / {b.lift_model}", b.rule))
    w = [max(len(r[i]) for r in rows) for i in range(4)]
    lines = [f"{r[0]:<{w[0]}}  {r[1]:>{w[1]}}  {r[2]:>{w[2]}}  {r[3]:<{w[3]}}  {r[4]}" for r in rows]
    lines += ["", BALLS_CHECKS]
    if models:
        lines.append("")
        entries = [(kind, name, source) for kind, es in models.items() for name, source in es]
        wn = max(len(n) for _, n, _ in entries)
        for kind, name, source in entries:
            lines.append(f"{kind:<5} {name:<{wn}}  {model_words(name)}: {source}")
    return "\n".join(lines)


def tracking_lines(res) -> list[str]:
    """What tracking found in a clip: frames, rate, one line a flight, warnings."""
    lines = [f"{res.n_frames} frames at {res.fps_measured:.1f} frames/s; {len(res.flights)} flight(s)"]
    for f in res.flights:
        end = f.end_reason + (" (after a bounce)" if f.bounce and "bounce" not in f.end_reason else "")
        lines.append(f"  flight {f.flight}: {len(f.t)} points, {f.t[0]:.3f}-{f.t[-1]:.3f} s, ended: {end}")
    lines += [f"warning: {w}" for w in res.warnings]
    return lines


def _table(rows: list[tuple], right: set[int] = frozenset()) -> list[str]:
    w = [max(len(str(r[i])) for r in rows) for i in range(len(rows[0]))]
    return ["  ".join((f"{str(c):>{w[i]}}" if i in right else f"{str(c):<{w[i]}}") for i, c in enumerate(r)).rstrip()
            for r in rows]


def library_clips_table(rows, first_flights: dict | None = None, units: str = "metric") -> str:
    """One line a clip: id, status, ball, flights, session, athlete, the first flight's result, clip."""
    if not rows:
        return "the library is empty"
    first_flights = first_flights or {}
    out = [("id", "status", "ball", "flights", "session", "athlete", "result (first flight)", "clip")]
    for r in rows:
        f = first_flights.get(r["id"])
        res = "—"
        if f is not None and f["launch_speed_mps"] is not None:
            res = (f"{speed_text(f['launch_speed_mps'], units).split(' (')[0]}, {f['transverse_rate_rpm']:.0f} rpm, "
                   f"{_len(f['deflection_horizontal_m'], units)} left")
        out.append((r["id"], r["status"], r["ball"], r["n_flights"], r["session"] or "", r["athlete"] or "", res,
                    r["path"] + (f"  ({r['error']})" if r["error"] else "")))
    return "\n".join(_table(out, right={0, 3}))


def comparison_table(by: str, res: list[dict], units: str = "metric") -> str:
    """Mean ± spread of each (name, ball) group; different balls are never averaged together."""
    imp = units == "imperial"
    sf, su = (1 / MPH, "mph") if imp else (3.6, "km/h")
    lf, lu = (1 / INCH, "in") if imp else (100.0, "cm")
    rows = [(by, "ball", "flights", f"speed {su}", "spin rpm", f"left {lu}", f"up {lu}")]
    for d in res:
        sp, sr, dh, dv = (d[k] for k in ("launch_speed_mps", "transverse_rate_rpm", "deflection_horizontal_m",
                                         "deflection_vertical_m"))
        rows.append((d["name"], d["ball"], d["n"], f"{sp[0] * sf:.1f} ± {sp[1] * sf:.1f}", f"{sr[0]:.0f} ± {sr[1]:.0f}",
                     f"{dh[0] * lf:.1f} ± {dh[1] * lf:.1f}", f"{dv[0] * lf:.1f} ± {dv[1] * lf:.1f}"))
    lines = _table(rows, right={2, 3, 4, 5, 6})
    lines.append("(mean ± standard deviation of the flights; each ball on its own line, never averaged together)")
    return "\n".join(lines)


