"""Commands of the video group: ``track``, ``analyze``, ``render``."""

from __future__ import annotations

from pathlib import Path
from typing import Optional, Sequence

import numpy as np

from .. import pipeline
from ..errors import InputError
from ..formats import atomic_write_bytes, check_output_path, read_cameras, read_flight_file, write_json
from ..physics.balls import Ball
from ..record.refly import ground_flight
from ..report.html import build_report
from ..vision.clip import clip_info
from ..vision.pipeline import TrackResult, no_ball_error
from ..vision.render import Scene, render_clip
from .common import add_labels, folder_written_whole, mark_plane, progress_bar, with_default_plane, write_csv_sidecar
from .text import flight_summary, tracking_lines

OBS_HEADER = ["t", "camera", "u", "v", "radius_px", "quality", "flight", "frame", "streak_px", "bounce"]


def observation_rows(res: TrackResult, camera_name: str):
    """Rows of the observations CSV, one a tracked point of every flight."""
    for f in res.flights:
        for i in range(len(f.t)):
            yield [float(f.t[i]), camera_name, float(f.uv[i, 0]), float(f.uv[i, 1]), float(f.radius_px[i]),
                   float(f.quality[i]), f.flight, int(f.frame[i]), float(f.streak_px[i]), int(f.bounce)]


def clip_input(clip: Path, camera: Optional[Path], *, capture_fps: Optional[float] = None, start_s: float = 0.0,
               end_s: Optional[float] = None) -> pipeline.ClipInput:
    """A clip and the camera file it was filmed with, read into the pipeline's clip input."""
    if capture_fps is not None and not (1 <= capture_fps <= 10000):
        raise InputError(f"--capture-fps must be 1..10000, got {capture_fps}")
    if start_s < 0 or (end_s is not None and end_s <= start_s):
        raise InputError("--start must be >= 0 and --end after --start")
    cams = read_cameras(camera) if camera is not None else []
    return pipeline.ClipInput(Path(clip), cams, capture_fps=capture_fps, start_s=start_s, end_s=end_s)


def expected_frames(clip: pipeline.ClipInput) -> Optional[int]:
    """Frames the tracker will read from ``start_s`` to ``end_s`` (or the clip's end); None when the
    container does not say."""
    try:
        info = clip_info(clip.path)
    except InputError:
        return None
    fps = clip.capture_fps or info.nominal_fps
    dur = (info.frame_count / fps) if fps > 0 and info.frame_count > 0 else None
    if not fps or fps <= 0 or (dur is None and clip.end_s is None):
        return None
    end = clip.end_s if dur is None else min(clip.end_s if clip.end_s is not None else dur, dur)
    return max(1, int(round((end - clip.start_s) * fps)))


def _notes(clip: pipeline.ClipInput, res: TrackResult) -> str:
    return "\n".join([f"observations tracked by balltraj from {clip.path}",
                      "columns: t [s], camera, u, v [px], radius_px, quality (0..1), flight, frame, streak_px, "
                      "bounce (1 after a bounce); see docs/formats.md"]
                     + [f"flight {f.flight}: {len(f.t)} points, {f.t[0]:.3f}-{f.t[-1]:.3f} s, ended: {f.end_reason}"
                        for f in res.flights])


def run_track(*, clip: Path, camera: Optional[Path], ball: Ball, out: Path, overlay: Optional[Path],
              capture_fps: Optional[float] = None, start_s: float = 0.0, end_s: Optional[float] = None,
              show_progress: bool = False) -> str:
    """Track the ball in a clip; write the observations CSV (and an overlay video)."""
    out_p = check_output_path(out, [clip])
    if overlay is not None:
        check_output_path(overlay, [clip, out])
    clip = clip_input(clip, camera, capture_fps=capture_fps, start_s=start_s, end_s=end_s)
    with progress_bar(f"tracking {Path(clip.path).name} (frames)", show_progress,
                      total=expected_frames(clip)) as progress:
        res = pipeline.track(clip, ball, overlay_path=overlay, progress=progress)
    if not res.flights:
        raise no_ball_error(clip.path, res)
    name = clip.camera.name if clip.camera is not None else "camera"
    side = write_csv_sidecar(out_p, OBS_HEADER, observation_rows(res, name), _notes(clip, res))
    return "\n".join(tracking_lines(res) + [f"wrote {out_p} (notes in {side.name})"])


def analyze_to_folder(clip: pipeline.ClipInput | Sequence[pipeline.ClipInput], settings: pipeline.FitSettings,
                      out_dir: Path, *, show_progress: bool = False, labels: Optional[dict] = None,
                      units: str = "metric") -> tuple[list[dict], str]:
    """The whole job on one clip (or one clip per camera of a rig), written into ``out_dir`` whole or
    not at all: observations.csv, flight.json (flight-1.json, ... for several throws) and
    report.html. Returns the records and the text to print: every flight's headline numbers with
    their sigmas, and every warning."""
    clips = [clip] if isinstance(clip, pipeline.ClipInput) else list(clip)
    first = clips[0]
    settings, plane_words = with_default_plane(settings, None if settings.start_near_m is None
                                               else settings.start_near_m[0])
    with folder_written_whole(out_dir) as tmp:  # checks the folder before any work
        with progress_bar(f"tracking {Path(first.path).name} (frames)", show_progress,
                          total=expected_frames(first)) as progress:
            if len(clips) == 1:
                res = pipeline.analyze_clip(first, settings, progress=progress)
            else:
                res = pipeline.analyze_rig(clips, settings, progress=progress)
        recs = [add_labels(mark_plane(r, plane_words), labels) for r in res.records]
        rows = [row for c, tr in zip(clips, [res.tracking, *res.other_trackings])
                for row in observation_rows(tr, c.camera.name)]
        write_csv_sidecar(tmp / "observations.csv", OBS_HEADER, rows, _notes(first, res.tracking))
        names = ["flight.json"] if len(recs) == 1 else [f"flight-{i + 1}.json" for i in range(len(recs))]
        for n, rec in zip(names, recs):
            write_json(tmp / n, rec)
        titles = [f"{Path(first.path).stem}" + ("" if len(recs) == 1 else f" flight {i + 1}") for i in range(len(recs))]
        atomic_write_bytes(tmp / "report.html", build_report(recs, titles, units).encode("utf-8"))
    lines = tracking_lines(res.tracking)  # frames, the flights found, tracking warnings
    for c, tr in zip(clips[1:], res.other_trackings):
        lines += [f"{Path(c.path).name} ({c.camera.name}):"] + tracking_lines(tr)
    for n, rec in zip(names, recs):
        lines += ["", f"{n}:", flight_summary(rec, units)]
    lines += [f"warning: {m}" for m in res.failures]
    lines.append(f"wrote {out_dir}/observations.csv, {', '.join(names)}, report.html")
    return recs, "\n".join(lines)


def run_analyze(*, clip: Path | Sequence[Path], camera: Path, settings: pipeline.FitSettings, out: Path,
                capture_fps: Optional[float] = None, labels: Optional[dict] = None, show_progress: bool = False,
                units: str = "metric") -> str:
    """Track, fit and report one clip filmed by one calibrated camera, or one clip per camera of a
    rig file (in the rig's order), filmed unsynchronised."""
    paths = [clip] if isinstance(clip, (str, Path)) else list(clip)
    cams = read_cameras(camera)
    if len(paths) == 1:
        if len(cams) != 1:
            raise InputError(f"the camera file holds {len(cams)} cameras; give one clip per camera, in its order",
                             path=str(camera))
    elif len(cams) != len(paths):
        raise InputError(f"{len(paths)} clips but {len(cams)} cameras in the rig file; give one clip per camera, "
                         "in the rig's order", path=str(camera))
    items = [clip_input(p, None, capture_fps=capture_fps) for p in paths]
    items = [pipeline.ClipInput(it.path, [cam], capture_fps=it.capture_fps) for it, cam in zip(items, cams)]
    _, text = analyze_to_folder(items if len(items) > 1 else items[0], settings, out, show_progress=show_progress,
                                labels=labels, units=units)
    return text


def run_render(*, flight: Path, camera: Path, out: Path, fps: float, duration: Optional[float], start: float,
               exposure: float, noise: float, seed: int) -> str:
    """Render a synthetic clip of a flight file's flight seen by a camera; write the truth beside it."""
    out_p = check_output_path(out, [flight, camera])
    rec = read_flight_file(flight)
    cams = read_cameras(camera)
    if not (10 <= fps <= 1000) or not (0 < exposure <= 0.05) or not (0 <= noise <= 50):
        raise InputError("--fps must be 10..1000, --exposure 0..0.05 s and --noise 0..50")
    model, tr, t_fl = ground_flight(rec)
    dur = duration if duration is not None else start + t_fl + 0.2
    fn = lambda ts: tr.positions(np.clip(np.asarray(ts) - start, 0, t_fl))[0]  # noqa: E731
    scene = Scene(cams[0], fps=fps, duration_s=dur, exposure_s=exposure, noise=noise, seed=seed,
                  ball_radius_m=model.radius_m, flights=[(start, start + t_fl, fn)])
    truth = render_clip(scene, out_p)
    tpath = out_p.with_suffix(".truth.csv")
    write_csv_sidecar(tpath, ["t", "flight", "u", "v", "radius_px", "x", "y", "z"],
                      ([r[k] for k in ("t", "flight", "u", "v", "radius_px", "x", "y", "z")] for r in truth),
                      f"truth of a synthetic clip rendered by balltraj from {flight} (s, px, m)")
    return (f"rendered {int(round(dur * fps))} frames ({cams[0].image_size[0]}x{cams[0].image_size[1]}, {fps:g} fps);"
            f" wrote {out_p} and {tpath}")

