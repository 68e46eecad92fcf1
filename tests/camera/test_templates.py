"""Scene templates: every world frame follows the tool's convention (x toward the target, y left, z up)."""
import numpy as np
import pytest

from balltraj.camera.calibrate import LAUNCH_ZONES, TARGETS, TEMPLATES, calibrate_scene, launch_zone
from balltraj.camera.model import look_at_camera
from balltraj.errors import InputError


@pytest.mark.parametrize("name", list(TEMPLATES))
def test_x_points_from_every_launch_zone_to_the_target(name):
    # Source: docs/architecture.md (conventions) - x horizontal toward the target, y to the left looking along x, z up
    target = np.array(TARGETS[name])
    for zone in LAUNCH_ZONES[name]:
        centre, sigma, _ = launch_zone(name, zone, ball_radius_m=0.11)
        assert target[0] - centre[0] > 3 * sigma, (name, zone)
        assert abs(centre[1]) < 2 and 0 <= centre[2] < 3.5


@pytest.mark.parametrize("name", list(TEMPLATES))
def test_left_landmarks_have_positive_y_and_frame_is_right_handed(name):
    # Source: docs/architecture.md (conventions) - right-handed, y to the left of x; the template's own frame text says so
    pts = TEMPLATES[name]["points"]
    lefts = [k for k in pts if "left" in k]
    assert lefts and all(pts[k][1] > 0 and pts[k.replace("left", "right")][1] == -pts[k][1] for k in lefts)
    assert "x" in TEMPLATES[name]["frame"] and "left" in TEMPLATES[name]["frame"]


def test_soccer_goal_is_in_front_of_the_penalty_mark():
    # Source: IFAB Laws of the Game, Law 1 - the penalty mark is 11 m in front of the goal line
    pts = TEMPLATES["soccer-goal"]["points"]
    assert pts["post-left-foot"][0] - pts["penalty-mark"][0] == pytest.approx(11.0)
    centre, sigma, label = launch_zone("soccer-goal", "penalty-mark", ball_radius_m=0.11)
    assert centre == pytest.approx([-11.0, 0.0, 0.11]) and "penalty-mark" in label


def test_kicker_side_camera_calibrates_in_the_flipped_frame():
    # Source: invariant - a camera behind a kicker at the penalty mark looking at the goal: its forward axis
    # has +x, and the pose comes back from the template's landmarks (noise-free pixels)
    tpl = TEMPLATES["soccer-goal"]
    names = list(tpl["points"])
    world = np.array([tpl["points"][n] for n in names])
    cam = look_at_camera("behind", [-16.0, 1.0, 3.0], [0.0, 0.0, 1.0], 900, (1280, 720))
    pix = cam.project(world)
    seen = np.all(np.isfinite(pix), axis=1) & (pix[:, 0] > 0) & (pix[:, 0] < 1280) & (pix[:, 1] > 0) & (pix[:, 1] < 720)
    res = calibrate_scene(world[seen], pix[seen], [n for n, k in zip(names, seen) if k], cam, (1280, 720))
    assert np.linalg.norm(res.camera.centre - cam.centre) < 1e-3
    assert res.camera.R[2][0] > 0.9


def test_unknown_zone_is_refused():
    with pytest.raises(InputError, match="no launch zone"):
        launch_zone("tennis-court", "penalty-mark")


@pytest.mark.parametrize("name,centre,look", [("basketball-hoop", (-4.0, -7.0, 4.0), (3.0, 0.0, 1.5)),
                                               ("volleyball-court", (-6.0, -9.0, 5.0), (9.0, 0.0, 0.0))])
def test_new_templates_place_a_camera(name, centre, look):
    # round trip: project the template's landmarks from a known camera, place the camera from them
    import numpy as np

    from balltraj.camera.model import look_at_camera

    tpl = TEMPLATES[name]
    cam = look_at_camera("c", centre, look, 900, (1280, 720))
    names = list(tpl["points"])
    world = np.array([tpl["points"][n] for n in names], float)
    uv = cam.project(world)
    res = calibrate_scene(world, uv, names, cam, (1280, 720), name="c", frame=tpl["frame"])
    assert np.allclose(res.camera.centre, cam.centre, atol=1e-3)
    assert res.rms_px < 1e-3
