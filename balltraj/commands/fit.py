"""Commands of the flight group: ``balls``, ``simulate``, ``fit``."""

from __future__ import annotations

import math

import numpy as np
from pathlib import Path
from typing import Optional, Sequence

from .. import pipeline
from ..errors import BallTrajError, InputError
from ..formats import Track, check_output_path, read_cameras, read_fit_input, write_csv, write_json
from ..physics.aero import available_models, model_info
from ..physics.air import AirConditions
from ..physics.balls import Ball, ball_names, get_ball
from ..record.refly import PATH_HEADER, SIMULATED_PATH_HEADER, path_rows, simulated_path_rows
from ..record.schema import SUMMARY_HEADER, summary_row
from .common import add_labels, mark_plane, with_default_plane, write_csv_sidecar
from .text import balls_table, flight_line, flight_summary


def run_balls(models: bool = False, units: str = "metric") -> str:
    """The ball catalogue and, with ``models``, the aerodynamic models and their sources."""
    listed = None
    if models:
        listed = {kind: [(n, model_info(kind, n).source) for n in names] for kind, names in available_models().items()}
    return balls_table([get_ball(n) for n in ball_names()], listed, units)


def run_simulate(*, ball: Ball, air: AirConditions, launch: pipeline.Launch, drag_coefficient: Optional[float],
                 lift_model: Optional[str], lift_coefficient: Optional[float], spin_decay_s: Optional[float],
                 target_x_m: Optional[float], path_csv: Optional[Path], out: Path, units: str = "metric") -> str:
    """Predict a flight; write its flight file (and, with ``path_csv``, the sampled path)."""
    check_coefficients(drag_coefficient, lift_coefficient, spin_decay_s)
    out_p = check_output_path(out)
    if path_csv is not None:
        check_output_path(path_csv, [out])
    res = pipeline.simulate(launch, ball, air, drag_coefficient=drag_coefficient, lift_model=lift_model,
                            lift_coefficient=lift_coefficient, spin_decay_s=spin_decay_s, target_x_m=target_x_m)
    mark_plane(res.record, f"x = {target_x_m:.2f} m (given with --target-x)" if target_x_m is not None
               else "where the predicted flight comes down to the ground (z = 0)")
    if path_csv is not None:
        write_csv(path_csv, SIMULATED_PATH_HEADER, simulated_path_rows(res.deflection))
    write_json(out_p, res.record)
    note = f"\nair note        {air.source}" if units == "metric" else ""
    return flight_summary(res.record, units) + f"{note}\nwrote {out_p}"


def run_fit(*, inputs: Sequence[Path], settings: pipeline.FitSettings, path_csv: Optional[Path], out: Path,
            labels: Optional[dict] = None, camera: Optional[Path] = None, flight: Optional[int] = None,
            units: str = "metric") -> str:
    """Fit one input (``out`` is a flight file) or several (``out`` is a folder with one flight
    file each and ``summary.csv``)."""
    cams = None if camera is None else read_cameras(camera)

    def fit_one(path) -> pipeline.FlightResult:
        data = read_fit_input(path, cams, flight)
        start_x = (float(data.xyz[int(np.argmin(data.t)), 0]) if isinstance(data, Track) else
                   None if settings.start_near_m is None else settings.start_near_m[0])
        used, words = with_default_plane(settings, start_x)
        res = pipeline.fit_input(data, used)
        add_labels(mark_plane(res.record, words), labels)
        return res

    if len(inputs) == 1:
        out_p = check_output_path(out, inputs)
        if path_csv is not None:
            check_output_path(path_csv, list(inputs) + [out])
        res = fit_one(inputs[0])
        if path_csv is not None:
            write_csv_sidecar(path_csv, PATH_HEADER, path_rows(res.deflection),
                              f"fitted path of {inputs[0]}, no-spin reference from the same launch state, and their "
                              "difference (s, m)")
        write_json(out_p, res.record)
        return flight_summary(res.record, units) + f"\nwrote {out_p}"
    out_dir = Path(out)
    if out_dir.exists() and not out_dir.is_dir():
        raise InputError("with several inputs, -o must be a folder", path=str(out))
    if path_csv is not None:
        raise InputError("--path-csv works with one input; with several, each flight file holds its points")
    out_dir.mkdir(parents=True, exist_ok=True)
    rows, lines, stems, planes = [], [], set(), set()
    for i, path in enumerate(inputs):
        stem = Path(path).stem
        if stem in stems:
            stem = f"{stem}-{i + 1}"
        stems.add(stem)
        try:
            rec = fit_one(path).record
        except BallTrajError as e:
            rows.append(summary_row(str(path), None, e.one_line()))
            lines.append(f"{path}: failed: {e.one_line()}")
            continue
        write_json(out_dir / f"{stem}.json", rec)
        rows.append(summary_row(str(path), rec))
        lines.append(f"{path}: {flight_line(rec, units)}")
        lines += [f"  warning: {w}" for w in rec.get("warnings", [])]
        planes.add(rec["deflection"].get("target_plane"))
    write_csv(out_dir / "summary.csv", SUMMARY_HEADER, rows)
    n_ok = sum(1 for r in rows if r[1] == "ok")
    lines += [f"target plane: {p}" for p in sorted(x for x in planes if x)]
    lines.append(f"{n_ok} of {len(rows)} flights fitted; wrote {out_dir / 'summary.csv'}")
    if n_ok == 0:
        raise InputError("no flight could be fitted: " + rows[0][-1], path=str(inputs[0]))
    return "\n".join(lines)


def check_coefficients(drag_coefficient: Optional[float], lift_coefficient: Optional[float],
                       spin_decay_s: Optional[float]) -> None:
    """Reject constant coefficients and a spin decay no ball has."""
    for name, val in (("--drag-coefficient", drag_coefficient), ("--lift-coefficient", lift_coefficient)):
        if val is not None and not (math.isfinite(val) and 0 <= val <= 5):
            raise InputError(f"{name} must be a finite number in 0..5, got {val}")
    if drag_coefficient is not None and drag_coefficient <= 0:
        raise InputError("--drag-coefficient must be positive")
    if spin_decay_s is not None and not (math.isfinite(spin_decay_s) and spin_decay_s > 0):
        raise InputError(f"--spin-decay must be a positive number of seconds, got {spin_decay_s}")
