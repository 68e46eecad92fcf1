"""The whole workbench flow in headless Chromium on the bundled sample clip, driven through the
Chrome DevTools protocol (a small websocket client): open the page, click the landmarks, save the
camera, click the start point, run the analysis, read the headline numbers, drop a point and fit
again, save to the history. Screenshots of each screen go to the test's folder (and to
docs/workbench/ when BALLTRAJ_SCREENSHOTS=1)."""

from __future__ import annotations

import base64
import json
import os
import shutil
import socket
import subprocess
import threading
import time
import urllib.request
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from balltraj.formats import read_cameras

from test_workbench import CLIP, GOAL_X, ROOT, TRUE_CAM, TRUTH, visible_clicks

CHROMIUM = shutil.which("chromium") or shutil.which("chromium-browser")
FLAGS = ["--headless", "--no-sandbox", "--disable-gpu", "--disable-background-networking",
         "--disable-component-update", "--disable-sync", "--no-first-run"]


def _free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


class Page:
    """One browser tab over the DevTools protocol: commands by id, events ignored."""

    def __init__(self, ws):
        self.ws = ws
        self.n = 0

    def send(self, method: str, **params):
        self.n += 1
        self.ws.send(json.dumps({"id": self.n, "method": method, "params": params}))
        while True:
            msg = json.loads(self.ws.recv(timeout=30))
            if msg.get("id") == self.n:
                if "error" in msg:
                    raise AssertionError(f"{method}: {msg['error']}")
                return msg.get("result", {})

    def js(self, expr: str):
        r = self.send("Runtime.evaluate", expression=expr, returnByValue=True, awaitPromise=True)
        if "exceptionDetails" in r:
            raise AssertionError(f"{expr}: {r['exceptionDetails']}")
        return r["result"].get("value")

    def wait(self, expr: str, timeout: float = 30.0):
        end = time.monotonic() + timeout
        while time.monotonic() < end:
            v = self.js(expr)
            if v:
                return v
            time.sleep(0.1)
        status = self.js("[...document.querySelectorAll('.status')].map(e => e.textContent)")
        raise AssertionError(f"timed out waiting for {expr}; status: {status}")

    def go(self, url: str):
        self.send("Page.navigate", url=url)
        self.wait("document.readyState === 'complete'")

    def click(self, x: float, y: float):
        for kind in ("mousePressed", "mouseReleased"):
            self.send("Input.dispatchMouseEvent", type=kind, x=x, y=y, button="left", clickCount=1)

    def click_image(self, u: float, v: float):
        """Click image pixel (u, v) of the frame canvas (pixel centres at integers)."""
        r = self.js("(() => { const b = document.getElementById('view').getBoundingClientRect(); "
                    "return [b.left, b.top, b.width, b.height]; })()")
        w, h = TRUE_CAM.image_size
        self.click(r[0] + (u + 0.5) * r[2] / w, r[1] + (v + 0.5) * r[3] / h)

    def shot(self, path: Path, whole: bool = True):
        data = self.send("Page.captureScreenshot", format="png", captureBeyondViewport=whole)["data"]
        path.write_bytes(base64.b64decode(data))


@pytest.fixture()
def server(tmp_path):
    import uvicorn

    from balltraj.workbench import create_app

    folder = tmp_path / "clips"
    folder.mkdir()
    shutil.copy(ROOT / "sample_clips" / CLIP, folder / CLIP)
    port = _free_port()
    srv = uvicorn.Server(uvicorn.Config(create_app(folder), host="127.0.0.1", port=port, log_level="warning"))
    th = threading.Thread(target=srv.run, daemon=True)
    th.start()
    for _ in range(100):
        if srv.started:
            break
        time.sleep(0.05)
    yield f"http://127.0.0.1:{port}", folder
    srv.should_exit = True
    th.join(10)


@pytest.fixture()
def page(tmp_path):
    port = _free_port()
    proc = subprocess.Popen([CHROMIUM, *FLAGS, f"--user-data-dir={tmp_path / 'profile'}",
                             f"--remote-debugging-port={port}", "--window-size=1400,1000", "about:blank"],
                            stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
    try:
        targets = None
        for _ in range(200):
            try:
                with urllib.request.urlopen(f"http://127.0.0.1:{port}/json/list", timeout=2) as r:
                    targets = [t for t in json.load(r) if t["type"] == "page"]
                if targets:
                    break
            except OSError:
                pass
            time.sleep(0.1)
        assert targets, "chromium did not open a page"
        from websockets.sync.client import connect

        with connect(targets[0]["webSocketDebuggerUrl"], max_size=None, open_timeout=20) as ws:
            p = Page(ws)
            p.send("Page.enable")
            p.send("Emulation.setDeviceMetricsOverride", width=1400, height=1000, deviceScaleFactor=1, mobile=False)
            yield p
    finally:
        proc.terminate()
        proc.wait(10)


@pytest.mark.browser
@pytest.mark.skipif(CHROMIUM is None and "CI" not in os.environ, reason="no chromium here")
def test_whole_flow_in_a_browser(server, page, tmp_path):
    assert CHROMIUM, "CI must install Debian's chromium (.ci/run does)"
    base, folder = server
    shots = tmp_path / "shots"
    shots.mkdir()
    page.go(base + "/")
    assert page.js("document.querySelector('#clips a').textContent").strip() == CLIP
    page.shot(shots / "clips.png")

    # calibrate: pick the field, click each landmark the camera sees (the sample's camera says where)
    page.go(f"{base}/clip?path={CLIP}")
    page.wait("document.getElementById('bench').dataset.ready === '1'")
    page.js("(() => { const s = document.getElementById('template'); s.value = 'soccer-goal'; "
            "s.dispatchEvent(new Event('change')); })()")
    clicks = visible_clicks()
    for name, (u, v) in clicks.items():
        page.js(f"document.querySelector('#landmarks button[data-name=\"{name}\"]').click()")
        page.click_image(u, v)
        page.wait(f"document.querySelector('#landmarks button[data-name=\"{name}\"]').classList.contains('done')")
    status = page.wait("(() => { const t = document.getElementById('calib-status').textContent; "
                       f"return t.includes('over {len(clicks)} landmarks') && t; }})()")
    rms = float(status.split("error ")[1].split(" px")[0])
    assert rms < 0.1, status  # pointer events keep sub-pixel positions: the clicks land on the landmarks
    page.shot(shots / "calibrate.png")
    page.js("document.getElementById('save-camera').click()")
    page.wait("document.getElementById('camera-saved').textContent.startsWith('saved')")
    cam = read_cameras(folder / "free-kick-behind.camera.json")[0]
    # Source: the sample's camera file; the workbench's frame has the goal line at x = 0 (the sample's at 22 m)
    assert np.linalg.norm(cam.centre - (TRUE_CAM.centre - [GOAL_X, 0, 0])) < 0.1
    assert cam.focal_px == pytest.approx(TRUE_CAM.focal_px, rel=0.005)
    # opening the clip again brings back the clicks and their errors
    page.go(f"{base}/clip?path={CLIP}")
    page.wait("document.getElementById('bench').dataset.ready === '1'")
    page.wait(f"document.getElementById('calib-status').textContent.includes('over {len(clicks)} landmarks')")

    # start point: the ball in one of the first frames it is seen, at its height there (the render's truth)
    truth = pd.read_csv(ROOT / "sample_clips" / "free-kick-behind.truth.csv", comment="#")
    first = truth.iloc[2]  # the first frames show it cut by the picture's lower edge
    page.js("document.querySelector('.tabs button[data-step=start]').click()")
    page.js("document.getElementById('ball').value = 'soccer'")
    page.js(f"document.getElementById('height').value = '{first.z:.3f}'")
    page.js(f"(() => {{ const s = document.getElementById('scrub'); s.value = {round(first.t * 120)}; "
            "s.dispatchEvent(new Event('input')); })()")
    page.click_image(first.u, first.v)
    page.wait("document.getElementById('start-status').textContent.startsWith('Start near')")
    page.shot(shots / "start.png")

    # analyse
    page.js("document.querySelector('.tabs button[data-step=analyse]').click()")
    page.js(f"document.getElementById('athlete').value = {json.dumps(TRUTH['athlete'])}")
    page.js("document.getElementById('session').value = 'Tuesday evening practice'")
    page.js("document.getElementById('target').value = '0'")
    page.js("document.getElementById('run').click()")
    page.wait("document.getElementById('run-status').textContent.startsWith('Done')", timeout=60)
    cards = page.wait("(() => { const c = document.querySelectorAll('#headline .card .v'); "
                      "return c.length >= 4 && [...c].map(e => e.textContent); })()")
    speed = float(cards[0].split("(")[1].split(" m/s")[0])
    rpm = float(cards[2].split(" ")[0])
    # Source: the sample's truth.json (25 m/s, 520 rpm; invented demo flight simulated by balltraj and rendered)
    assert speed == pytest.approx(TRUTH["truth"]["launch"]["speed_mps"], rel=0.03)
    assert rpm == pytest.approx(TRUTH["truth"]["spin"]["rate_rpm"], rel=0.08)
    report_loaded = ("(() => { const r = document.getElementById('report'); "
                     "return r.src.includes('/report/') && r.dataset.loaded === r.src; })()")
    page.wait(report_loaded, timeout=60)  # the report (inline SVG plots) loads in its frame
    time.sleep(0.5)  # and is painted
    page.shot(shots / "analyse.png")

    # review: save the first fit, drop the first tracked point (clicked on the picture), fit again, save again
    page.js("document.querySelector('.tabs button[data-step=review]').click()")
    page.js("document.getElementById('save-history').click()")
    page.wait("document.getElementById('review-status').textContent.startsWith('Saved')")
    job = page.js("document.getElementById('report').src.split('/report/')[1].split('?')[0]")
    with urllib.request.urlopen(f"{base}/api/job/{job}") as r:
        summary = json.load(r)
    f = summary["flights"][0]
    uv0, k0 = f["uv"][0], f["frame"][0]
    page.js(f"(() => {{ const s = document.getElementById('scrub'); s.value = {k0}; "
            "s.dispatchEvent(new Event('input')); })()")
    page.click_image(*uv0)
    page.wait("document.getElementById('review-status').textContent.startsWith('1 point dropped')")
    page.js("document.getElementById('refit').click()")
    page.wait("document.getElementById('review-status').textContent.startsWith('Fitted again')")
    with urllib.request.urlopen(f"{base}/api/job/{job}") as r:
        assert json.load(r)["flights"][0]["keep"][0] is False
    page.wait(report_loaded, timeout=60)  # the re-fitted flight's report
    time.sleep(0.5)  # and is painted
    page.shot(shots / "review.png")
    page.js("document.getElementById('save-history').click()")
    page.wait("document.getElementById('review-status').textContent.startsWith('Saved')")

    page.go(f"{base}/report/{job}")
    assert f"{speed:.1f}"[:3] in page.js("document.body.textContent")
    page.shot(shots / "report.png")
    page.go(f"{base}/history")
    assert TRUTH["athlete"] in page.js("document.body.textContent")
    # the re-fit replaced the first save: the library holds one analysis of the clip (comparing two
    # clips' flights is tested with the test client in test_workbench.py)
    assert page.js("document.querySelectorAll('input[name=f]').length") == 1
    page.shot(shots / "history.png")

    import matplotlib.image as mpimg

    for p in sorted(shots.iterdir()):
        assert mpimg.imread(p).std() > 0.02, p  # not blank
    if os.environ.get("BALLTRAJ_SCREENSHOTS") == "1":
        out = ROOT / "docs" / "workbench"
        out.mkdir(parents=True, exist_ok=True)
        for p in shots.iterdir():
            shutil.copy(p, out / p.name)
