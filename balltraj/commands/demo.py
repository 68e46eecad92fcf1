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


def run_demo(out: Path, show_progress: bool = False) -> str:
    """Each sample clip is tracked, fitted in image space and reported; the tracked 3D sample
    flights are fitted too; one report and one summary.csv hold them all."""
    samples = sample_dir()
    root = samples.parent
    out = Path(out)
    if out.exists() and not out.is_dir():
        raise InputError("the demo output must be a folder", path=str(out))
    out.mkdir(parents=True, exist_ok=True)
    rows, recs, titles = [], [], []
    lines = [f"{'flight':<18} {'athlete':<11} {'speed m/s':>9} {'spin rpm':>8} {'left cm':>8} {'up cm':>7}"
             f"   truth: left, up cm"]

    def keep(name, source, meta, rec, truth):
        recs.append(rec)
        titles.append(name)
        rows.append(summary_row(source, rec))
        D, TD = rec["deflection"], truth["deflection"]
        lines.append(f"{name:<18} {meta['athlete']:<11} {rec['launch']['speed_mps']:>9.2f} "
                     f"{rec['spin']['transverse_rate_rpm']:>8.0f} {D['horizontal_m'] * 100:>8.1f} "
                     f"{D['vertical_m'] * 100:>7.1f}   {TD['horizontal_m'] * 100:.1f}, {TD['vertical_m'] * 100:.1f}")

    for clip in sorted(samples.glob("*.mp4")):
        meta = read_json(clip.with_suffix(".truth.json"))
        item = pipeline.ClipInput(clip, read_cameras(root / meta["camera"]))
        labels = {"athlete": meta["athlete"], "session": meta["session"], "notes": DEMO_NOTE}
        crecs, _ = analyze_to_folder(item, _settings(meta, meta["ball"], meta["start_near"]), out / clip.stem,
                                     show_progress=show_progress, labels=labels)
        for rec in crecs:
            keep(clip.stem, str(clip), meta, rec, meta["truth"])
    for path in sorted((samples / "tracks").glob("*.csv")):
        meta = read_json(path.with_suffix(".truth.json"))
        rec = pipeline.fit_track(read_track_csv(path), _settings(meta, meta["truth"]["ball"])).record
        add_labels(rec, {"athlete": meta["athlete"], "session": meta["session"], "notes": DEMO_NOTE})
        write_json(out / f"{path.stem}.json", rec)
        keep(path.stem, str(path), meta, rec, meta["truth"])
    write_csv(out / "summary.csv", SUMMARY_HEADER, rows)
    atomic_write_bytes(out / "report.html", build_report(recs, titles, "metric").encode("utf-8"))
    lines += ["", f"clips: per-clip folders with observations.csv, flight.json and report.html in {out}/",
              f"all flights: {out / 'summary.csv'} and {out / 'report.html'} (open it in a browser)",
              "invented demo session: the club and the athletes do not exist.",
              "Keep people and cameras out of the ball's path; these are estimates, not officiating decisions."]
    return "\n".join(lines)
