"""Centroid accuracy of the detector on rendered clips: a sweep over motion blur (exposure) and
sensor noise. Median and 95th-percentile distance from the true centre (px). Target: median <= 0.3 px.
Writes the table into docs/validation.md.

Run: python tests/benchmarks/bench_detect_accuracy.py
"""
import math
import tempfile
from pathlib import Path
import sys

import numpy as np

from balltraj.camera.model import look_at_camera
from balltraj.physics.air import air_conditions
from balltraj.physics.balls import get_ball
from balltraj.physics.flight import FlightModel, FlightParameters, fly, launch_state
from balltraj.vision.pipeline import track_clip
from balltraj.vision.render import Scene, render_clip

ROOT = Path(__file__).resolve().parents[2]
sys.path.insert(0, str(Path(__file__).resolve().parent))
from _docs import publish  # noqa: E402


def main():
    cam = look_at_camera("side", [9.0, -10.0, 1.4], [9.0, 0.0, 1.3], 900, (960, 540))
    model = FlightModel.for_ball(get_ball("baseball"), air_conditions())
    s0 = launch_state([0, 0.2, 1.8], 36.0, math.radians(-1), 0.0)
    tr = fly(model, 0.0, s0, FlightParameters.make(1, spin=[0, -220, 40]), stop_x=19, ground_z=None)
    t_end = float(tr.first_crossing(0, 18.5)[0][0])
    fn = lambda ts: tr.positions(np.clip(ts - 0.1, 0, t_end))[0]  # noqa: E731
    rows = []
    for exposure in (1 / 4000, 1 / 1000, 1 / 480):
        for noise in (1.0, 3.0, 6.0):
            with tempfile.TemporaryDirectory() as d:
                clip = Path(d) / "c.mp4"
                truth = render_clip(Scene(cam, duration_s=0.75, exposure_s=exposure, noise=noise, seed=4,
                                          ball_radius_m=model.radius_m, flights=[(0.1, 0.1 + t_end, fn)]), clip)
                res = track_clip(clip, cam, model.radius_m)
            tt = np.array([r["t"] for r in truth])
            errs = []
            for f in res.flights:
                for t, (u, v) in zip(f.t, f.uv):
                    r = truth[int(np.argmin(np.abs(tt - t)))]
                    errs.append(math.hypot(u - r["u"], v - r["v"]))
            errs = np.array(errs)
            found = len(errs) / max(1, sum(1 for r in truth if 2 < r["u"] < 958))
            rows.append((exposure, noise, np.median(errs) if len(errs) else math.nan,
                         np.percentile(errs, 95) if len(errs) else math.nan, found))
    lines = ["Detector centroid error on rendered 960x540, 240 fps clips (ball radius about 3.5 px, speed about "
             "14 px per frame; mp4v compression)", "",
             "| exposure | noise (grey levels) | median error px | p95 error px | frames found |", "|---|---|---|---|---|"]
    for e, n, med, p95, fnd in rows:
        lines.append(f"| 1/{1 / e:.0f} s | {n:g} | {med:.3f} | {p95:.3f} | {100 * fnd:.0f} % |")
    publish("detect-accuracy", lines)


if __name__ == "__main__":
    main()
