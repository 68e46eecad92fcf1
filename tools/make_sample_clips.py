"""Regenerate the bundled sample clips (invented demo data), their camera files and truth.

Invented scenario: a Tuesday practice of the Millbrook Kestrels (a club that does not exist); the
athletes' names are made up. Run from the repository root:

    python tools/make_sample_clips.py
"""
import json
import math
from pathlib import Path

import numpy as np

from balltraj.camera.model import look_at_camera
from balltraj.record.build import simulate_record
from balltraj.formats import write_csv
from balltraj.physics.air import air_conditions
from balltraj.physics.balls import get_ball
from balltraj.physics.flight import FlightModel, FlightParameters, fly, launch_state
from balltraj.vision.render import Scene, render_clip

RPM = 2 * math.pi / 60
CLIPS = Path("sample_clips")
CAL = Path("calibration")

SAMPLES = [
    dict(name="pitch-side", athlete="Ines Varga", ball="baseball", position=[0, 0.25, 1.78], speed=37.5,
         elevation=-1.1, azimuth=-0.4, rpm=2250, axis=[0.15, -1.0, 0.25], target_x=18.44,
         camera=dict(centre=[9.2, -13.5, 1.3], target=[9.2, 0.0, 1.25], focal=760, size=(960, 540)),
         fps=240, start=0.15, duration=0.8, seed=11),
    dict(name="free-kick-behind", athlete="Tobi Marsh", ball="soccer", position=[0, 0, 0.11], speed=25.0,
         elevation=15.0, azimuth=-6.0, rpm=520, axis=[0.0, -0.25, 0.97], target_x=22.0,
         camera=dict(centre=[-7.0, 1.5, 3.2], target=[22.0, -1.0, 1.2], focal=800, size=(960, 540)),
         fps=120, start=0.15, duration=1.35, seed=12),
]


def main():
    CLIPS.mkdir(exist_ok=True)
    CAL.mkdir(exist_ok=True)
    air = air_conditions(temperature_c=18.0, humidity_pct=65.0, altitude_m=120.0)
    for s in SAMPLES:
        ball = get_ball(s["ball"])
        model = FlightModel.for_ball(ball, air)
        s0 = launch_state(s["position"], s["speed"], math.radians(s["elevation"]), math.radians(s["azimuth"]))
        ax = np.asarray(s["axis"], float)
        vhat = s0[3:] / np.linalg.norm(s0[3:])
        ax = ax - (ax @ vhat) * vhat
        spin = s["rpm"] * RPM * ax / np.linalg.norm(ax)
        c = s["camera"]
        cam = look_at_camera(f"kestrels-{s['name']}", c["centre"], c["target"], c["focal"], c["size"])
        (CAL / f"{s['name']}.json").write_text(json.dumps(cam.to_dict(), indent=1) + "\n")
        tr = fly(model, 0.0, s0, FlightParameters.make(1, spin=spin), ground_z=0.0, t_max=5.0)
        tg, _ = tr.first_crossing(2, 0.0, -1)
        t_fl = float(tg[0]) if np.isfinite(tg[0]) else float(tr.t[-1])
        start = s["start"]
        fn = lambda ts, tr=tr, t_fl=t_fl, start=start: tr.positions(np.clip(np.asarray(ts) - start, 0, t_fl))[0]  # noqa: E731
        scene = Scene(cam, fps=s["fps"], duration_s=s["duration"], exposure_s=1 / 1000, noise=2.0, seed=s["seed"],
                      ball_radius_m=model.radius_m, flights=[(start, start + t_fl, fn)])
        truth_rows = render_clip(scene, CLIPS / f"{s['name']}.mp4")
        write_csv(CLIPS / f"{s['name']}.truth.csv", ["t", "flight", "u", "v", "radius_px", "x", "y", "z"],
                  ([r[k] for k in ("t", "flight", "u", "v", "radius_px", "x", "y", "z")] for r in truth_rows),
                  comment="invented demo data: the ball's true centre in each frame")
        rec, _ = simulate_record(ball, air, model, s0, spin, target_x=s["target_x"])
        rec["launch"]["t_s"] = start
        meta = {"athlete": s["athlete"], "session": "Millbrook Kestrels, Tuesday evening practice",
                "note": "invented demo data (not a real club or athlete)", "ball": s["ball"],
                "camera": f"calibration/{s['name']}.json", "start_near": s["position"], "target_x_m": s["target_x"],
                "air_kwargs": {"temperature_c": 18.0, "humidity_pct": 65.0, "altitude_m": 120.0}, "truth": rec}
        (CLIPS / f"{s['name']}.truth.json").write_text(json.dumps(meta, indent=1) + "\n")
        print(s["name"], len(truth_rows), "frames with the ball;", (CLIPS / f"{s['name']}.mp4").stat().st_size // 1000, "kB")


if __name__ == "__main__":
    main()
