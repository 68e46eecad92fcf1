"""Batches of clips on local worker processes or a Dask cluster, each clip analysed by
:func:`balltraj.pipeline.analyze_clip` and recorded in the flight library.

Workers only compute; the parent process writes each finished clip to the library in one
transaction, so a killed batch loses at most the clips in flight, and a rerun does exactly those.
"""

from __future__ import annotations

import time
from concurrent.futures import FIRST_COMPLETED, ProcessPoolExecutor, wait
from dataclasses import dataclass, field
from pathlib import Path
from typing import Callable

from ..errors import BallTrajError, InputError
from ..formats import read_cameras
from ..pipeline import ClipInput, FitSettings, analyze_clip

CLIP_EXTENSIONS = {".mp4", ".mov", ".avi", ".mkv", ".m4v"}


@dataclass(frozen=True)
class BatchTask:
    """One clip to analyse (picklable: local processes and Dask workers receive it)."""

    clip: str
    camera_file: str
    settings: FitSettings
    capture_fps: float | None = None


def run_task(task: BatchTask) -> dict:
    """Worker entry point (module level, so processes and Dask can pickle it)."""
    import os

    os.environ.setdefault("OPENCV_LOG_LEVEL", "OFF")
    os.environ.setdefault("OPENCV_FFMPEG_LOGLEVEL", "-8")
    t0 = time.time()
    try:
        clip = ClipInput(Path(task.clip), read_cameras(task.camera_file), capture_fps=task.capture_fps)
        res = analyze_clip(clip, task.settings)
        return {"clip": task.clip, "records": res.records, "error": None, "warnings": res.failures, "started": t0}
    except BallTrajError as e:
        return {"clip": task.clip, "records": None, "error": e.one_line(), "warnings": [], "started": t0}
    except Exception as e:  # noqa: BLE001 - one broken clip must not stop the batch
        return {"clip": task.clip, "records": None, "error": f"internal error: {type(e).__name__}: {e}",
                "warnings": [], "started": t0}


def find_clips(folder) -> list[Path]:
    p = Path(folder)
    if not p.exists():
        raise InputError("no such folder", path=str(folder))
    if not p.is_dir():
        raise InputError("this is a file, not a folder of clips", path=str(folder))
    entries = list(p.iterdir())
    if not entries:
        raise InputError("the folder is empty", path=str(folder), hint="put the clips to analyse in it")
    clips = sorted(e for e in entries if e.is_file() and e.suffix.lower() in CLIP_EXTENSIONS)
    if not clips:
        raise InputError("the folder holds no clips", path=str(folder),
                         hint=f"clips end in {', '.join(sorted(CLIP_EXTENSIONS))}")
    return clips


@dataclass
class BatchSummary:
    done: int = 0
    failed: int = 0
    skipped: int = 0
    messages: list = field(default_factory=list)
    notes: list = field(default_factory=list)  # clips kept as they were, and why
    warnings: list = field(default_factory=list)  # warnings of the flights stored
    replaced: int = 0


def run_batch(lib, tasks: list[BatchTask], hashes: dict, opt_hash: str, options: dict, camera_hash: str, *,
              workers: int = 1, cluster: str | None = None, session=None, athlete=None,
              progress: Callable | None = None, replace: bool = False) -> BatchSummary:
    """Run the tasks not yet in the library; record each as it finishes.

    A clip already analysed with these options is skipped (an identical copy under another name is
    noted as a copy of it); one analysed with other options (another camera, ball, air) is kept and
    reported unless ``replace``; a failed analysis is retried."""
    summary = BatchSummary()
    todo = []
    for t in tasks:
        h = hashes[t.clip]
        ok = [r for r in lib.analyses(h) if r["status"] == "ok"]
        same = [r for r in ok if r["options_hash"] == opt_hash]
        if same:
            summary.skipped += 1
            if all(r["path"] != t.clip for r in same) and lib.add_copy(same[0]["id"], t.clip):
                summary.notes.append(f"{t.clip}: identical to clip {same[0]['id']} ({same[0]['path']}); listed as a copy")
        elif ok and not replace:
            summary.skipped += 1
            summary.notes.append(f"{t.clip}: already analysed (clip {ok[0]['id']}, ball {ok[0]['ball']}) with other "
                                 "options; kept that result (use --replace to analyse it again with these)")
        else:
            summary.replaced += len(ok)
            todo.append(t)
    if progress:
        progress(summary.skipped, len(tasks))

    def store(out):
        stored = lib.record(path=out["clip"], content_hash=hashes[out["clip"]], opt_hash=opt_hash, options=options,
                            camera_hash=camera_hash, ball=options["ball"], records=out["records"],
                            error=out["error"], session=session, athlete=athlete, started_at=out.get("started"),
                            replace=replace)
        if not stored:
            summary.skipped += 1
            same = [r for r in lib.analyses(hashes[out["clip"]])
                    if r["status"] == "ok" and r["options_hash"] == opt_hash and r["path"] != out["clip"]]
            if same and lib.add_copy(same[0]["id"], out["clip"]):
                summary.notes.append(f"{out['clip']}: identical to clip {same[0]['id']} ({same[0]['path']}); "
                                     "listed as a copy")
        elif out["records"]:
            summary.done += 1
            for i, rec in enumerate(out["records"]):
                summary.warnings += [f"{out['clip']} flight {i + 1}: {w}" for w in rec.get("warnings", [])]
            summary.warnings += [f"{out['clip']}: {w}" for w in out.get("warnings") or []]
        else:
            summary.failed += 1
            summary.messages.append(out["error"] if out["clip"] in (out["error"] or "") else f"{out['clip']}: {out['error']}")
        if progress:
            progress(summary.done + summary.failed + summary.skipped, len(tasks))

    if not todo:
        return summary
    if cluster:
        try:
            from distributed import Client, as_completed
        except ImportError:
            raise InputError("--cluster needs Dask distributed", hint="pip install 'balltraj[cluster]'") from None
        try:
            client = Client(cluster, timeout=10)
        except (OSError, TimeoutError) as e:
            raise InputError(f"cannot reach the Dask scheduler at {cluster} ({e})",
                             hint="check the address (tcp://host:8786) and that the scheduler runs") from None
        try:
            futures = client.map(run_task, todo, pure=False)
            for fut in as_completed(futures):
                store(fut.result())
        finally:
            client.close()
    elif workers <= 1:
        for t in todo:
            store(run_task(t))
    else:
        with ProcessPoolExecutor(max_workers=workers) as pool:
            queue = list(reversed(todo))
            pending = set()

            def top_up():  # keep at most 2 per worker queued so a kill loses little
                while queue and len(pending) < 2 * workers:
                    pending.add(pool.submit(run_task, queue.pop()))

            top_up()
            while pending:
                finished, pending = wait(pending, return_when=FIRST_COMPLETED)
                for f in finished:
                    store(f.result())
                top_up()
    return summary
