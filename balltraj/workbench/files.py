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
MAX_CACHE_BYTES = 200 * 1024 * 1024  # encoded frames kept over all clips
MAX_OPEN_CLIPS = 4


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
    """Frames of clips as JPEG for the viewer.

    Frames are decoded in order (never seeked, as the tracker reads them, so frame k here is the
    k-th frame the tracker saw): a step forward reads on from the last frame, a step back reopens
    the clip. Encoded frames are kept in a cache bounded in bytes, so going back over frames
    already seen is instant. Opening a clip reads its header and first frame only.
    """

    def __init__(self, max_bytes: int = MAX_CACHE_BYTES):
        self._lock = threading.Lock()
        self._max = max_bytes
        self._jpeg: OrderedDict[tuple[str, int, int], bytes] = OrderedDict()
        self._bytes = 0
        self._open: dict[str, dict] = {}  # clip -> {"stamp", "cap", "next", "info"}

    def info(self, clip: Path) -> dict:
        """Frame count (from the header, corrected when the clip ends sooner), rate and size."""
        with self._lock:
            return dict(self._state(clip)["info"])

    def jpeg(self, clip: Path, k: int) -> bytes:
        with self._lock:
            st = self._state(clip)
            n = st["info"]["frames"]
            if not 0 <= k < n:
                raise InputError(f"frame {k} is not in this clip (0..{n - 1})", path=clip.name)
            key = (str(clip), st["stamp"], k)
            if key in self._jpeg:
                self._jpeg.move_to_end(key)
                return self._jpeg[key]
            if k < st["next"] or st["cap"] is None:
                _release(st)
                st["cap"], st["next"] = _open(clip), 0
            cap = st["cap"]
            while st["next"] < k and cap.grab():
                st["next"] += 1
            ok, img = cap.read() if st["next"] == k else (False, None)
            if not ok:
                st["info"]["frames"] = max(1, st["next"])  # the header promised more frames than there are
                _release(st)
                raise InputError(f"frame {k} is not in this clip (it ends after {st['info']['frames']} frames)",
                                 path=clip.name)
            st["next"] = k + 1
            ok, buf = cv2.imencode(".jpg", img, [cv2.IMWRITE_JPEG_QUALITY, 88])
            data = buf.tobytes()
            self._jpeg[key] = data
            self._bytes += len(data)
            while self._bytes > self._max and len(self._jpeg) > 1:
                self._bytes -= len(self._jpeg.popitem(last=False)[1])
            return data

    def _state(self, clip: Path) -> dict:
        if not clip.is_file():
            raise InputError("no such clip", path=clip.name)
        key, stamp = str(clip), clip.stat().st_mtime_ns
        st = self._open.get(key)
        if st is not None and st["stamp"] == stamp:
            return st
        if st is not None:
            _release(st)
        if len(self._open) >= MAX_OPEN_CLIPS:
            _release(self._open.pop(next(iter(self._open))))
        cap = _open(clip)
        ok, img = cap.read()
        if not ok:
            cap.release()
            raise InputError("the clip holds no readable frames", path=clip.name, hint="check that the file is a video")
        count = int(cap.get(cv2.CAP_PROP_FRAME_COUNT) or 0)
        fps = float(cap.get(cv2.CAP_PROP_FPS) or 0.0)
        info = {"frames": max(count, 1), "fps": fps if fps > 0 else None, "width": int(img.shape[1]),
                "height": int(img.shape[0])}
        st = {"stamp": stamp, "cap": cap, "next": 1, "info": info}
        ok, buf = cv2.imencode(".jpg", img, [cv2.IMWRITE_JPEG_QUALITY, 88])
        self._jpeg[(key, stamp, 0)] = buf.tobytes()
        self._bytes += len(self._jpeg[(key, stamp, 0)])
        self._open[key] = st
        return st


def _open(clip: Path):
    cap = cv2.VideoCapture(str(clip))
    if not cap.isOpened():
        cap.release()
        raise InputError("this file cannot be read as a video", path=clip.name, hint="give an MP4, MOV, AVI or MKV clip")
    return cap


def _release(st: dict) -> None:
    if st.get("cap") is not None:
        st["cap"].release()
    st["cap"], st["next"] = None, 0
