"""What each CLI command does, as plain functions: read inputs, call the library, write outputs,
return the text to print. The CLI only parses options and prints; tests call these directly too.
"""

from __future__ import annotations

import math
from contextlib import contextmanager
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


def _fit_one(path, *, ball, air, target_x, start_near, start_sigma, fit_drag, free_lift, cameras=None,
             flight=None):
    from .errors import BallTrajError
    from .fitting.analysis import fit_record
    from .fitting.flight_fit import FitOptions, fit_flight
    from .formats import csv_columns, read_observations_csv, read_track_csv
    from .physics.flight import FlightModel

    model = FlightModel.for_ball(ball, air)
    if not (math.isfinite(start_sigma) and start_sigma > 0):
        raise InputError(f"--start-sigma must be a positive number of metres, got {start_sigma}")
    opts = FitOptions(fit_drag=fit_drag, free_lift=free_lift,
                      start_near=None if start_near is None else parse_vector(start_near, "--start-near"),
                      start_sigma=start_sigma)
    cols = csv_columns(path)
    image = {"u", "v", "camera"} <= set(cols)
    try:
        if image:
            if cameras is None:
                raise InputError("this file holds pixel observations (t,camera,u,v); give --camera CAMERA.json",
                                 path=str(path))
            from .fitting.image_fit import fit_flight_image

            obs = _one_flight(read_observations_csv(path), flight)
            fit = fit_flight_image(model, obs.t, obs.camera, obs.uv, cameras, radius_px=obs.radius_px, options=opts)
        else:
            track = read_track_csv(path)
            fit = fit_flight(model, track.t, track.xyz, track.sigma, opts)
        rec, d = fit_record(fit, ball, air, model, target_x=_target(target_x), source=str(path))
    except BallTrajError as e:
        raise e.with_path(str(path)) from None
    rec["air_note"] = air.source
    return rec, d


def _one_flight(obs, flight):
    if obs.flight is None:
        return obs
    ids = sorted(set(obs.flight.tolist()))
    if flight is None:
        if len(ids) > 1:
            raise InputError(f"the file holds {len(ids)} flights ({', '.join(f'{i:g}' for i in ids)})",
                             path=obs.path, hint="choose one with --flight N")
        return obs
    if flight not in ids:
        raise InputError(f"there is no flight {flight} (flights: {', '.join(f'{i:g}' for i in ids)})", path=obs.path)
    return obs.select(obs.flight == flight)


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
            path_csv, out, labels: Optional[dict] = None, camera: Optional[Path] = None,
            flight: Optional[int] = None) -> str:
    from .errors import BallTrajError
    from .formats import check_output_path, read_cameras, write_csv, write_json

    cams = None if camera is None else read_cameras(camera)
    kw = dict(ball=ball, air=air, target_x=target_x, start_near=start_near, start_sigma=start_sigma,
              fit_drag=fit_drag, free_lift=free_lift, cameras=cams, flight=flight)
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
                     f"{rec['deflection']['vertical_m'] * 100:+.1f} cm up")
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
        if cand.is_dir() and any(cand.glob("*.truth.json")):
            return cand
    raise InputError("the bundled sample session was not found",
                     hint="run balltraj demo from the balltraj source folder (it holds sample_clips/)")


def run_demo(out: Path, show_progress: bool = False) -> str:
    """The whole job on the bundled sample session: each clip is tracked, fitted in image space and
    reported; the tracked 3D sample flights are fitted too; one report holds them all."""
    from .formats import atomic_write_bytes, read_cameras, read_json, write_csv, write_json
    from .physics.air import air_conditions
    from .physics.balls import get_ball
    from .report.html import build_report

    samples = _sample_dir()
    root = samples.parent
    out = Path(out)
    if out.exists() and not out.is_dir():
        raise InputError("the demo output must be a folder", path=str(out))
    out.mkdir(parents=True, exist_ok=True)
    rows, recs, titles = [], [], []
    lines = [f"{'flight':<18} {'athlete':<11} {'speed m/s':>9} {'spin rpm':>8} {'left cm':>8} {'up cm':>7}"
             f"   truth: left, up cm"]

    def line(name, athlete, rec, truth):
        D, TD = rec["deflection"], truth["deflection"]
        lines.append(f"{name:<18} {athlete:<11} {rec['launch']['speed_mps']:>9.2f} "
                     f"{rec['spin']['transverse_rate_rpm']:>8.0f} {D['horizontal_m'] * 100:>8.1f} "
                     f"{D['vertical_m'] * 100:>7.1f}   {TD['horizontal_m'] * 100:.1f}, {TD['vertical_m'] * 100:.1f}")

    for clip in sorted(samples.glob("*.mp4")):
        meta = read_json(clip.with_suffix(".truth.json"))
        ball = get_ball(meta["ball"])
        air = air_conditions(**meta["air_kwargs"])
        cams = read_cameras(root / meta["camera"])
        crecs, _ = analyze_clip(clip=clip, cams=cams, ball=ball, air=air, target_x=str(meta["target_x_m"]),
                                start_near=",".join(str(v) for v in meta["start_near"]), start_sigma=0.3,
                                capture_fps=None, out_dir=out / clip.stem, show_progress=show_progress,
                                labels={"athlete": meta["athlete"], "session": meta["session"],
                                        "notes": "Invented demo data (not a real club or athlete)."})
        for rec in crecs:
            recs.append(rec)
            titles.append(clip.stem)
            rows.append(summary_row(str(clip), rec))
            line(clip.stem, meta["athlete"], rec, meta["truth"])
    for path in sorted((samples / "tracks").glob("*.csv")):
        meta = read_json(path.with_suffix(".truth.json"))
        ball = get_ball(meta["truth"]["ball"])
        air = air_conditions(**meta["air_kwargs"])
        rec, _ = _fit_one(path, ball=ball, air=air, target_x=str(meta["target_x_m"]), start_near=None,
                          start_sigma=0.3, fit_drag=False, free_lift=False)
        _label(rec, {"athlete": meta["athlete"], "session": meta["session"],
                     "notes": "Invented demo data (not a real club or athlete)."})
        write_json(out / f"{path.stem}.json", rec)
        recs.append(rec)
        titles.append(path.stem)
        rows.append(summary_row(str(path), rec))
        line(path.stem, meta["athlete"], rec, meta["truth"])
    write_csv(out / "summary.csv", SUMMARY_HEADER, rows)
    atomic_write_bytes(out / "report.html", build_report(recs, titles, "metric").encode("utf-8"))
    lines += ["", f"clips: per-clip folders with observations.csv, flight.json and report.html in {out}/",
              f"all flights: {out / 'summary.csv'} and {out / 'report.html'} (open it in a browser)",
              "invented demo session: the club and the athletes do not exist.",
              "Keep people and cameras out of the ball's path; these are estimates, not officiating decisions."]
    return "\n".join(lines)


# ------------------------------------------------------------------------------ cameras
IMAGE_EXT = {".png", ".jpg", ".jpeg", ".bmp", ".tif", ".tiff"}


def _read_gray(path):
    import cv2

    img = cv2.imread(str(path), cv2.IMREAD_GRAYSCALE)
    if img is None:
        raise InputError("cannot read this image", path=str(path), hint="give PNG or JPEG images, or a video")
    return img


def _video_frames(path, every: int = 10, limit: int = 60):
    import cv2

    cap = cv2.VideoCapture(str(path))
    if not cap.isOpened():
        raise InputError("cannot open this video", path=str(path))
    out, k = [], 0
    ok, frame = cap.read()
    while ok and len(out) < limit:
        if k % every == 0:
            out.append((f"{Path(path).name}#{k}", cv2.cvtColor(frame, cv2.COLOR_BGR2GRAY)))
        k += 1
        ok, frame = cap.read()
    cap.release()
    if not out:
        raise InputError("the video holds no readable frames", path=str(path))
    return out


def run_calibrate_lens(*, inputs: Sequence[Path], cols: int, rows: int, square_mm: float, name: str, out: Path,
                       every: int = 10) -> str:
    from .camera.calibrate import calibrate_lens
    from .formats import check_output_path, write_json

    if cols < 3 or rows < 3 or not (square_mm > 0 and math.isfinite(square_mm)):
        raise InputError("--cols and --rows must be at least 3 and --square-mm positive")
    out_p = check_output_path(out, inputs)
    views = []
    for p in inputs:
        if not Path(p).exists():
            raise InputError("no such file", path=str(p))
        if Path(p).suffix.lower() in IMAGE_EXT:
            views.append((Path(p).name, _read_gray(p)))
        else:
            views += _video_frames(p, every=every)
    res = calibrate_lens(views, cols, rows, square_mm / 1000.0, name)
    d = res.camera.to_dict()
    d["calibration"] = {"kind": "lens", "rms_px": res.rms_px, "views_used": res.used,
                        "per_view_rms_px": dict(zip(res.used, res.per_view_px)), "rejected": res.rejected,
                        "coverage": res.coverage, "warnings": res.warnings,
                        "note": "rvec/tvec are placeholders until `balltraj calibrate scene` places the camera"}
    write_json(out_p, d)
    lines = [f"lens of {name!r}: focal {res.camera.K[0, 0]:.1f} x {res.camera.K[1, 1]:.1f} px, centre "
             f"({res.camera.K[0, 2]:.1f}, {res.camera.K[1, 2]:.1f}) px, rms reprojection {res.rms_px:.3f} px",
             f"{len(res.used)} views used, {len(res.rejected)} rejected"]
    lines += [f"  rejected {k}: {v}" for k, v in res.rejected.items()]
    lines += [f"  {k}: {e:.3f} px" for k, e in zip(res.used, res.per_view_px)]
    lines += [f"warning: {w}" for w in res.warnings]
    lines.append(f"wrote {out_p}")
    return "\n".join(lines)


def run_calibrate_board(*, cols: int, rows: int, square_mm: float, out: Path) -> str:
    import io

    from .camera.calibrate import board_figure
    from .formats import atomic_write_bytes, check_output_path

    if cols < 3 or rows < 3 or cols > 40 or rows > 40 or not (5 <= square_mm <= 200):
        raise InputError("a board needs 3..40 inner corners each way and squares of 5..200 mm")
    out_p = check_output_path(out)
    fig = board_figure(cols, rows, square_mm)
    written = []
    for ext in (".png", ".pdf"):
        buf = io.BytesIO()
        fig.savefig(buf, format=ext[1:], dpi=300)
        target = out_p.with_suffix(ext)
        atomic_write_bytes(target, buf.getvalue())
        written.append(str(target))
    import matplotlib.pyplot as plt

    plt.close(fig)
    return f"board {cols}x{rows} inner corners, squares {square_mm:g} mm: wrote {', '.join(written)} (print at 100 %)"


def run_calibrate_scene(*, landmarks: Optional[Path], template: Optional[str], points: Optional[Path],
                        lens: Optional[Path], image_size: Optional[str], name: str, out: Path) -> str:
    from .camera.calibrate import calibrate_scene, describe_pose, template_points
    from .formats import check_output_path, numeric_column, read_cameras, read_csv_table, write_json

    out_p = check_output_path(out, [p for p in (landmarks, points, lens) if p is not None])
    lens_cam = None if lens is None else read_cameras(lens)[0]
    if template is not None:
        tpl = template_points(template)
        if points is None:
            raise InputError("--template needs --points PIXELS.csv (columns name,u,v)",
                             hint=f"landmark names: {', '.join(tpl['points'])}")
        table = read_csv_table(points, ["name", "u", "v"])
        names = table.columns["name"]
        unknown = [n for n in names if n not in tpl["points"]]
        if unknown:
            raise InputError(f"unknown landmark(s) {', '.join(unknown)} for template {template}", path=str(points),
                             hint=f"the template names: {', '.join(tpl['points'])}")
        world = np.array([tpl["points"][n] for n in names])
        uv = np.column_stack([numeric_column(table, "u"), numeric_column(table, "v")])
        frame, src = tpl["frame"], str(points)
    elif landmarks is not None:
        table = read_csv_table(landmarks, ["x", "y", "z", "u", "v"], ["name"])
        world = np.column_stack([numeric_column(table, c) for c in "xyz"])
        uv = np.column_stack([numeric_column(table, "u"), numeric_column(table, "v")])
        names = table.columns.get("name") or [f"landmark {i + 1}" for i in range(table.n_rows)]
        frame, src = "as given by the landmark coordinates in the CSV", str(landmarks)
    else:
        raise InputError("give --landmarks LANDMARKS.csv (x,y,z,u,v) or --template NAME --points PIXELS.csv")
    if lens_cam is not None:
        size = lens_cam.image_size
    elif image_size is not None:
        try:
            w, h = (int(x) for x in image_size.lower().split("x"))
        except ValueError:
            raise InputError(f"--image-size must look like 1280x720, got {image_size!r}") from None
        size = (w, h)
    else:
        raise InputError("give --lens LENS.json or --image-size WxH")
    try:
        res = calibrate_scene(world, uv, list(names), lens_cam, size, name=name, frame=frame)
    except InputError as e:
        raise e.with_path(src) from None
    d = res.camera.to_dict()
    d["calibration"] = {"kind": "scene", "world_frame": res.frame, "rms_px": res.rms_px,
                        "landmark_errors_px": res.errors_px, "focal_estimated_from_landmarks": res.focal_estimated,
                        "template": template}
    write_json(out_p, d)
    lines = [describe_pose(res.camera), f"world frame: {res.frame}",
             f"rms reprojection {res.rms_px:.2f} px over {len(names)} landmarks"]
    lines += [f"  {k}: {v:.2f} px" for k, v in res.errors_px.items()]
    if res.focal_estimated:
        lines.append("note: focal length estimated from the landmarks (no lens file); lens distortion assumed zero")
    lines.append(f"wrote {out_p}")
    return "\n".join(lines)


def run_triangulate(*, observations: Path, camera: Path, out: Path, flight: Optional[int] = None) -> str:
    from .camera.triangulate import triangulate_observations
    from .formats import check_output_path, read_cameras, read_observations_csv, write_csv

    out_p = check_output_path(out, [observations, camera])
    cams = read_cameras(camera)
    obs = _one_flight(read_observations_csv(observations), flight)
    try:
        t, xyz = triangulate_observations(obs.t, obs.camera, obs.uv, cams)
    except InputError as e:
        raise e.with_path(str(observations)) from None
    if len(t) < 2:
        raise InputError("the cameras' observations do not overlap in time", path=str(observations),
                         hint="check the time offsets in the rig file")
    write_csv(out_p, ["t", "x", "y", "z"], ([float(a), *map(float, b)] for a, b in zip(t, xyz)),
              comment=f"triangulated from {observations} with {camera}")
    return f"triangulated {len(t)} points from {len(set(obs.camera))} cameras; wrote {out_p}"


# ------------------------------------------------------------------------------ video
OBS_HEADER = ["t", "camera", "u", "v", "radius_px", "quality", "flight", "frame", "streak_px", "bounce"]


@contextmanager
def _progress(label: str, show: bool):
    """A rich progress bar on stderr, as a callback ``(done, total)`` for library code; None when
    not shown (library code prints nothing itself)."""
    if not show:
        yield None
        return
    from rich.console import Console
    from rich.progress import BarColumn, MofNCompleteColumn, Progress, TextColumn, TimeRemainingColumn

    with Progress(TextColumn(label), BarColumn(), MofNCompleteColumn(), TimeRemainingColumn(), transient=True,
                  console=Console(stderr=True)) as bar:
        task = bar.add_task(label, total=None)
        yield lambda done, total: bar.update(task, completed=done, total=total or None)


def _track(clip, cams, ball, capture_fps, overlay, show_progress, start_s=0.0, end_s=None):
    from .vision.pipeline import track_clip

    cam = cams[0] if cams else None
    if start_s < 0 or (end_s is not None and end_s <= start_s):
        raise InputError("--start must be >= 0 and --end after --start")
    with _progress(f"tracking {Path(clip).name}", show_progress) as progress:
        return track_clip(clip, cam, ball.radius_m, capture_fps=capture_fps, overlay_path=overlay, start_s=start_s,
                          end_s=end_s, progress=progress)


def _obs_rows(res, camera_name):
    for f in res.flights:
        for i in range(len(f.t)):
            yield [float(f.t[i]), camera_name, float(f.uv[i, 0]), float(f.uv[i, 1]), float(f.radius_px[i]),
                   float(f.quality[i]), f.flight, int(f.frame[i]), float(f.streak_px[i]), int(f.bounce)]


def run_track(*, clip: Path, camera: Optional[Path], ball, capture_fps: Optional[float], out: Path,
              overlay: Optional[Path], show_progress: bool = False, start_s: float = 0.0,
              end_s: Optional[float] = None) -> str:
    from .formats import check_output_path, read_cameras, write_csv

    out_p = check_output_path(out, [clip])
    if overlay is not None:
        check_output_path(overlay, [clip, out])
    if capture_fps is not None and not (1 <= capture_fps <= 10000):
        raise InputError(f"--capture-fps must be 1..10000, got {capture_fps}")
    cams = read_cameras(camera) if camera is not None else None
    from .vision.pipeline import no_ball_error

    res = _track(clip, cams, ball, capture_fps, overlay, show_progress, start_s, end_s)
    if not res.flights:
        raise no_ball_error(clip, res)
    name = cams[0].name if cams else "camera"
    comment = "\n".join([f"tracked from {clip}"] + [f"flight {f.flight}: {len(f.t)} points, "
                                                    f"{f.t[0]:.3f}-{f.t[-1]:.3f} s, ended: {f.end_reason}"
                                                    for f in res.flights])
    write_csv(out_p, OBS_HEADER, _obs_rows(res, name), comment=comment)
    lines = [f"{res.n_frames} frames at {res.fps_measured:.1f} frames/s; {len(res.flights)} flight(s)"]
    lines += [f"  flight {f.flight}: {len(f.t)} points, {f.t[0]:.3f}-{f.t[-1]:.3f} s, ended: {f.end_reason}"
              + (" (bounce)" if f.bounce else "") for f in res.flights]
    lines += [f"warning: {w}" for w in res.warnings]
    lines.append(f"wrote {out_p}")
    return "\n".join(lines)


def analyze_clip(*, clip: Path, cams, ball, air, target_x, start_near, start_sigma, capture_fps, out_dir: Path,
                 show_progress: bool = False, labels: Optional[dict] = None, units: str = "metric") -> tuple[list, str]:
    """Track, fit every flight in image space, write observations, flight files and the report
    into ``out_dir`` (written into a temporary folder first, then moved into place)."""
    import shutil
    import tempfile

    from .formats import atomic_write_bytes, write_csv, write_json
    from .library.batch import analyze_clip_records
    from .report.html import build_report

    out_dir = Path(out_dir)
    parent = out_dir.parent if str(out_dir.parent) else Path(".")
    if not parent.is_dir():  # before any work
        raise InputError("the folder that should hold --out does not exist", path=str(out_dir))
    sn = None if start_near is None else parse_vector(start_near, "--start-near")
    with _progress(f"tracking {Path(clip).name}", show_progress) as progress:
        recs, res, failures = analyze_clip_records(clip, cams, ball, air, target_x=_target(target_x), start_near=sn,
                                                   start_sigma=start_sigma, capture_fps=capture_fps,
                                                   progress=progress)
    lines = []
    for rec in recs:
        _label(rec, labels)
    tmp = Path(tempfile.mkdtemp(prefix=f".{out_dir.name}.", dir=parent))
    try:
        write_csv(tmp / "observations.csv", OBS_HEADER, _obs_rows(res, cams[0].name), comment=f"tracked from {clip}")
        names = ["flight.json"] if len(recs) == 1 else [f"flight-{i + 1}.json" for i in range(len(recs))]
        for n, rec in zip(names, recs):
            write_json(tmp / n, rec)
        titles = [f"{Path(clip).stem}" + ("" if len(recs) == 1 else f" flight {i + 1}") for i in range(len(recs))]
        atomic_write_bytes(tmp / "report.html", build_report(recs, titles, units).encode("utf-8"))
        out_dir.mkdir(exist_ok=True)
        for item in tmp.iterdir():
            __import__("os").replace(item, out_dir / item.name)
    finally:
        shutil.rmtree(tmp, ignore_errors=True)
    for n, rec in zip(names, recs):
        D = rec["deflection"]
        lines.append(f"{n}: {rec['launch']['speed_mps']:.2f} m/s, {rec['spin']['transverse_rate_rpm']:.0f} rpm "
                     f"transverse, moved {D['horizontal_m'] * 100:+.1f} cm left / {D['vertical_m'] * 100:+.1f} cm up "
                     f"by spin at x = {D['target_x_m']:.2f} m")
    lines += [f"warning: {w}" for w in res.warnings] + [f"warning: {m}" for m in failures]
    lines.append(f"wrote {out_dir}/observations.csv, {', '.join(names)}, report.html")
    return recs, "\n".join(lines)


def run_analyze(*, clip, camera, ball, air, target_x, start_near, start_sigma, capture_fps, out, labels=None,
                show_progress=False) -> str:
    from .formats import read_cameras

    cams = read_cameras(camera)
    if len(cams) != 1:
        raise InputError("analyze takes one camera file (the camera that filmed the clip)", path=str(camera))
    if not (math.isfinite(start_sigma) and start_sigma > 0):
        raise InputError(f"--start-sigma must be a positive number of metres, got {start_sigma}")
    _, text = analyze_clip(clip=clip, cams=cams, ball=ball, air=air, target_x=target_x, start_near=start_near,
                           start_sigma=start_sigma, capture_fps=capture_fps, out_dir=out, show_progress=show_progress,
                           labels=labels)
    return text


def run_render(*, flight: Path, camera: Path, out: Path, fps: float, duration: Optional[float], start: float,
               exposure: float, noise: float, seed: int) -> str:
    """Render a synthetic clip of a flight file's flight seen by a camera; write the truth beside it."""
    from .fitting.record import model_from_dict
    from .formats import check_output_path, read_cameras, read_flight_file, write_csv
    from .physics.flight import FlightParameters, fly
    from .vision.render import Scene, render_clip

    out_p = check_output_path(out, [flight, camera])
    rec = read_flight_file(flight)
    cams = read_cameras(camera)
    model, params = model_from_dict(rec["model"])
    spin = np.asarray(rec["model"].get("spin_vector_radps") or [0, 0, 0], float)
    params = FlightParameters.make(1, spin=spin, drag_scale=params.drag_scale, lift_override=params.lift_override,
                                   spin_decay_s=params.spin_decay_s)
    L = rec["launch"]
    s0 = np.array(L["position_m"] + L["velocity_mps"], float)
    if not (10 <= fps <= 1000) or not (0 < exposure <= 0.05) or not (0 <= noise <= 50):
        raise InputError("--fps must be 10..1000, --exposure 0..0.05 s and --noise 0..50")
    tr = fly(model, 0.0, s0, params, ground_z=0.0, t_max=10.0)
    tg, _ = tr.first_crossing(2, 0.0, -1)
    t_fl = float(tg[0]) if np.isfinite(tg[0]) else float(tr.t[-1])
    dur = duration if duration is not None else start + t_fl + 0.2
    fn = lambda ts: tr.positions(np.clip(np.asarray(ts) - start, 0, t_fl))[0]  # noqa: E731
    scene = Scene(cams[0], fps=fps, duration_s=dur, exposure_s=exposure, noise=noise, seed=seed,
                  ball_radius_m=model.radius_m, flights=[(start, start + t_fl, fn)])
    truth = render_clip(scene, out_p)
    tpath = out_p.with_suffix(".truth.csv")
    write_csv(tpath, ["t", "flight", "u", "v", "radius_px", "x", "y", "z"],
              ([r[k] for k in ("t", "flight", "u", "v", "radius_px", "x", "y", "z")] for r in truth),
              comment=f"synthetic clip rendered by balltraj from {flight}")
    return f"rendered {int(round(dur * fps))} frames ({cams[0].image_size[0]}x{cams[0].image_size[1]}, {fps:g} fps); wrote {out_p} and {tpath}"


# ------------------------------------------------------------------------------ library
def run_batch_cmd(*, folder: Path, camera: Path, ball, air, library: Path, workers: int, cluster: Optional[str],
                  target_x, start_near, start_sigma, capture_fps, session, athlete, show_progress: bool) -> str:
    from .formats import read_cameras
    from .library.batch import BatchTask, find_clips, run_batch
    from .library.store import file_hash, open_library, options_hash

    if workers < 1 or workers > 64:
        raise InputError(f"--workers must be 1..64, got {workers}")
    clips = find_clips(folder)
    cams = read_cameras(camera)
    if len(cams) != 1:
        raise InputError("batch takes one camera file (the camera that filmed the clips)", path=str(camera))
    air_kw = {"density": air.density, "temperature_c": air.temperature_c}  # workers rebuild the same air
    sn = None if start_near is None else parse_vector(start_near, "--start-near")
    tx = _target(target_x)
    options = {"ball": ball.name, "ball_properties": ball.to_dict(), "air_density": air.density,
               "camera": cams[0].to_dict(), "target_x": tx, "start_near": sn, "start_sigma": start_sigma,
               "capture_fps": capture_fps}
    from . import __version__

    opt_hash = options_hash({**options, "tool_version": __version__})
    camera_hash = file_hash(camera)
    lib = open_library(library)
    try:
        hashes = {str(c): file_hash(c) for c in clips}
        tasks = [BatchTask(clip=str(c), camera_file=str(camera), ball=ball.to_dict(), air=air_kw, target_x=tx,
                           start_near=sn, start_sigma=start_sigma, capture_fps=capture_fps) for c in clips]
        with _progress("clips", show_progress) as progress:
            summ = run_batch(lib, tasks, hashes, opt_hash, options, camera_hash, workers=workers, cluster=cluster,
                             session=session, athlete=athlete, progress=progress)
    finally:
        lib.close()
    lines = [f"{len(clips)} clips: {summ.done} analysed, {summ.failed} failed, {summ.skipped} already in the library"]
    lines += [f"  failed: {m}" for m in summ.messages]
    lines.append(f"library: {library}")
    return "\n".join(lines)


def run_library_list(library: Path) -> str:
    from .library.store import open_library

    with open_library(library, create=False) as lib:
        rows = lib.clips()
    if not rows:
        return "the library is empty"
    lines = [f"{'id':>4} {'status':<7} {'flights':>7} {'session':<20} {'athlete':<16} clip"]
    for r in rows:
        lines.append(f"{r['id']:>4} {r['status']:<7} {r['n_flights']:>7} {(r['session'] or '')[:20]:<20} "
                     f"{(r['athlete'] or '')[:16]:<16} {r['path']}" + (f"  ({r['error']})" if r["error"] else ""))
    return "\n".join(lines)


def run_library_show(library: Path, clip: str) -> str:
    from .library.store import open_library

    with open_library(library, create=False) as lib:
        rows = [r for r in lib.clips() if str(r["id"]) == clip or r["path"] == clip or Path(r["path"]).name == clip]
        if not rows:
            raise InputError(f"no clip {clip!r} in the library", path=str(library), hint="see balltraj library list")
        out = []
        for c in rows:
            out.append(f"clip {c['id']}: {c['path']} ({c['status']}, {c['n_flights']} flights, balltraj "
                       f"{c['tool_version']})" + (f": {c['error']}" if c["error"] else ""))
            for f in lib.flights(c["id"]):
                out.append(f"  flight {f['flight_index']}: {f['launch_speed_mps']:.2f} m/s, "
                           f"{f['transverse_rate_rpm']:.0f} rpm transverse, moved {f['deflection_horizontal_m'] * 100:+.1f}"
                           f" cm left / {f['deflection_vertical_m'] * 100:+.1f} cm up at x = {f['target_x_m']:.2f} m")
    return "\n".join(out)


def run_library_export(library: Path, out: Path, per_flight: bool, fmt: str) -> str:
    from .formats import check_output_path, write_csv
    from .library.store import export_rows, open_library

    out_p = check_output_path(out, [library])
    with open_library(library, create=False) as lib:
        header, rows = export_rows(lib, per_flight=per_flight)
        rows = list(rows)
    if fmt == "parquet":
        import io

        import pandas as pd

        from .formats import atomic_write_bytes

        try:
            buf = io.BytesIO()
            pd.DataFrame(rows, columns=header).to_parquet(buf, index=False)
        except ImportError:
            raise InputError("Parquet export needs pyarrow", hint="pip install pyarrow, or export CSV") from None
        atomic_write_bytes(out_p, buf.getvalue())
    elif fmt == "csv":
        write_csv(out_p, header, rows)
    else:
        raise InputError(f"--format must be csv or parquet, got {fmt!r}")
    return f"wrote {len(rows)} rows to {out_p}"


def run_library_compare(library: Path, by: str, a: str, b: str) -> str:
    from .library.store import compare, open_library

    if by not in ("session", "athlete"):
        raise InputError(f"--by must be session or athlete, got {by!r}")
    with open_library(library, create=False) as lib:
        res = compare(lib, by, a, b)
    lines = [f"{by:<10} {'flights':>7} {'speed m/s':>16} {'spin rpm':>14} {'left cm':>14} {'up cm':>14}"]
    for d in res:
        sp, sr, dh, dv = (d[k] for k in ("launch_speed_mps", "transverse_rate_rpm", "deflection_horizontal_m",
                                         "deflection_vertical_m"))
        lines.append(f"{d['name'][:10]:<10} {d['n']:>7} {sp[0]:>9.2f} ± {sp[1]:<4.2f} {sr[0]:>8.0f} ± {sr[1]:<3.0f} "
                     f"{dh[0] * 100:>7.1f} ± {dh[1] * 100:<4.1f} {dv[0] * 100:>7.1f} ± {dv[1] * 100:<4.1f}")
    lines.append("(mean ± standard deviation of the flights)")
    return "\n".join(lines)
