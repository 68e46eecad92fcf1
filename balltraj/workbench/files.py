"""The files of the workbench's folder: paths from requests resolved strictly inside it, the clips
and camera files it holds, and frames of a clip decoded with OpenCV.
"""

from __future__ import annotations

import os
import threading
from collections import OrderedDict
from pathlib import Path, PurePosixPath

import cv2

from ..errors import InputError

CLIP_EXTENSIONS = {".mp4", ".mov", ".avi", ".mkv", ".m4v"}
MAX_PATH_CHARS = 500
MAX_CACHED_FRAMES = 4000  # decoded frames kept (JPEG bytes) over all clips


class OutsideFolder(InputError):
    """A request named a file outside the workbench's folder (or no valid file name at all)."""


def inside(root: Path, rel: str) -> Path:
    """The file ``rel`` (a relative POSIX path from a request) under ``root``, or OutsideFolder.

    Refused: empty, too long, NUL or backslash, absolute or drive paths, any ``..`` part, and any
    path whose real location (symlinks followed) is not under the real ``root``.
    """
    if not isinstance(rel, str) or not rel or len(rel) > MAX_PATH_CHARS or "\x00" in rel or "\\" in rel:
        raise OutsideFolder("not a file name in this folder")
    p = PurePosixPath(rel)
    if not p.parts or p.is_absolute() or rel.startswith("~") or ":" in p.parts[0] or any(part in ("..", "") for part in p.parts):
        raise OutsideFolder("only files inside the workbench's folder can be opened")
    real_root = Path(os.path.realpath(root))
    real = Path(os.path.realpath(real_root.joinpath(*p.parts)))
    if real != real_root and real_root not in real.parents:
        raise OutsideFolder("only files inside the workbench's folder can be opened")
    return real


def relative(root: Path, path: Path) -> str:
    return Path(os.path.realpath(path)).relative_to(Path(os.path.realpath(root))).as_posix()


def camera_path(clip: Path) -> Path:
    """The camera file beside a clip: ``NAME.camera.json``."""
    return clip.with_name(clip.stem + ".camera.json")


def list_clips(root: Path, depth: int = 2) -> list[str]:
    """Clips under ``root`` (at most ``depth`` folders down, symlinks out of it skipped), sorted."""
    out = []
    real_root = Path(os.path.realpath(root))
    for dirpath, dirnames, filenames in os.walk(real_root):
        here = Path(dirpath)
        if len(here.relative_to(real_root).parts) >= depth:
            dirnames[:] = []
        dirnames[:] = sorted(d for d in dirnames if not d.startswith("."))
        for f in sorted(filenames):
            if Path(f).suffix.lower() in CLIP_EXTENSIONS and not f.startswith("."):
                try:
                    out.append(relative(real_root, inside(real_root, relative(real_root, here / f))))
                except (OutsideFolder, ValueError):
                    continue
    return sorted(out)


class FrameStore:
    """Frames of clips as JPEG, decoded in order once (no seeking, so frame k is exactly the k-th
    frame the tracker saw) and kept in a bounded cache."""

    def __init__(self, max_frames: int = MAX_CACHED_FRAMES):
        self._lock = threading.Lock()
        self._clips: OrderedDict[str, dict] = OrderedDict()
        self._max = max_frames

    def info(self, clip: Path) -> dict:
        """Frame count, rate and size of a clip (decoding it all once)."""
        c = self._load(clip)
        return {"frames": len(c["jpeg"]), "fps": c["fps"], "width": c["width"], "height": c["height"]}

    def jpeg(self, clip: Path, k: int) -> bytes:
        c = self._load(clip)
        if not 0 <= k < len(c["jpeg"]):
            raise InputError(f"frame {k} is not in this clip (0..{len(c['jpeg']) - 1})", path=clip.name)
        return c["jpeg"][k]

    def _load(self, clip: Path) -> dict:
        key = str(clip)
        stamp = clip.stat().st_mtime_ns if clip.exists() else None
        with self._lock:
            c = self._clips.get(key)
            if c is not None and c["stamp"] == stamp:
                self._clips.move_to_end(key)
                return c
            c = _decode(clip, self._max)
            c["stamp"] = stamp
            self._clips[key] = c
            while sum(len(v["jpeg"]) for v in self._clips.values()) > self._max and len(self._clips) > 1:
                self._clips.popitem(last=False)
            return c


def _decode(clip: Path, limit: int) -> dict:
    if not clip.is_file():
        raise InputError("no such clip", path=clip.name)
    cap = cv2.VideoCapture(str(clip))
    try:
        if not cap.isOpened():
            raise InputError("this file cannot be read as a video", path=clip.name,
                             hint="give an MP4, MOV, AVI or MKV clip")
        fps = float(cap.get(cv2.CAP_PROP_FPS) or 0.0)
        frames = []
        w = h = 0
        while len(frames) < limit:
            ok, img = cap.read()
            if not ok:
                break
            h, w = img.shape[:2]
            ok, buf = cv2.imencode(".jpg", img, [cv2.IMWRITE_JPEG_QUALITY, 88])
            if ok:
                frames.append(buf.tobytes())
    finally:
        cap.release()
    if not frames:
        raise InputError("the clip holds no readable frames", path=clip.name, hint="check that the file is a video")
    return {"jpeg": frames, "fps": fps if fps > 0 else None, "width": w, "height": h}
