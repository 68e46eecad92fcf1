"""The field template a camera was calibrated on: recorded by `calibrate scene`, carried by the camera
reader (old files without the key still load), and its launch zones as a soft depth prior."""
import json
from dataclasses import replace

import numpy as np
import pytest

from balltraj.camera.anchors import choose_anchor
from balltraj.camera.calibrate import TEMPLATES, launch_zone
from balltraj.camera.model import camera_from_dict, look_at_camera
from balltraj.commands.calibrate import run_calibrate_scene
from balltraj.errors import InputError
from balltraj.formats import read_cameras
from balltraj.pipeline_depth import template_zone

R = 0.11
FRAME = TEMPLATES["soccer-goal"]["frame"]


def _behind(frame=FRAME, x=-18.0):
    cam = look_at_camera("behind", [x, 0.8, 1.7], [0.0, 0.0, 1.0], 800, (960, 540))
    return replace(cam, template="soccer-goal", world_frame=frame)


def _first_frames(cam, start, v, n=10, fps=240.0, t0=0.02):
    """Projected centres and apparent radii (f R / depth) of a ballistic start (gravity only), from t0 on."""
    t = t0 + np.arange(n) / fps
    X = np.asarray(start) + np.outer(t, v) + 0.5 * np.outer(t * t, [0.0, 0.0, -9.81])
    return t, cam.project(X), cam.focal_px * R / cam.depth(X)


def test_calibrate_scene_records_the_template_and_the_reader_carries_it(tmp_path):
    # Source: round trip - pixels of the template's landmarks projected by a known camera come back as that
    # camera's pose, and the file names the template and its world frame
    truth = look_at_camera("kicker", [-24.0, 4.0, 5.0], [-7.0, 0.0, 0.5], 700, (1280, 720))
    pts = TEMPLATES["soccer-goal"]["points"]
    rows = ["name,u,v"] + [f"{n},{u:.4f},{v:.4f}" for n, (u, v) in zip(pts, truth.project(np.array(list(pts.values()))))
                           if 0 < u < 1280 and 0 < v < 720]
    (tmp_path / "marks.csv").write_text("\n".join(rows) + "\n")
    lens = tmp_path / "lens.json"
    lens.write_text(json.dumps(truth.to_dict()))
    text = run_calibrate_scene(landmarks=None, template="soccer-goal", points=tmp_path / "marks.csv", lens=lens,
                               image_size=None, name="kicker", out=tmp_path / "cam.json")
    assert "penalty-mark" in text
    d = json.loads((tmp_path / "cam.json").read_text())
    assert d["template"] == {"name": "soccer-goal", "world_frame": FRAME}
    cam = read_cameras(tmp_path / "cam.json")[0]
    assert cam.template == "soccer-goal" and cam.world_frame == FRAME
    assert np.linalg.norm(cam.centre - truth.centre) < 1e-3


def test_old_camera_files_without_the_key_still_load():
    # Source: backward compatibility (docs/formats.md, camera file) - the key is optional
    d = look_at_camera("old", [0, -10, 2], [0, 0, 1], 1000, (640, 480)).to_dict()
    assert "template" not in d
    cam = camera_from_dict(d)
    assert cam.template is None and cam.world_frame is None
    assert template_zone(cam, R, [0, 0.01, 0.02], [[1, 1], [2, 2], [3, 3]])[0] is None


@pytest.mark.parametrize("bad", [{"world_frame": "x"}, "soccer-goal", {"name": ""}, {"name": "a", "world_frame": 3}])
def test_malformed_template_key_is_refused(bad):
    d = look_at_camera("c", [0, -10, 2], [0, 0, 1], 1000, (640, 480)).to_dict()
    d["template"] = bad
    with pytest.raises(InputError, match="template"):
        camera_from_dict(d)


def test_a_kick_from_the_penalty_mark_picks_the_penalty_mark():
    # Source: IFAB Laws of the Game, Law 1 (penalty mark 11 m from the goal line); invariant - the flight's
    # image path leads back to the mark and the ball's apparent size matches a ball there
    cam = _behind()
    start = launch_zone("soccer-goal", "penalty-mark", R)[0]
    t, uv, r = _first_frames(cam, start, [24.0, 0.5, 2.5])
    zone, why = template_zone(cam, R, t, uv, r)
    assert zone is not None and zone[2] == "soccer-goal penalty-mark" and zone[1] == pytest.approx(0.10)
    assert np.allclose(zone[0], [-11.0, 0.0, R])
    anchor = choose_anchor(zone=zone, radii_observed=True)
    assert anchor.name == "template zone" and "penalty-mark" in anchor.note


def test_a_kick_from_further_out_is_not_taken_for_a_penalty():
    # Source: invariant - from behind, a kick 20 m out lies on nearly the same image path as the mark, but
    # the ball looks (28 - 11) / (28 - 20) = 2.1 times smaller than at the mark: only the wide free-kick zone agrees
    cam = _behind(x=-28.0)
    t, uv, r = _first_frames(cam, [-20.0, 0.3, R], [24.0, 0.0, 3.0])
    zone, why = template_zone(cam, R, t, uv, r)
    assert zone is not None and "free-kick" in zone[2], why
    # along the rays of a kick from the mark, a ball that looks half as large is twice as far: no zone agrees
    # (the free-kick area lies behind this camera)
    cam = _behind()
    t, uv, r = _first_frames(cam, [-11.0, 0.0, R], [24.0, 0.5, 2.5])
    assert template_zone(cam, R, t, uv, r)[0][2] == "soccer-goal penalty-mark"
    zone, why = template_zone(cam, R, t, uv, 0.5 * r)
    assert zone is None and "penalty-mark: the ball looks" in why


def test_a_camera_calibrated_in_another_frame_uses_no_zone():
    # Source: docs/cameras.md - camera files of the earlier soccer-goal frame (x out of the goal) differ
    cam = _behind(frame="x out of the goal")
    t, uv, r = _first_frames(cam, [-11.0, 0.0, R], [24.0, 0.5, 2.5])
    zone, why = template_zone(cam, R, t, uv, r)
    assert zone is None and "another world frame" in why


@pytest.mark.parametrize("where", ["side", "behind"])
def test_zone_prior_narrows_the_depth_of_an_image_fit(where):
    # Source: invariant - a prior adds information: the launch depth sigma with the penalty-mark zone is
    # smaller than with the apparent size alone; from the side the zone's 10 cm across the line of sight is
    # the depth itself, from behind it acts only through the start height and side position at the mark's
    # plane, so there the gain is smaller (ratio bounds from this geometry, not from a fit run)
    from balltraj.fitting.flight_fit import FitOptions
    from balltraj.fitting.image_fit import fit_flight_image
    from balltraj.physics.air import air_conditions
    from balltraj.physics.balls import get_ball
    from balltraj.physics.flight import FlightModel

    cam = _behind() if where == "behind" else replace(
        look_at_camera("side", [-5.5, -14.0, 1.5], [-5.5, 0.0, 1.2], 700, (960, 540)), template="soccer-goal",
        world_frame=FRAME)
    model = FlightModel.for_ball(get_ball("soccer"), air_conditions())
    rng = np.random.default_rng(5)
    t, uv, r = _first_frames(cam, [-11.0, 0.0, R], [24.0, 0.5, 2.5], n=90, t0=0.01)
    uv = uv + rng.normal(0, 0.5, uv.shape)
    r = r + rng.normal(0, 0.3, len(r))
    zone = template_zone(cam, R, t[:10], uv[:10], r[:10])[0]
    assert zone is not None and zone[2] == "soccer-goal penalty-mark"
    a = choose_anchor(zone=zone)
    names = [cam.name] * len(t)
    with_zone = fit_flight_image(model, t, names, uv, [cam], radius_px=r,
                                 options=FitOptions(start_near=a.start_near_m, start_sigma=a.start_sigma_m))
    without = fit_flight_image(model, t, names, uv, [cam], radius_px=r)
    s_with, s_without = with_zone.launch_depth_sigma_m[cam.name], without.launch_depth_sigma_m[cam.name]
    assert s_with < (0.25 if where == "side" else 0.7 * s_without) and s_with < s_without
