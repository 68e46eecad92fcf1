"""Analyses the workbench runs in background threads: the clip through
:func:`balltraj.pipeline.analyze_clip` with progress, the tracked points kept for review, and a
re-fit through :func:`balltraj.pipeline.fit_observations` with the points the coach kept."""

from __future__ import annotations

import threading
import time
import uuid
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from .. import __version__, pipeline
from ..camera.model import Camera
from ..errors import BallTrajError, InputError
from ..formats import CameraObservations, Observations
from ..library.store import file_hash, open_library, options_hash
from ..report.html import headline

MAX_JOBS = 20  # finished analyses kept in memory (oldest dropped)


@dataclass
class Job:
    """One analysis of one clip, its progress and its outcome."""

    id: str
    clip: Path
    clip_name: str
    settings: pipeline.FitSettings
    labels: dict
    camera: Camera
    state: str = "running"  # running | done | failed
    done: int = 0
    total: int | None = None
    error: str | None = None
    records: list = field(default_factory=list)
    flights: list = field(default_factory=list)  # per tracked flight: t, frame, uv, radius_px, quality, keep
    warnings: list = field(default_factory=list)
    started: float = field(default_factory=time.time)
    saved: bool = False
    _reports: dict = field(default_factory=dict)  # units -> report HTML of the current records
    _report_lock: threading.Lock = field(default_factory=threading.Lock)

    def progress(self, done: int, total: int | None) -> None:
        self.done, self.total = int(done), (None if total is None else int(total))

    def report(self, units: str, build) -> str:
        """The report page of the fitted flights (built once per set of records and units)."""
        with self._report_lock:
            if units not in self._reports:
                recs = [r for r in self.records if r is not None]
                titles = [f"{Path(self.clip_name).stem} flight {r['clip']['flight']}" for r in recs]
                self._reports[units] = build(recs, titles, units)
            return self._reports[units]

    def summary(self, units: str = "metric") -> dict:
        """What the page shows: state, progress, headline cards and tracked points of each flight."""
        out = {"id": self.id, "clip": self.clip_name, "state": self.state, "done": self.done, "total": self.total,
               "error": self.error, "warnings": self.warnings, "saved": self.saved}
        if self.state == "done":
            out["flights"] = [{"flight": f["flight"], "frame": f["frame"].tolist(), "uv": f["uv"].tolist(),
                               "keep": f["keep"].tolist(),
                               "cards": None if rec is None else [list(c) for c in headline(rec, units)]}
                              for f, rec in zip(self.flights, self.records)]
        return out


class Jobs:
    """The analyses of one workbench, each in its own thread."""

    def __init__(self):
        self._jobs: dict[str, Job] = {}
        self._lock = threading.Lock()

    def get(self, job_id: str) -> Job:
        with self._lock:
            job = self._jobs.get(str(job_id))
        if job is None:
            raise InputError("no such analysis (the workbench may have been restarted)", hint="run the analysis again")
        return job

    def start(self, clip: pipeline.ClipInput, clip_name: str, settings: pipeline.FitSettings, labels: dict) -> Job:
        job = Job(uuid.uuid4().hex, Path(clip.path), clip_name, settings, labels, clip.camera)
        with self._lock:
            if sum(j.state == "running" for j in self._jobs.values()) >= 2:
                raise InputError("two analyses are already running", hint="wait for one to finish")
            self._jobs[job.id] = job
            for old in sorted(self._jobs.values(), key=lambda j: j.started)[:-MAX_JOBS]:
                self._jobs.pop(old.id, None)
        threading.Thread(target=_run, args=(job, clip), daemon=True, name=f"analysis-{job.id[:8]}").start()
        return job


def _run(job: Job, clip: pipeline.ClipInput) -> None:
    try:
        res = pipeline.analyze_clip(clip, job.settings, progress=job.progress)
        by_flight = {r["clip"]["flight"]: r for r in res.records}
        for f in res.tracking.flights:
            job.flights.append({"flight": f.flight, "t": np.asarray(f.t, float), "frame": np.asarray(f.frame, int),
                                "uv": np.asarray(f.uv, float), "radius_px": np.asarray(f.radius_px, float),
                                "quality": np.asarray(f.quality, float), "keep": np.ones(len(f.t), bool)})
            job.records.append(_labelled(by_flight.get(f.flight), job.labels, job.clip_name))
        job.warnings = list(res.tracking.warnings) + list(res.failures)
        job.state = "done"
    except BallTrajError as e:  # the clip by its name in the folder
        job.error, job.state = e.one_line().replace(str(job.clip), job.clip_name), "failed"
    except Exception as e:  # noqa: BLE001 - a bug must reach the page, not kill the server
        job.error, job.state = f"internal error ({type(e).__name__}: {e}); this is a bug in balltraj", "failed"


def _labelled(rec, labels, clip_name: str | None = None):
    if rec is not None and clip_name is not None:  # the clip by its name in the folder, not where the folder is
        n = rec["clip"]["flight"]
        rec["source"] = f"{clip_name}#flight-{n}"
        rec["clip"]["path"] = clip_name
    if rec is not None:
        for k, v in labels.items():
            if v:
                rec[k] = v
    return rec


def refit(job: Job, index: int, keep) -> dict:
    """Fit one tracked flight again with only the points kept (``keep``, one bool a point)."""
    if job.state != "done":
        raise InputError("the analysis has not finished")
    if not 0 <= index < len(job.flights):
        raise InputError(f"there is no flight {index + 1} in this analysis")
    f = job.flights[index]
    keep = np.asarray(keep, bool)
    if keep.shape != f["keep"].shape:
        raise InputError(f"give one keep flag for each of the {len(f['keep'])} tracked points")
    if keep.sum() < 6:
        raise InputError("keep at least 6 points for a fit")
    cam = job.camera
    obs = Observations(f"{job.clip_name}#flight-{f['flight']}", f["t"][keep], [cam.name] * int(keep.sum()),
                       f["uv"][keep], f["radius_px"][keep], f["quality"][keep], None)
    rec = pipeline.fit_observations(CameraObservations(obs, [cam]), job.settings).record
    rec["source"] = f"{job.clip_name}#flight-{f['flight']}"
    rec["clip"] = {"path": job.clip_name, "flight": f["flight"], "frames": int(keep.sum()),
                   "dropped_points": [int(k) for k in f["frame"][~keep]]}
    f["keep"] = keep
    with job._report_lock:
        job.records[index] = _labelled(rec, job.labels)
        job._reports.clear()
    job.saved = False
    return rec


def save_to_library(job: Job, library: Path) -> bool:
    """Store the analysis (with any re-fits) in the flight library; False if it is already there.

    The library holds one analysis of a clip at a time: the coach's latest fit (other points,
    another camera or ball) replaces the one stored before."""
    recs = [r for r in job.records if r is not None]
    if job.state != "done" or not recs:
        raise InputError("there is no fitted flight to save")
    s, cam = job.settings, job.camera
    options = {"ball": s.ball.name, "ball_properties": s.ball.to_dict(), "air_density": s.air.density,
               "camera": cam.to_dict(), "target_x": s.target_x_m, "start_near": s.start_near_m,
               "start_sigma": s.start_sigma_m, "kept": [f["keep"].astype(int).tolist() for f in job.flights],
               "from": "workbench"}
    with open_library(library) as lib:
        stored = lib.record(path=job.clip_name, content_hash=file_hash(job.clip),
                            opt_hash=options_hash({**options, "tool_version": __version__}), options=options,
                            camera_hash=options_hash(cam.to_dict()), ball=s.ball.name, records=recs, error=None,
                            session=job.labels.get("session") or None, athlete=job.labels.get("athlete") or None,
                            started_at=job.started, replace=True)
    job.saved = True
    return stored
