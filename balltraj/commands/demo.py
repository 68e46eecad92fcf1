"""The ``demo`` command: the whole job on the bundled sample session (an invented club)."""

from __future__ import annotations

from pathlib import Path

from .. import pipeline
from ..errors import InputError
from ..formats import atomic_write_bytes, read_cameras, read_json, read_track_csv, write_csv, write_json
from ..physics.air import air_conditions
from ..physics.balls import get_ball
from ..record.schema import SUMMARY_HEADER, summary_row
from ..report.html import build_report
from ..units import INCH, MPH
from .common import add_labels
from .video import analyze_to_folder

DEMO_NOTE = "Invented demo data (not a real club or athlete)."


def sample_dir() -> Path:
    """The bundled sample session (``sample_clips/`` of the source folder)."""
    for cand in (Path.cwd() / "sample_clips", Path(__file__).resolve().parents[2] / "sample_clips"):
        if cand.is_dir() and any(cand.glob("*.truth.json")):
            return cand
    raise InputError("the bundled sample session was not found",
                     hint="run balltraj demo from the balltraj source folder (it holds sample_clips/)")


def _settings(meta: dict, ball_name: str, start_near=None) -> pipeline.FitSettings:
    return pipeline.FitSettings(ball=get_ball(ball_name), air=air_conditions(**meta["air_kwargs"]),
                                target_x_m=float(meta["target_x_m"]),
                                start_near_m=None if start_near is None else tuple(map(float, start_near)))


def run_demo(out: Path, show_progress: bool = False, units: str = "metric") -> str:
    """Each sample clip is tracked, fitted in image space and reported; the tracked 3D sample
    flights are fitted too; one report and one summary.csv hold them all."""
    samples = sample_dir()
    root = samples.parent
    out = Path(out)
    if out.exists() and not out.is_dir():
        raise InputError("the demo output must be a folder", path=str(out))
    out.mkdir(parents=True, exist_ok=True)
    rows, recs, titles, warns = [], [], [], []
    imp = units == "imperial"
    sf, su, lf, lu = (1 / MPH, "mph", 1 / INCH, "in") if imp else (1.0, "m/s", 100.0, "cm")
    lines = [f"{'flight':<18} {'athlete':<11} {'speed ' + su:>14} {'spin rpm':>11} {'left ' + lu:>13} "
             f"{'up ' + lu:>13}   truth: left, up {lu}"]

    def keep(name, source, meta, rec, truth):
        recs.append(rec)
        titles.append(name)
        rows.append(summary_row(source, rec))
        D, TD, U = rec["deflection"], truth["deflection"], rec.get("uncertainty", {})

        def pm(x, s, f, d):
            return f"{x * f:.{d}f}" + (f" ± {s * f:.{d}f}" if isinstance(s, (int, float)) and s else "")

        lines.append(f"{name:<18} {meta['athlete']:<11} "
                     f"{pm(rec['launch']['speed_mps'], (U.get('launch') or {}).get('speed_mps'), sf, 2):>14} "
                     f"{pm(rec['spin']['transverse_rate_rpm'], (U.get('spin') or {}).get('transverse_rate_rpm'), 1, 0):>11} "
                     f"{pm(D['horizontal_m'], (U.get('deflection') or {}).get('horizontal_m'), lf, 1):>13} "
                     f"{pm(D['vertical_m'], (U.get('deflection') or {}).get('vertical_m'), lf, 1):>13}   "
                     f"{TD['horizontal_m'] * lf:.1f}, {TD['vertical_m'] * lf:.1f}")
        warns.extend(f"{name}: {w}" for w in rec.get("warnings", []))

    for clip in sorted(samples.glob("*.mp4")):
        meta = read_json(clip.with_suffix(".truth.json"))
        item = pipeline.ClipInput(clip, read_cameras(root / meta["camera"]))
        labels = {"athlete": meta["athlete"], "session": meta["session"], "notes": DEMO_NOTE}
        crecs, _ = analyze_to_folder(item, _settings(meta, meta["ball"], meta["start_near"]), out / clip.stem,
                                     show_progress=show_progress, labels=labels, units=units)
        for rec in crecs:
            keep(clip.stem, str(clip), meta, rec, meta["truth"])
    for path in sorted((samples / "tracks").glob("*.csv")):
        meta = read_json(path.with_suffix(".truth.json"))
        rec = pipeline.fit_track(read_track_csv(path), _settings(meta, meta["truth"]["ball"])).record
        add_labels(rec, {"athlete": meta["athlete"], "session": meta["session"], "notes": DEMO_NOTE})
        write_json(out / f"{path.stem}.json", rec)
        keep(path.stem, str(path), meta, rec, meta["truth"])
    write_csv(out / "summary.csv", SUMMARY_HEADER, rows)
    atomic_write_bytes(out / "report.html", build_report(recs, titles, units).encode("utf-8"))
    lines += ["(± one standard deviation)"] + [f"warning: {w}" for w in warns]
    lines += ["", f"clips: per-clip folders with observations.csv, flight.json and report.html in {out}/",
              f"all flights: {out / 'summary.csv'} and {out / 'report.html'} (open it in a browser)",
              "invented demo session: the club and the athletes do not exist.",
              "Keep people and cameras out of the ball's path; these are estimates, not officiating decisions."]
    return "\n".join(lines)
