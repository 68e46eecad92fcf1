import json
import math

import cv2
import numpy as np
import pytest
from typer.testing import CliRunner

from balltraj.camera.calibrate import TEMPLATES, calibrate_lens, calibrate_scene, render_board_view
from balltraj.camera.model import Camera, look_at_camera, rodrigues
from balltraj.camera.triangulate import triangulate_points
from balltraj.cli import app
from balltraj.errors import InputError
from balltraj.formats import read_cameras

runner = CliRunner()


def random_camera(rng):
    K = np.array([[rng.uniform(800, 1600), 0.0, rng.uniform(600, 680)], [0, 0, rng.uniform(340, 380)], [0, 0, 1]])
    K[1, 1] = K[0, 0] * rng.uniform(0.99, 1.01)
    dist = np.array([rng.uniform(-0.3, 0.1), rng.uniform(-0.05, 0.1), rng.uniform(-1e-3, 1e-3),
                     rng.uniform(-1e-3, 1e-3), rng.uniform(-0.02, 0.02)])
    return Camera("c", (1280, 720), K, dist, rng.normal(0, 0.5, 3), rng.normal(0, 1, 3) + [0, 0, 20])


def test_projection_matches_opencv(rng):
    # Source: OpenCV cv2.projectPoints (the same Brown-Conrady model)
    for _ in range(5):
        cam = random_camera(rng)
        X = rng.normal(0, 3, (200, 3))
        ours = cam.project(X)
        ref, _ = cv2.projectPoints(X, cam.rvec, cam.tvec, cam.K, cam.dist)
        assert np.abs(ours - ref.reshape(-1, 2)).max() < 1e-8


def test_undistortion_matches_opencv(rng):
    # Source: cv2.undistortPoints with tight criteria (docs/opencv-notes.md: default iterations err at strong distortion)
    cam = random_camera(rng)
    uv = rng.uniform([0, 0], [1280, 720], (300, 2))
    ours = cam.undistort_normalised(uv, iterations=200)
    crit = (cv2.TERM_CRITERIA_COUNT + cv2.TERM_CRITERIA_EPS, 200, 1e-12)
    try:
        ref = cv2.undistortPoints(uv.reshape(-1, 1, 2), cam.K, cam.dist, criteria=crit).reshape(-1, 2)
    except TypeError:  # OpenCV 4 signature
        ref = cv2.undistortPointsIter(uv.reshape(-1, 1, 2), cam.K, cam.dist, None, None, crit).reshape(-1, 2)
    assert np.abs(ours - ref).max() < 1e-7


def test_back_projection_round_trip(rng):
    cam = random_camera(rng)
    uv = rng.uniform([100, 100], [1180, 620], (100, 2))
    o, d = cam.rays(uv)
    X = o + d * rng.uniform(2, 30, (100, 1))
    assert np.abs(cam.project(X) - uv).max() < 1e-6


def test_camera_file_round_trip(tmp_path):
    cam = look_at_camera("side", [9, -12, 1.5], [9, 0, 1.4], 1400, (1280, 720), readout_s=0.004)
    p = tmp_path / "cam.json"
    p.write_text(json.dumps({"cameras": [cam.to_dict(), {**cam.to_dict(), "name": "b", "time_offset_s": 0.01}]}))
    cams = read_cameras(p)
    assert [c.name for c in cams] == ["side", "b"] and cams[1].time_offset_s == 0.01
    assert cams[0].readout_s == 0.004
    assert np.allclose(cams[0].centre, [9, -12, 1.5])


@pytest.mark.parametrize("mutate,needle", [
    (lambda d: d.pop("K"), "missing key 'K'"),
    (lambda d: d.update(K=[[1, 0, 0], [0, 0, 0], [0, 0, 1]]), "not a camera matrix"),
    (lambda d: d.update(dist=[0, 0, 0]), "5 numbers"),
    (lambda d: d.update(image_size=[0, 720]), "image_size"),
    (lambda d: d.update(rvec=[0, "a", 0]), "finite numbers"),
])
def test_bad_camera_files(tmp_path, mutate, needle):
    d = look_at_camera("c", [0, -10, 2], [0, 0, 1], 1000, (640, 480)).to_dict()
    mutate(d)
    p = tmp_path / "c.json"
    p.write_text(json.dumps(d))
    with pytest.raises(InputError) as e:
        read_cameras(p)
    assert needle in str(e.value) and str(p) in str(e.value)


def test_malformed_camera_json(tmp_path):
    p = tmp_path / "c.json"
    p.write_text("{\"name\": ")
    with pytest.raises(InputError, match="not valid JSON"):
        read_cameras(p)


def test_lens_calibrated_back_from_rendered_boards():
    # a board rendered by a known camera is calibrated back: focal length within 0.5 %
    truth = Camera("phone", (640, 480), [[900, 0, 322], [0, 900, 238], [0, 0, 1]], [-0.12, 0.05, 5e-4, -3e-4, 0],
                   np.zeros(3), np.zeros(3))
    rng = np.random.default_rng(1)
    views = []
    while len(views) < 9:
        ang = rng.uniform(-0.6, 0.6, 3)
        ang[2] = rng.uniform(-0.3, 0.3)
        R = rodrigues(ang)
        centre = np.array([rng.uniform(-0.06, 0.06), rng.uniform(-0.05, 0.05), rng.uniform(0.45, 0.65)])
        img = render_board_view(truth, R, centre - R @ np.array([0.12, 0.075, 0]), 9, 6, 0.03, rng=rng)
        views.append((f"v{len(views)}", img))
    res = calibrate_lens(views, 9, 6, 0.03, "phone")
    used = len(res.used)
    assert used >= 5
    assert res.camera.K[0, 0] == pytest.approx(900, rel=5e-3)
    assert res.camera.K[1, 1] == pytest.approx(900, rel=5e-3)
    assert res.rms_px < 0.5


def test_printable_board_is_detectable(tmp_path):
    r = runner.invoke(app, ["calibrate", "board", "--cols", "7", "--rows", "5", "--square-mm", "20",
                            "-o", str(tmp_path / "b.png")])
    assert r.exit_code == 0, r.output
    img = cv2.imread(str(tmp_path / "b.png"), cv2.IMREAD_GRAYSCALE)
    ok, corners = cv2.findChessboardCorners(img, (7, 5))
    assert ok
    # Source: 300 dpi print: a 20 mm square is 20/25.4*300 = 236.2 px
    c = corners.reshape(5, 7, 2)
    assert np.median(np.linalg.norm(np.diff(c, axis=1), axis=2)) == pytest.approx(20 / 25.4 * 300, rel=0.01)
    assert (tmp_path / "b.pdf").read_bytes()[:5] == b"%PDF-"


def test_pose_from_soccer_goal_landmarks():
    # pose from landmarks (0.2 px pixel noise, known lens): 0.2 px at 25-40 m with f = 700 px is ~1 cm per
    # landmark; the centre within 4 cm (95th percentile over 100 noise seeds: 2.7 cm) and 0.2 degrees
    tpl = TEMPLATES["soccer-goal"]
    names = list(tpl["points"])
    world = np.array([tpl["points"][n] for n in names])
    truth = look_at_camera("cam", [-24.0, 4.0, 5.0], [-7.0, 0.0, 0.5], 700, (1280, 720))  # field at x < 0
    rng = np.random.default_rng(3)
    pix = truth.project(world)
    seen = np.all(np.isfinite(pix), axis=1) & (pix[:, 0] > 0) & (pix[:, 0] < 1280) & (pix[:, 1] > 0) & (pix[:, 1] < 720)
    assert seen.sum() >= 6
    world, pix, names = world[seen], pix[seen] + rng.normal(0, 0.2, (seen.sum(), 2)), [n for n, k in zip(names, seen) if k]
    res = calibrate_scene(world, pix, names, truth, (1280, 720))
    assert np.linalg.norm(res.camera.centre - truth.centre) < 0.04
    dR = res.camera.R @ truth.R.T
    assert math.degrees(math.acos(min(1.0, (np.trace(dR) - 1) / 2))) < 0.2
    assert res.rms_px < 0.5


def test_scene_estimates_focal_without_lens():
    tpl = TEMPLATES["tennis-court"]
    names = list(tpl["points"])
    world = np.array([tpl["points"][n] for n in names])
    truth = look_at_camera("cam", [-6.0, 0.0, 5.0], [12.0, 0.0, 0.0], 1300, (1280, 720))
    pix = truth.project(world)
    res = calibrate_scene(world, pix, names, None, (1280, 720))
    assert res.focal_estimated and res.camera.focal_px == pytest.approx(1300, rel=0.01)


@pytest.mark.parametrize("world,needle", [
    (np.array([[0, 0, 0], [1, 0, 0], [0, 1, 0.0]]), "too few"),
    (np.array([[0, 0, 0], [1, 0, 0], [2, 0, 0], [3, 0, 0.0]]), "one line"),
])
def test_bad_landmarks(world, needle):
    cam = look_at_camera("cam", [1.0, -10.0, 3.0], [1.0, 0.0, 0.0], 1000, (1280, 720))
    with pytest.raises(InputError, match=needle):
        calibrate_scene(world, cam.project(world), [str(i) for i in range(len(world))], cam, (1280, 720))


def test_no_board_found(tmp_path):
    img = np.full((480, 640), 128, np.uint8)
    for k in range(3):
        cv2.imwrite(str(tmp_path / f"blank{k}.png"), img)
    r = runner.invoke(app, ["calibrate", "lens", *[str(tmp_path / f"blank{k}.png") for k in range(3)],
                            "-o", str(tmp_path / "lens.json")])
    assert r.exit_code == 2 and "no board" in r.output


def test_triangulation_of_exact_points(rng):
    a = look_at_camera("a", [9, -12, 1.5], [9, 0, 1.4], 1400, (1280, 720), dist=(-0.1, 0.02, 0, 0, 0))
    b = look_at_camera("b", [-3, 0.8, 2.6], [18, 0, 1.0], 1400, (1280, 720))
    X = rng.uniform([0, -1, 0.5], [18, 1, 2.5], (50, 3))
    Y = triangulate_points([a, b], [a.project(X), b.project(X)])
    assert np.abs(X - Y).max() < 1e-6


def test_lens_of_another_image_size_is_refused():
    tpl = TEMPLATES["soccer-goal"]
    names = list(tpl["points"])[:6]
    world = np.array([tpl["points"][n] for n in names])
    lens = look_at_camera("phone", [24.0, -4.0, 5.0], [7.0, 0.0, 0.5], 700, (640, 480))
    with pytest.raises(InputError, match="640x480"):
        calibrate_scene(world, np.zeros((6, 2)) + 100, names, lens, (1280, 720))


def test_views_of_another_size_are_rejected_per_view():
    truth = Camera("phone", (640, 480), [[900, 0, 320], [0, 900, 240], [0, 0, 1]], [0, 0, 0, 0, 0], np.zeros(3),
                   np.zeros(3))
    rng = np.random.default_rng(2)
    views = []
    for k in range(4):
        R = rodrigues([0.4 * (-1) ** k, 0.3, 0.1 * k])
        views.append((f"v{k}", render_board_view(truth, R, np.array([-0.12, -0.075, 0.55]) + 0.01 * k, 9, 6, 0.03,
                                                 rng=rng)))
    views.append(("small", np.zeros((240, 320), np.uint8)))
    res = calibrate_lens(views, 9, 6, 0.03)
    assert "small" in res.rejected and "differs" in res.rejected["small"]
