"""Commands of the calibration group: ``calibrate board|lens|scene`` and ``triangulate``."""

from __future__ import annotations

import io
import math
from dataclasses import replace
from pathlib import Path
from typing import Optional, Sequence

import cv2
import matplotlib.pyplot as plt
import numpy as np

from ..camera.calibrate import LAUNCH_ZONES, board_figure, calibrate_lens, calibrate_scene, describe_pose, template_points
from ..camera.triangulate import triangulate_observations
from ..errors import InputError
from ..formats import (atomic_write_bytes, check_output_path, numeric_column, read_cameras, read_csv_table,
                       read_observations_csv, write_json)
from .common import write_csv_sidecar


IMAGE_EXT = {".png", ".jpg", ".jpeg", ".bmp", ".tif", ".tiff"}


def _read_gray(path):
    img = cv2.imread(str(path), cv2.IMREAD_GRAYSCALE)
    if img is None:
        raise InputError("cannot read this image", path=str(path), hint="give PNG or JPEG images, or a video")
    return img


def _video_frames(path, every: int = 10, limit: int = 60):
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
    plt.close(fig)
    return f"board {cols}x{rows} inner corners, squares {square_mm:g} mm: wrote {', '.join(written)} (print at 100 %)"


def run_calibrate_scene(*, landmarks: Optional[Path], template: Optional[str], points: Optional[Path],
                        lens: Optional[Path], image_size: Optional[str], name: str, out: Path) -> str:
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
    cam = res.camera if template is None else replace(res.camera, template=template, world_frame=res.frame)
    d = cam.to_dict()
    d["calibration"] = {"kind": "scene", "world_frame": res.frame, "rms_px": res.rms_px,
                        "landmark_errors_px": res.errors_px, "focal_estimated_from_landmarks": res.focal_estimated,
                        "template": template}
    write_json(out_p, d)
    lines = [describe_pose(res.camera), f"world frame: {res.frame}",
             *([f"template {template!r} recorded in the camera file: its launch zones ({', '.join(LAUNCH_ZONES.get(template, {}))}) "
                "can fix the depth of one-camera flights when no ball at rest or bounce is seen"] if template else []),
             f"rms reprojection {res.rms_px:.2f} px over {len(names)} landmarks"]
    lines += [f"  {k}: {v:.2f} px" for k, v in res.errors_px.items()]
    if res.focal_estimated:
        lines.append("note: focal length estimated from the landmarks (no lens file); lens distortion assumed zero")
    lines.append(f"wrote {out_p}")
    return "\n".join(lines)


def run_triangulate(*, observations: Path, camera: Path, out: Path, flight: Optional[int] = None) -> str:
    out_p = check_output_path(out, [observations, camera])
    cams = read_cameras(camera)
    obs = read_observations_csv(observations).one_flight(flight)
    try:
        t, xyz = triangulate_observations(obs.t, obs.camera, obs.uv, cams)
    except InputError as e:
        raise e.with_path(str(observations)) from None
    if len(t) < 2:
        raise InputError("the cameras' observations do not overlap in time", path=str(observations),
                         hint="check the time offsets in the rig file")
    write_csv_sidecar(out_p, ["t", "x", "y", "z"], ([float(a), *map(float, b)] for a, b in zip(t, xyz)),
                      f"3D track (s, m) triangulated by balltraj from {observations} with {camera}")
    return f"triangulated {len(t)} points from {len(set(obs.camera))} cameras; wrote {out_p}"
