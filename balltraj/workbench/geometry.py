"""Geometry of the workbench's clicks: a camera from clicked landmarks of a field template, the
world frame turned so the ball travels along +x, and the start point under a clicked ball.

Pure computation (numpy, and :func:`balltraj.camera.calibrate.calibrate_scene` for the pose).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, replace

import numpy as np

from ..camera.calibrate import SceneCalibration, calibrate_scene, describe_pose, template_points
from ..camera.model import Camera, rotation_vector
from ..errors import InputError

# Templates whose frame points against the usual direction of play would be turned half a turn
# about the upright axis through their origin, (x, y, z) -> (-x, -y, z), so the ball moves along +x as
# the flight contract wants (the deflection is taken at a plane x = X ahead of the launch). Every
# template's frame now has x toward the target (tests/camera/test_templates.py), so none is turned by
# default; the page's checkbox still turns a frame for play in the other direction.
TOWARD_ORIGIN: set[str] = set()
HALF_TURN = np.diag([-1.0, -1.0, 1.0])


@dataclass(frozen=True)
class ClickCalibration:
    """A camera from clicked landmarks, in the frame of play.

    Attributes
    ----------
    camera : Camera
        The fitted camera, world frame turned when ``turned``.
    errors_px : dict
        Reprojection error of each clicked landmark [px].
    rms_px : float
        Root-mean-square reprojection error [px].
    frame : str
        The world frame in words.
    turned : bool
        Whether the template's frame was turned half a turn (kick toward the template origin).
    """

    camera: Camera
    errors_px: dict
    rms_px: float
    frame: str
    turned: bool

    def pose_text(self) -> str:
        return describe_pose(self.camera)


def landmark_world(template: str, names) -> np.ndarray:
    """World positions of the named landmarks of a template, shape (N, 3) [m]."""
    pts = template_points(template)["points"]
    unknown = [n for n in names if n not in pts]
    if unknown:
        raise InputError(f"unknown landmark(s) {', '.join(map(str, unknown))} for template {template}")
    return np.array([pts[n] for n in names], float).reshape(-1, 3)


def turn_camera(cam: Camera, F: np.ndarray) -> Camera:
    """The same camera with the world re-expressed as X' = F X (F a rotation, shape (3, 3)).

    x_cam = R X + t = (R F^T) X' + t, so R' = R F^T and t' = t. Everything else (lens, shutter, time
    offset, the template and world frame it was placed on) is kept; the caller re-words the frame.
    """
    R2 = cam.R @ np.asarray(F, float).T
    return replace(cam, rvec=rotation_vector(R2))


def calibrate_clicks(template: str, clicks: dict, image_size, name: str = "camera",
                     lens: Camera | None = None, turn: bool | None = None) -> ClickCalibration:
    """The camera from clicked landmark pixels.

    Parameters
    ----------
    template : str
        A field template of :mod:`balltraj.camera.calibrate`.
    clicks : dict
        Landmark name -> (u, v) [px].
    image_size : (int, int)
        Width and height of the frame [px].
    lens : Camera, optional
        A lens calibration (focal length and distortion); without one the focal length is estimated.
    turn : bool, optional
        Turn the frame half a turn (default: for templates in ``TOWARD_ORIGIN``).
    """
    names = list(clicks)
    world = landmark_world(template, names)
    pix = np.array([clicks[n] for n in names], float).reshape(-1, 2)
    if not np.all(np.isfinite(pix)):
        raise InputError("every clicked pixel must be a finite number")
    tpl = template_points(template)
    res: SceneCalibration = calibrate_scene(world, pix, names, lens, tuple(image_size), name=name, frame=tpl["frame"])
    turned = template in TOWARD_ORIGIN if turn is None else bool(turn)
    cam, frame = res.camera, res.frame
    if turned:
        cam = turn_camera(cam, HALF_TURN)
        frame = (frame + "; then turned half a turn about the upright axis through the origin so play runs along +x "
                 "(x = -original x, y = -original y)")
    # the camera file's ``template`` key: the template and the frame the pose is in (a turned frame differs
    # from the template's own, so its launch zones are not used on it: balltraj.pipeline_depth.template_zone)
    cam = replace(cam, template=template, world_frame=frame)
    return ClickCalibration(cam, res.errors_px, res.rms_px, frame, turned)


def ground_point(cam: Camera, uv, height_m: float) -> np.ndarray:
    """Where the ray through a pixel meets the horizontal plane z = height.

    Parameters
    ----------
    cam : Camera
    uv : (float, float)
        The clicked pixel [px].
    height_m : float
        Height of the plane [m] (the ball's radius for a ball at rest on the ground).

    Returns
    -------
    ndarray, shape (3,)
        The point [m].
    """
    if not math.isfinite(height_m):
        raise InputError("the height of the start point must be a finite number of metres")
    origin, d = cam.rays(np.asarray(uv, float).reshape(1, 2))
    d = d[0]
    if abs(d[2]) < 1e-9:
        raise InputError("the ray through this pixel runs parallel to the ground", hint="click the ball itself")
    s = (height_m - origin[2]) / d[2]
    if not s > 0:
        raise InputError(f"the ray through this pixel does not reach the height {height_m:.2f} m in front of the "
                         "camera", hint="click the ball itself, below the horizon")
    return origin + s * d


def template_pixels(res: ClickCalibration, template: str) -> dict:
    """Where the fitted camera sees every landmark of the template (those in front of it) [px]."""
    pts = template_points(template)["points"]
    names = list(pts)
    X = np.array([pts[n] for n in names], float)
    if res.turned:
        X = X @ HALF_TURN.T
    uv = res.camera.project(X)
    front = res.camera.depth(X) > 0
    return {n: [float(a), float(b)] for n, (a, b), ok in zip(names, uv, front) if ok and np.all(np.isfinite((a, b)))}
