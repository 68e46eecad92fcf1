"""Regenerate the bundled sample tracks (invented demo data) and their truth files.

The scenario is invented: a practice evening of the Millbrook Kestrels, a club that does not
exist; the athletes' names are made up. Run from the repository root:

    python tools/make_sample_tracks.py
"""
import json
import math
from pathlib import Path

import numpy as np

from balltraj.record.build import simulate_record
from balltraj.physics.air import air_conditions
from balltraj.physics.balls import get_ball
from balltraj.physics.flight import FlightModel, FlightParameters, fly, launch_state

RPM = 2 * math.pi / 60
OUT = Path("sample_clips/tracks")

# name, athlete, ball, position, speed, elevation, azimuth, rpm, axis, rate Hz, noise m, target x
FLIGHTS = [
    ("pitch-fastball", "Ines Varga", "baseball", [0, 0.3, 1.75], 39.5, -1.2, -0.6, 2250, [0.2, -0.95, 0.2], 240, 0.004, 17.0),
    ("pitch-curve", "Ines Varga", "baseball", [0, 0.3, 1.8], 33.0, 1.8, -1.5, 2500, [0.1, 0.75, 0.65], 240, 0.004, 17.0),
    ("free-kick", "Tobi Marsh", "soccer", [0, 0, 0.11], 26.0, 16.0, -7.0, 480, [0.0, -0.25, 0.97], 120, 0.012, 22.0),
]


def main():
    OUT.mkdir(parents=True, exist_ok=True)
    rng = np.random.default_rng(20261201)
    air = air_conditions(temperature_c=18.0, humidity_pct=65.0, altitude_m=120.0)
    for name, athlete, ball_name, pos, speed, el, az, rpm, axis, hz, noise, target in FLIGHTS:
        ball = get_ball(ball_name)
        model = FlightModel.for_ball(ball, air)
        s0 = launch_state(pos, speed, math.radians(el), math.radians(az))
        ax = np.asarray(axis, float)
        vhat = s0[3:] / np.linalg.norm(s0[3:])
        ax = ax - (ax @ vhat) * vhat
        spin = rpm * RPM * ax / np.linalg.norm(ax)
        tr = fly(model, 0.0, s0, FlightParameters.make(1, spin=spin), stop_x=target + 0.5, ground_z=None)
        tc, _ = tr.first_crossing(0, target, +1)
        t = np.arange(0.0, tc[0], 1.0 / hz) + 0.412  # the flight starts 0.412 s into the recording
        xyz = tr.positions(t - 0.412)[0] + rng.normal(0, noise, (t.size, 3))
        bad = rng.choice(np.arange(3, t.size - 3), 2, replace=False)
        xyz[bad] += [0.12, -0.09, 0.15]  # two mistracked frames
        with open(OUT / f"{name}.csv", "w") as f:
            f.write(f"# invented demo data: {athlete}, Millbrook Kestrels practice (not a real club)\n")
            f.write("t,x,y,z\n")
            for ti, p in zip(t, xyz):
                f.write(f"{ti:.6f},{p[0]:.5f},{p[1]:.5f},{p[2]:.5f}\n")
        rec, _ = simulate_record(ball, air, model, s0, spin, target_x=target)
        rec["launch"]["t_s"] = 0.412
        truth = {"athlete": athlete, "session": "Millbrook Kestrels, Tuesday evening practice",
                 "note": "invented demo data", "air_kwargs": {"temperature_c": 18.0, "humidity_pct": 65.0,
                                                              "altitude_m": 120.0},
                 "target_x_m": target, "mistracked_rows": sorted(int(b) for b in bad), "truth": rec}
        (OUT / f"{name}.truth.json").write_text(json.dumps(truth, indent=1))
        print(name, t.size, "points")


if __name__ == "__main__":
    main()
