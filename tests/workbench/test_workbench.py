"""The workbench's web app through Starlette's TestClient: pages, frames, the folder boundary,
request limits, calibration by clicks, the start point, the analysis, review, re-fit and history."""

from __future__ import annotations

import json
import re
import os
import shutil
import time
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from balltraj.camera.calibrate import TEMPLATES
from balltraj.formats import read_cameras
from balltraj.workbench.geometry import HALF_TURN, ground_point, turn_camera

pytest.importorskip("starlette")
from starlette.testclient import TestClient  # noqa: E402

from balltraj.workbench import create_app  # noqa: E402

ROOT = Path(__file__).resolve().parents[2]
CLIP = "free-kick-behind.mp4"
TRUTH = json.loads((ROOT / "sample_clips" / "free-kick-behind.truth.json").read_text())
TRUE_CAM = read_cameras(ROOT / TRUTH["camera"])[0]
GOAL_X = TRUTH["target_x_m"]  # the sample's target plane is the goal line (invented demo data)


def to_sample(p):
    """The soccer-goal template frame (x into the goal, origin on the goal line) -> the sample's frame
    (ball at the origin, goal line at x = 22 m): a shift along x."""
    return np.array([p[0] + GOAL_X, p[1], p[2]])


def visible_clicks(cam=TRUE_CAM):
    """Pixels of the soccer-goal landmarks that the sample camera sees inside its frame."""
    out = {}
    w, h = cam.image_size
    for n, p in TEMPLATES["soccer-goal"]["points"].items():
        uv = cam.project(to_sample(p)[None])[0]
        if 0 <= uv[0] < w and 0 <= uv[1] < h:
            out[n] = [float(uv[0]), float(uv[1])]
    return out


@pytest.fixture()
def folder(tmp_path):
    d = tmp_path / "clips"
    d.mkdir()
    shutil.copy(ROOT / "sample_clips" / CLIP, d / CLIP)
    (tmp_path / "secret.txt").write_text("outside the folder")
    return d


@pytest.fixture()
def client(folder):
    return TestClient(create_app(folder, allowed_hosts=["testserver"]))


def test_pages_and_frames(client):
    r = client.get("/")
    assert r.status_code == 200 and CLIP in r.text
    r = client.get("/clip", params={"path": CLIP})
    assert r.status_code == 200 and 'data-frames="' in r.text
    info = client.get("/api/clip", params={"path": CLIP}).json()
    # Source: the sample's camera file gives the frame size; its render script the frame count
    assert (info["width"], info["height"]) == tuple(TRUE_CAM.image_size)
    assert info["frames"] == round(1.35 * 120)  # tools/make_sample_clips.py: 1.35 s at 120 frames/s
    r = client.get("/frame", params={"path": CLIP, "k": "10"})
    assert r.status_code == 200 and r.headers["content-type"] == "image/jpeg" and r.content[:2] == b"\xff\xd8"
    assert client.get("/frame", params={"path": CLIP, "k": str(info["frames"])}).status_code == 400
    assert client.get("/static/workbench.js").status_code == 200
    assert "script-src 'self'" in client.get("/").headers["content-security-policy"]


@pytest.mark.parametrize("path", ["../secret.txt", "%2e%2e/secret.txt", "..%2fsecret.txt", "%2e%2e%2fsecret.txt",
                                  "%252e%252e%252fsecret.txt", "/etc/passwd", "//etc/passwd", "..\\secret.txt",
                                  "sub/../../secret.txt", "link/secret.txt", "linkfile.mp4", "~/x", "C:/x",
                                  "", ".", "./", "a\x00b"])
def test_nothing_outside_the_folder(client, folder, path):
    os.symlink(folder.parent, folder / "link")
    os.symlink(folder.parent / "secret.txt", folder / "linkfile.mp4")
    raw = f"path={path}" if "%" in path else None  # already encoded: sent as typed
    for route in ("/frame", "/clip", "/api/clip"):
        r = client.get(f"{route}?{raw}") if raw else client.get(route, params={"path": path})
        assert r.status_code in (400, 404), (route, path, r.status_code)
        assert "outside the folder" not in r.text
    r = client.post("/api/calibrate", json={"path": path, "template": "soccer-goal", "clicks": {}})
    assert r.status_code in (400, 404)
    assert "linkfile.mp4" not in client.get("/").text  # the listing skips links out of the folder


def test_static_files_stay_in_the_package(client):
    for url in ("/static/../app.py", "/static/%2e%2e/app.py", "/static/..%2fapp.py", "/static/%2e%2e%2fapp.py"):
        r = client.get(url)
        assert r.status_code == 404 and "create_app" not in r.text, url


def test_bad_clip_and_user_text_are_pages_not_crashes(client, folder):
    (folder / "broken.mp4").write_bytes(b"not a video at all" * 100)
    evil = "<img src=x onerror=alert(1)>.mp4"
    (folder / evil).write_bytes(b"junk")
    r = client.get("/clip", params={"path": "broken.mp4"})
    assert r.status_code == 422 and "cannot be read as a video" in r.text and "<!DOCTYPE html>" in r.text
    r = client.get("/")
    assert "&lt;img src=x onerror=alert(1)&gt;" in r.text and "<img src=x" not in r.text
    r = client.get("/clip", params={"path": evil})
    assert r.status_code == 422 and "<img src=x" not in r.text
    assert client.get("/no/such/page").status_code == 404


def test_requests_are_bounded_and_json_only(client):
    big = json.dumps({"path": CLIP, "pad": "x" * 70_000})
    r = client.post("/api/calibrate", content=big, headers={"content-type": "application/json"})
    assert r.status_code == 413
    r = client.post("/api/calibrate", content="path=x", headers={"content-type": "application/x-www-form-urlencoded"})
    assert r.status_code == 400
    r = client.post("/api/calibrate", content="{nope", headers={"content-type": "application/json"})
    assert r.status_code == 400
    r = client.post("/api/calibrate", content='{"path": NaN}', headers={"content-type": "application/json"})
    assert r.status_code == 400
    assert client.get("/", headers={"host": "attacker.example"}).status_code == 400  # DNS rebinding


def test_calibration_round_trip(client, folder):
    clicks = visible_clicks()
    assert len(clicks) >= 6
    r = client.post("/api/calibrate", json={"path": CLIP, "template": "soccer-goal",
                                            "clicks": dict(list(clicks.items())[:3])})
    assert r.json() == {"need": 1}
    r = client.post("/api/calibrate", json={"path": CLIP, "template": "soccer-goal", "clicks": clicks, "save": True})
    body = r.json()
    assert r.status_code == 200 and body["saved"] == "free-kick-behind.camera.json" and not body["turned"]
    assert body["rms_px"] < 1e-6  # exact pixels reproject exactly
    cam = read_cameras(folder / body["saved"])[0]
    # Source: the sample's camera file (calibration/free-kick-behind.json) — the workbench frame has the goal line
    # at x = 0, the sample's at x = 22 m, both with play along +x
    assert np.allclose(cam.centre, TRUE_CAM.centre - [GOAL_X, 0, 0], atol=1e-3)
    assert cam.focal_px == pytest.approx(TRUE_CAM.focal_px, rel=1e-6)
    # the camera file keeps the template it was placed on and the frame in words (read back from the file)
    saved = json.loads((folder / body["saved"]).read_text())
    assert saved["template"] == {"name": "soccer-goal", "world_frame": TEMPLATES["soccer-goal"]["frame"]}
    assert (cam.template, cam.world_frame) == ("soccer-goal", TEMPLATES["soccer-goal"]["frame"])
    # the saved camera reprojects the ball's true path (the render's truth) where the renderer drew it
    truth = pd.read_csv(ROOT / "sample_clips" / "free-kick-behind.truth.csv", comment="#")
    xyz = truth[["x", "y", "z"]].to_numpy() - [GOAL_X, 0, 0]
    assert np.max(np.abs(cam.project(xyz) - truth[["u", "v"]].to_numpy())) < 1e-3
    # clicks rounded to the nearest pixel, as a mouse gives them: still within a hand's width
    rounded = {k: [round(u), round(v)] for k, (u, v) in clicks.items()}
    body = client.post("/api/calibrate", json={"path": CLIP, "template": "soccer-goal", "clicks": rounded}).json()
    assert 0.05 < body["rms_px"] < 1.0
    cam2 = read_cameras(folder / "free-kick-behind.camera.json")[0]  # not saved: still the exact one
    assert np.allclose(cam2.centre, cam.centre)
    # reopening the clip brings back the saved clicks
    back = client.get("/api/clip", params={"path": CLIP}).json()["clicked"]
    assert back["template"] == "soccer-goal" and back["clicks"] == {k: list(v) for k, v in clicks.items()}
    assert back["turned"] is False
    # turned half a turn (play the other way): the sample camera then sits 29 m out on the +x side
    body = client.post("/api/calibrate", json={"path": CLIP, "template": "soccer-goal", "clicks": clicks,
                                               "turn": True}).json()
    assert body["turned"] and body["pose"].startswith("camera at x = 29.00 m, y = -1.50 m, height 3.20 m")
    # every template landmark the camera sees is predicted (the page rings the ones still to click)
    assert set(clicks) <= set(body["template_px"])


def test_turned_frame_sees_the_same_picture():
    X = np.random.default_rng(3).uniform(-5, 30, (20, 3))
    cam = turn_camera(TRUE_CAM, HALF_TURN)
    assert np.allclose(cam.project(X @ HALF_TURN.T), TRUE_CAM.project(X), atol=1e-9)


def test_saved_camera_keeps_its_template_through_the_file(client, folder):
    """Round trip: the workbench's saved file -> read_cameras -> to_dict -> file again keeps the ``template``
    key; a turned frame is said in the key, so the template's launch zones are refused on it."""
    from balltraj.camera.model import camera_from_dict
    from balltraj.pipeline_depth import template_zone

    clicks = visible_clicks()
    for turn in (False, True):
        body = client.post("/api/calibrate", json={"path": CLIP, "template": "soccer-goal", "clicks": clicks,
                                                   "turn": turn, "save": True}).json()
        path = folder / body["saved"]
        cam = read_cameras(path)[0]
        assert cam.template == "soccer-goal" and cam.world_frame == body["frame"]
        assert (cam.world_frame == TEMPLATES["soccer-goal"]["frame"]) is (not turn)
        again = camera_from_dict(cam.to_dict())
        assert (again.template, again.world_frame) == (cam.template, cam.world_frame)
        assert json.loads(path.read_text())["template"] == cam.to_dict()["template"]
        zone, why = template_zone(cam, 0.11, [0.0, 0.01, 0.02], [[640, 400], [641, 399], [642, 398]])
        if turn:
            assert zone is None and "another world frame" in why
        else:
            assert "another world frame" not in why


def test_start_point_from_a_click():
    # Source: the render's truth — the ray through the ball's drawn centre meets its height at its true position
    truth = pd.read_csv(ROOT / "sample_clips" / "free-kick-behind.truth.csv", comment="#")
    for _, row in truth.iloc[::20].iterrows():
        X = ground_point(TRUE_CAM, (row.u, row.v), row.z)
        assert np.allclose(X, [row.x, row.y, row.z], atol=1e-6)


def _wait(client, job):
    for _ in range(600):
        s = client.get(f"/api/job/{job}").json()
        if s["state"] != "running":
            return s
        time.sleep(0.1)
    raise AssertionError("the analysis did not finish")


def test_analysis_review_refit_and_history(client, folder):
    r = client.post("/api/analyze", json={"path": CLIP, "ball": "soccer"})
    assert r.status_code == 400 and "save a camera" in r.json()["error"]
    client.post("/api/calibrate", json={"path": CLIP, "template": "soccer-goal", "clicks": visible_clicks(),
                                        "save": True})
    cam = read_cameras(folder / "free-kick-behind.camera.json")[0]
    spot = cam.project(np.array([[-GOAL_X, 0.0, 0.11]]))[0]  # the ball on its spot, 22 m before the goal line
    start = client.post("/api/anchor", json={"path": CLIP, "uv": spot.tolist(), "ball": "soccer"}).json()
    ball_radius = TRUTH["truth"]["ball_properties"]["diameter_m"] / 2
    assert np.allclose(start["start_near_m"], [-GOAL_X, 0, ball_radius], atol=0.02)
    r = client.post("/api/analyze", json={"path": CLIP, "ball": "soccer", "start_near_m": start["start_near_m"],
                                          "target_x_m": 0.0, "athlete": "<b>Tobi Marsh</b>", "session": "Tuesday"})
    s = _wait(client, r.json()["job"])
    assert s["state"] == "done", s["error"]
    f = s["flights"][0]
    # Source: the sample's truth (truth.json: 25 m/s, 520 rpm) — the tracker and fit recover it
    speed = float(f["cards"][0][1].split("(")[1].split(" m/s")[0])
    assert speed == pytest.approx(TRUTH["truth"]["launch"]["speed_mps"], rel=0.02)
    assert float(f["cards"][2][1].split(" ")[0]) == pytest.approx(TRUTH["truth"]["spin"]["rate_rpm"], rel=0.05)
    imperial = client.get(f"/api/job/{s['id']}", params={"units": "imperial"}).json()["flights"][0]["cards"][0][1]
    # Source: 1 mph = 0.44704 m/s exactly (international yard and pound, 1959)
    assert float(imperial.split(" mph")[0].split(" ")[0]) == pytest.approx(speed / 0.44704, abs=0.06)
    report = client.get(f"/report/{s['id']}")
    assert report.status_code == 200 and "sandbox" in report.headers["content-security-policy"]
    assert "<b>Tobi" not in report.text
    assert str(folder) not in report.text  # the clip by its name in the folder
    keep = list(f["keep"])
    keep[0] = keep[-1] = keep[len(keep) // 2] = False
    s2 = client.post("/api/refit", json={"job": s["id"], "flight": 0, "keep": keep}).json()
    assert s2["flights"][0]["keep"] == keep
    assert client.post("/api/refit", json={"job": s["id"], "flight": 0, "keep": [True] * 3}).status_code == 400
    speed2 = float(s2["flights"][0]["cards"][0][1].split("(")[1].split(" m/s")[0])
    assert speed2 == pytest.approx(speed, rel=0.02) and speed2 != speed  # the fit saw fewer points
    assert client.post("/api/save", json={"job": s["id"]}).json()["stored"] is True
    assert client.post("/api/save", json={"job": s["id"]}).json()["stored"] is False  # never doubled
    h = client.get("/history")
    assert h.status_code == 200 and "&lt;b&gt;Tobi Marsh&lt;/b&gt;" in h.text and "<b>Tobi" not in h.text
    h = client.get("/history", params={"by": "athlete", "a": "<b>Tobi Marsh</b>", "b": "<b>Tobi Marsh</b>"})
    # the card's speed is itself rounded (two decimals), so the page's one-decimal figure may round either way
    shown = [float(x) for x in re.findall(r"\b\d+\.\d\b", h.text)]
    assert 'id="comparison"' in h.text and any(abs(x - speed2) <= 0.051 for x in shown)
    assert client.get("/history", params={"by": "athlete", "a": "nobody", "b": "<b>Tobi Marsh</b>"}).status_code == 400


def test_command_line(folder, monkeypatch):
    from typer.testing import CliRunner

    import uvicorn
    from balltraj.cli import app

    seen = {}
    monkeypatch.setattr(uvicorn, "run", lambda web, host, port, log_level: seen.update(host=host, port=port))
    runner = CliRunner()
    r = runner.invoke(app, ["workbench", str(folder), "--port", "9123"])
    assert r.exit_code == 0 and seen == {"host": "127.0.0.1", "port": 9123}
    assert "http://127.0.0.1:9123/" in r.output and "warning" not in r.output
    r = runner.invoke(app, ["workbench", str(folder), "--host", "0.0.0.0"])
    assert r.exit_code == 0 and seen["host"] == "0.0.0.0" and "warning: listening on 0.0.0.0" in r.output
    r = runner.invoke(app, ["workbench", str(folder / "nope")])
    assert r.exit_code == 2 and "needs a folder of clips" in r.output
    r = runner.invoke(app, ["workbench", str(folder), "--port", "0"])
    assert r.exit_code == 2


def test_compare_two_flights(client, folder):
    import re

    client.post("/api/calibrate", json={"path": CLIP, "template": "soccer-goal", "clicks": visible_clicks(),
                                        "save": True})
    s = _wait(client, client.post("/api/analyze", json={"path": CLIP, "ball": "soccer", "athlete": "A"}).json()["job"])
    assert client.post("/api/save", json={"job": s["id"]}).json()["stored"] is True
    keep = list(s["flights"][0]["keep"])
    keep[:10] = [False] * 10
    s2 = client.post("/api/refit", json={"job": s["id"], "flight": 0, "keep": keep}).json()
    # the re-fit with other points replaces the clip's analysis (one analysis a clip in the library)
    assert client.post("/api/save", json={"job": s["id"]}).json()["stored"] is True
    assert client.get("/history").text.count('name="f"') == 1
    # a second clip, with its camera file beside it (the sample pitch filmed from the side)
    pitch = json.loads((ROOT / "sample_clips" / "pitch-side.truth.json").read_text())
    shutil.copy(ROOT / "sample_clips" / "pitch-side.mp4", folder / "pitch-side.mp4")
    shutil.copy(ROOT / pitch["camera"], folder / "pitch-side.camera.json")
    s3 = _wait(client, client.post("/api/analyze", json={"path": "pitch-side.mp4", "ball": "baseball",
                                                         "start_near_m": pitch["start_near"],
                                                         "athlete": "B"}).json()["job"])
    assert client.post("/api/save", json={"job": s3["id"]}).json()["stored"] is True
    h = client.get("/history").text
    ids = re.findall(r'name="f" value="(\d+)"', h)
    assert len(ids) == 2
    r = client.get("/compare", params=[("f", ids[0]), ("f", ids[1])])
    assert r.status_code == 200 and "sandbox" in r.headers["content-security-policy"]
    # Source: the two fits shown on the page are the ones the workbench made (re-fitted kick, pitch)
    for summ in (s2, s3):
        assert summ["flights"][0]["cards"][0][1].split(" (")[0] in r.text
    assert client.get("/compare", params=[("f", ids[0])]).status_code == 400
    assert client.get("/compare", params=[("f", ids[0]), ("f", "99")]).status_code == 404
    assert client.get("/compare", params=[("f", ids[0]), ("f", "x;drop")]).status_code == 400


def test_viewer_frames_are_the_clips_frames_in_order():
    import cv2

    from balltraj.workbench.files import FrameStore

    # Source: OpenCV's own sequential decode of the clip (what the tracker reads), independent of the store
    cap = cv2.VideoCapture(str(ROOT / "sample_clips" / CLIP))
    frames = []
    while True:
        ok, img = cap.read()
        if not ok:
            break
        frames.append(img)
    cap.release()
    store = FrameStore(max_bytes=200_000)  # a small cache: most requests decode again
    assert store.info(ROOT / "sample_clips" / CLIP)["frames"] == len(frames)
    for k in (0, 7, 3, 120, len(frames) - 1, 60, 61, 59):  # forward, back, far, the last, stepping
        img = cv2.imdecode(np.frombuffer(store.jpeg(ROOT / "sample_clips" / CLIP, k), np.uint8),
                           cv2.IMREAD_COLOR).astype(float)
        near = range(max(0, k - 3), min(len(frames), k + 4))
        errs = {j: np.abs(img - frames[j]).mean() for j in near}
        assert min(errs, key=errs.get) == k and errs[k] < 2.0  # JPEG quality 88: under 2 grey levels on average


def test_a_bug_is_a_clean_page_not_a_traceback(folder, monkeypatch):
    import balltraj.workbench.app as wb_app

    def boom(*a, **k):
        raise ZeroDivisionError("secret detail")

    monkeypatch.setattr(wb_app, "calibrate_clicks", boom)
    monkeypatch.setattr(wb_app.history, "view", boom)
    c = TestClient(create_app(folder, allowed_hosts=["testserver"]), raise_server_exceptions=False)
    r = c.post("/api/calibrate", json={"path": CLIP, "template": "soccer-goal", "clicks": visible_clicks()})
    assert r.status_code == 500 and "internal error (ZeroDivisionError)" in r.json()["error"]
    r = c.get("/history")
    assert r.status_code == 500 and "this is a bug in balltraj" in r.text and "Traceback" not in r.text
    assert "secret detail" not in r.text


def test_a_clip_without_a_ball_fails_with_a_message(folder):
    import cv2

    from balltraj.camera.model import look_at_camera
    from balltraj.formats import write_json

    path = folder / "empty-field.mp4"
    w = cv2.VideoWriter(str(path), cv2.VideoWriter_fourcc(*"mp4v"), 60.0, (320, 240))
    grass = np.full((240, 320, 3), (60, 120, 55), np.int16)
    rng = np.random.default_rng(1)
    for _ in range(30):  # sensor noise: each frame its own exposure (identical frames are repeats)
        w.write(np.clip(grass + rng.normal(0, 3, grass.shape), 0, 255).astype(np.uint8))
    w.release()
    cam = look_at_camera("side", [0, -10, 1.5], [0, 0, 1], 300, (320, 240))
    write_json(folder / "empty-field.camera.json", cam.to_dict())
    c = TestClient(create_app(folder, allowed_hosts=["testserver"]))
    s = _wait(c, c.post("/api/analyze", json={"path": "empty-field.mp4", "ball": "baseball"}).json()["job"])
    assert s["state"] == "failed" and s["error"].startswith("empty-field.mp4: no ball flight")
    assert str(folder) not in s["error"]
    assert 0 < s["done"] <= 30  # progress was reported, in frames of this clip
    assert c.get(f"/report/{s['id']}").status_code == 404
