"""The calibration group and triangulation."""

from __future__ import annotations

from pathlib import Path
from typing import List, Optional

import typer

from .app import _command, app, new_group


calibrate_app = new_group(help="Calibrate cameras: a printable board, the lens from board views, the scene "
                            "(camera pose) from field landmarks.")
app.add_typer(calibrate_app, name="calibrate")


@_command(calibrate_app, "board")
def calibrate_board(
    cols: int = typer.Option(9, "--cols", help="Inner corners across."),
    rows: int = typer.Option(6, "--rows", help="Inner corners down."),
    square_mm: float = typer.Option(25.0, "--square-mm", help="Square size [mm] (the board must fit A4 and Letter: 25 mm fits 9 x 6)."),
    out: Path = typer.Option(..., "-o", "--out", help="Board file; writes NAME.png and NAME.pdf."),
):
    """Write a printable checkerboard (PNG and PDF) at a stated square size."""
    from ..commands.calibrate import run_calibrate_board

    return run_calibrate_board(cols=cols, rows=rows, square_mm=square_mm, out=out)


@_command(calibrate_app, "lens")
def calibrate_lens_cmd(
    inputs: List[Path] = typer.Argument(..., help="Images of the printed board, or a video of it."),
    cols: int = typer.Option(9, "--cols", help="Inner corners across."),
    rows: int = typer.Option(6, "--rows", help="Inner corners down."),
    square_mm: float = typer.Option(25.0, "--square-mm", help="Square size as printed [mm] (measure one with a ruler)."),
    name: str = typer.Option("camera", "--name", help="Camera name."),
    every: int = typer.Option(10, "--every", help="With a video: use every Nth frame."),
    out: Path = typer.Option(..., "-o", "--out", help="Lens (camera) file to write."),
):
    """Calibrate the lens (focal length, centre, distortion) from views of a checkerboard."""
    from ..commands.calibrate import run_calibrate_lens

    return run_calibrate_lens(inputs=inputs, cols=cols, rows=rows, square_mm=square_mm, name=name, out=out,
                              every=every)


@_command(calibrate_app, "scene")
def calibrate_scene_cmd(
    landmarks: Optional[Path] = typer.Option(None, "--landmarks", help="CSV of landmarks: x,y,z,u,v[,name]."),
    template: Optional[str] = typer.Option(None, "--template", help="Field markings: baseball-pitch, soccer-goal, basketball-hoop, volleyball-court, "
                                           "tennis-court, cricket-pitch."),
    points: Optional[Path] = typer.Option(None, "--points", help="With --template: CSV name,u,v of the marks seen."),
    lens: Optional[Path] = typer.Option(None, "--lens", help="Lens file from `calibrate lens`."),
    image_size: Optional[str] = typer.Option(None, "--image-size", help="WxH when there is no lens file."),
    name: str = typer.Option("camera", "--name", help="Camera name."),
    out: Path = typer.Option(..., "-o", "--out", help="Camera file to write."),
):
    """Place the camera in the world frame from landmarks whose positions are known."""
    from ..commands.calibrate import run_calibrate_scene

    return run_calibrate_scene(landmarks=landmarks, template=template, points=points, lens=lens,
                               image_size=image_size, name=name, out=out)


@_command(app)
def triangulate(
    observations: Path = typer.Argument(..., help="Observations CSV (t,camera,u,v) from two or more cameras."),
    camera: Path = typer.Option(..., "--camera", help="Rig file with every camera."),
    flight: Optional[int] = typer.Option(None, "--flight", help="Which flight, when the file has a flight column."),
    out: Path = typer.Option(..., "-o", "--out", help="3D track CSV to write."),
):
    """Export a 3D track (t,x,y,z) triangulated from two or more calibrated cameras."""
    from ..commands.calibrate import run_triangulate

    return run_triangulate(observations=observations, camera=camera, out=out, flight=flight)
