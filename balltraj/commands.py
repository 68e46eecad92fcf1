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


def _fit_one(path, *, ball, air, target_x, start_near, start_sigma, fit_drag, free_lift):
    from .errors import BallTrajError
    from .fitting.analysis import fit_record
    from .fitting.flight_fit import FitOptions, fit_flight
    from .formats import read_track_csv
    from .physics.flight import FlightModel

    track = read_track_csv(path)
    model = FlightModel.for_ball(ball, air)
    if not (math.isfinite(start_sigma) and start_sigma > 0):
        raise InputError(f"--start-sigma must be a positive number of metres, got {start_sigma}")
    opts = FitOptions(fit_drag=fit_drag, free_lift=free_lift,
                      start_near=None if start_near is None else parse_vector(start_near, "--start-near"),
                      start_sigma=start_sigma)
    try:
        fit = fit_flight(model, track.t, track.xyz, track.sigma, opts)
        rec, d = fit_record(fit, ball, air, model, target_x=_target(target_x), source=str(path))
    except BallTrajError as e:
        raise e.with_path(str(path)) from None
    rec["air_note"] = air.source
    return rec, d


def _path_rows(d):
    keep = d.spin_path.t <= max(d.time_s, d.reference_time_s) + 1e-12
    t = d.spin_path.t[keep]
    t = t[t >= d.spin_path.t[0]]
    a = d.spin_path.positions(t)[0]
    b = d.reference_path.positions(t)[0]
    for ti, pa, pb in zip(t, a, b):
        yield [float(ti), *map(float, pa), *map(float, pb), *map(float, pa - pb)]


PATH_HEADER = ["t", "x", "y", "z", "ref_x", "ref_y", "ref_z", "dx", "dy", "dz"]

SUMMARY_HEADER = ["source", "status", "ball", "launch_speed_mps", "elevation_deg", "azimuth_deg",
                  "transverse_rate_rpm", "transverse_rate_sigma_rpm", "drag_coefficient", "lift_coefficient",
                  "target_x_m", "deflection_horizontal_m", "deflection_vertical_m",
                  "deflection_horizontal_sigma_m", "deflection_vertical_sigma_m", "n_points", "n_outliers",
                  "rms_residual_m", "message"]


def summary_row(source, rec: Optional[dict], error: Optional[str] = None) -> list:
    if rec is None:
        return [source, "failed"] + [""] * (len(SUMMARY_HEADER) - 3) + [error or ""]
    L, S, D, U, F = rec["launch"], rec["spin"], rec["deflection"], rec["uncertainty"], rec["fit"]
    return [source, "ok", rec["ball"], L["speed_mps"], L["elevation_deg"], L["azimuth_deg"],
            S["transverse_rate_rpm"], U.get("spin", {}).get("transverse_rate_rpm", ""),
            rec["aero"]["drag_coefficient"], rec["aero"]["lift_coefficient"], D["target_x_m"],
            D["horizontal_m"], D["vertical_m"], U.get("deflection", {}).get("horizontal_m", ""),
            U.get("deflection", {}).get("vertical_m", ""), F["n_points"], F["n_outliers"], F["rms_residual"],
            "; ".join(rec.get("warnings", []))]


def _label(rec: dict, labels: Optional[dict]) -> dict:
    for k, v in (labels or {}).items():
        if v is not None:
            if len(v) > 500:
                raise InputError(f"--{k} is longer than 500 characters")
            rec[k] = v
    return rec


def run_fit(*, inputs: Sequence[Path], ball, air, target_x, start_near, start_sigma, fit_drag, free_lift,
            path_csv, out, labels: Optional[dict] = None) -> str:
    from .errors import BallTrajError
    from .formats import check_output_path, write_csv, write_json

    kw = dict(ball=ball, air=air, target_x=target_x, start_near=start_near, start_sigma=start_sigma,
              fit_drag=fit_drag, free_lift=free_lift)
    if len(inputs) == 1:
        out_p = check_output_path(out, inputs)
        if path_csv is not None:
            check_output_path(path_csv, list(inputs) + [out])
        rec, d = _fit_one(inputs[0], **kw)
        _label(rec, labels)
        if path_csv is not None:
            write_csv(path_csv, PATH_HEADER, _path_rows(d),
                      comment="fitted path, no-spin reference from the same launch state, and their difference (m)")
        write_json(out_p, rec)
        return flight_summary(rec) + f"\nwrote {out_p}"
    out_dir = Path(out)
    if out_dir.exists() and not out_dir.is_dir():
        raise InputError("with several inputs, -o must be a folder", path=str(out))
    if path_csv is not None:
        raise InputError("--path-csv works with one input; with several, each flight file holds its points")
    out_dir.mkdir(parents=True, exist_ok=True)
    rows, lines, stems = [], [], set()
    for i, path in enumerate(inputs):
        stem = Path(path).stem
        if stem in stems:
            stem = f"{stem}-{i + 1}"
        stems.add(stem)
        try:
            rec, _ = _fit_one(path, **kw)
            _label(rec, labels)
        except BallTrajError as e:
            rows.append(summary_row(str(path), None, e.one_line()))
            lines.append(f"{path}: failed: {e.one_line()}")
            continue
        write_json(out_dir / f"{stem}.json", rec)
        rows.append(summary_row(str(path), rec))
        lines.append(f"{path}: {rec['launch']['speed_mps']:.2f} m/s, {rec['spin']['transverse_rate_rpm']:.0f} rpm "
                     f"transverse, deflection {rec['deflection']['horizontal_m'] * 100:+.1f} cm horizontal, "
                     f"{rec['deflection']['vertical_m'] * 100:+.1f} cm vertical")
    write_csv(out_dir / "summary.csv", SUMMARY_HEADER, rows)
    n_ok = sum(1 for r in rows if r[1] == "ok")
    lines.append(f"{n_ok} of {len(rows)} flights fitted; wrote {out_dir / 'summary.csv'}")
    if n_ok == 0:
        raise InputError("no flight could be fitted: " + rows[0][-1], path=str(inputs[0]))
    return "\n".join(lines)


def _title(path, rec) -> str:
    name = Path(str(path)).stem
    who = rec.get("athlete")
    return f"{name} — {who}" if who else name


def run_report(*, flights: Sequence[Path], units: str, out: Path, fmt: str = "html",
               altitudes: Sequence[float] = (), temperatures: Sequence[float] = ()) -> str:
    from .formats import atomic_write_bytes, check_output_path, read_flight_file

    if units not in ("metric", "imperial"):
        raise InputError(f"--units must be metric or imperial, got {units!r}")
    if fmt not in ("html", "png", "pdf"):
        raise InputError(f"--format must be html, png or pdf, got {fmt!r}")
    out_p = check_output_path(out, flights)
    recs = [read_flight_file(f) for f in flights]
    titles = [_title(f, r) for f, r in zip(flights, recs)]
    if fmt == "html":
        from .report.html import build_report

        page = build_report(recs, titles, units, {"altitudes": list(altitudes), "temperatures": list(temperatures)})
        atomic_write_bytes(out_p, page.encode("utf-8"))
    else:
        if len(recs) != 1:
            raise InputError(f"--format {fmt} makes a page for one flight; give one flight file or use html")
        from .report.page import one_page

        atomic_write_bytes(out_p, one_page(recs[0], titles[0], units, fmt))
    return f"wrote {out_p} ({len(recs)} flight{'s' if len(recs) > 1 else ''}, {units})"


def _sample_dir() -> Path:
    for cand in (Path.cwd() / "sample_clips", Path(__file__).resolve().parents[1] / "sample_clips"):
        if (cand / "tracks").is_dir():
            return cand
    raise InputError("the bundled sample session was not found",
                     hint="run balltraj demo from the balltraj source folder (it holds sample_clips/)")


def run_demo(out: Path, progress=None) -> str:
    """Fit the bundled sample session, write flight files and one report, compare with truth."""
    import json

    from .formats import read_json, write_csv, write_json
    from .physics.air import air_conditions
    from .physics.balls import get_ball
    from .report.html import build_report
    from .formats import atomic_write_bytes

    samples = _sample_dir()
    out = Path(out)
    if out.exists() and not out.is_dir():
        raise InputError("the demo output must be a folder", path=str(out))
    out.mkdir(parents=True, exist_ok=True)
    rows, recs, titles, lines = [], [], [], []
    tracks = sorted((samples / "tracks").glob("*.csv"))
    header = f"{'flight':<16} {'athlete':<12} {'speed m/s':>10} {'spin rpm':>9} {'left cm':>8} {'up cm':>7}   truth: left, up cm"
    lines.append(header)
    for path in tracks:
        truth = read_json(path.with_suffix(".truth.json"))
        ball = get_ball(truth["truth"]["ball"])
        air = air_conditions(**truth["air_kwargs"])
        rec, d = _fit_one(path, ball=ball, air=air, target_x=str(truth["target_x_m"]), start_near=None,
                          start_sigma=0.3, fit_drag=False, free_lift=False)
        rec["athlete"], rec["session"] = truth["athlete"], truth["session"]
        rec["notes"] = "Invented demo data (not a real club or athlete)."
        write_json(out / f"{path.stem}.json", rec)
        recs.append(rec)
        titles.append(path.stem)
        rows.append(summary_row(str(path), rec))
        D, TD = rec["deflection"], truth["truth"]["deflection"]
        lines.append(f"{path.stem:<16} {truth['athlete']:<12} {rec['launch']['speed_mps']:>10.2f} "
                     f"{rec['spin']['transverse_rate_rpm']:>9.0f} {D['horizontal_m'] * 100:>8.1f} {D['vertical_m'] * 100:>7.1f}"
                     f"   {TD['horizontal_m'] * 100:.1f}, {TD['vertical_m'] * 100:.1f}")
        if progress:
            progress()
    write_csv(out / "summary.csv", SUMMARY_HEADER, rows)
    page = build_report(recs, titles, "metric")
    atomic_write_bytes(out / "report.html", page.encode("utf-8"))
    lines.append("")
    lines.append(f"flight files and summary.csv in {out}/; open {out / 'report.html'} in a browser")
    lines.append("(invented demo session: the club and the athletes do not exist)")
    _ = json
    return "\n".join(lines)
