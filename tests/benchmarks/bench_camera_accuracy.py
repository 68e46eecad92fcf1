"""Image-space fit accuracy with seeded synthetic cameras and pitches: one side-view camera, one
camera behind the thrower, two unsynchronised cameras. 240 fps, 0.5 px noise, apparent radius with
0.3 px noise, start hint 0.3 m. Writes the table into docs/validation.md.

Run: python tests/benchmarks/bench_camera_accuracy.py
Targets: side view deflection < 3 cm, two cameras < 1 cm.
"""
import math
import sys
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[2]
sys.path.insert(0, str(ROOT / "tests"))
sys.path.insert(0, str(Path(__file__).resolve().parent))
from _docs import publish  # noqa: E402
from synth import make_track  # noqa: E402

from balltraj.camera.model import look_at_camera  # noqa: E402
from balltraj.record.build import fit_record  # noqa: E402
from balltraj.fitting.flight_fit import FitOptions  # noqa: E402
from balltraj.fitting.image_fit import fit_flight_image  # noqa: E402
from balltraj.physics.reference import plane_deflection  # noqa: E402

N = 30


def rigs(rng):
    side = look_at_camera("side", [9 + rng.normal(0, 1), -12 + rng.normal(0, 1), 1.5], [9, 0, 1.4], 1400,
                          (1280, 720), dist=(-0.08, 0.01, 0, 0, 0))
    behind = look_at_camera("behind", [-3 + rng.normal(0, 0.3), 0.8 + rng.normal(0, 0.3), 2.6], [18, 0, 1.0], 1400,
                            (1280, 720))
    return {"one camera, side view": ([side], [0.0]), "one camera, behind the thrower": ([behind], [0.0]),
            "two unsynchronised cameras": ([side, behind], [0.0, float(rng.uniform(-0.004, 0.004))])}


def main():
    rng = np.random.default_rng(7)
    errs = {}
    for s in range(N):
        for label, (cams, offs) in rigs(rng).items():
            t, xyz, tr = make_track("baseball", noise_m=0.0, seed=300 + s,
                                    launch=([0, rng.uniform(-0.3, 0.3), 1.8], rng.uniform(33, 42), rng.uniform(-2, 1),
                                            rng.uniform(-1.5, 1.5), rng.uniform(1500, 2600),
                                            list(rng.normal(0, 1, 3)), 17.0))
            T, C, UV, R = [], [], [], []
            for cam, off in zip(cams, offs):
                T.append(t - off)
                C += [cam.name] * len(t)
                UV.append(cam.project(xyz) + rng.normal(0, 0.5, (len(t), 2)))
                R.append(cam.focal_px * tr["model"].radius_m / cam.depth(xyz) + rng.normal(0, 0.3, len(t)))
            hint = tuple(tr["state0"][:3] + rng.normal(0, 0.3, 3) * [0.3, 1, 0.3])
            fit = fit_flight_image(tr["model"], np.concatenate(T), C, np.concatenate(UV), cams,
                                   radius_px=np.concatenate(R), options=FitOptions(start_near=hint))
            rec, _ = fit_record(fit, tr["ball"], tr["air"], tr["model"], target_x=17.0)
            d = plane_deflection(tr["model"], 0.0, tr["state0"], tr["params"], 17.0, ground_z=None)
            e = errs.setdefault(label, {"speed": [], "defl": [], "sigma": []})
            e["speed"].append(abs(rec["launch"]["speed_mps"] / np.linalg.norm(tr["state0"][3:]) - 1) * 100)
            e["defl"].append(math.hypot(rec["deflection"]["horizontal_m"] - d.horizontal_m,
                                        rec["deflection"]["vertical_m"] - d.vertical_m) * 100)
            e["sigma"].append(math.hypot(rec["uncertainty"]["deflection"]["horizontal_m"],
                                         rec["uncertainty"]["deflection"]["vertical_m"]) * 100)
    lines = [f"Image-space fit, {N} seeded pitches per set-up (240 fps, 0.5 px, apparent radius ±0.3 px, start "
             "hint within 0.3 m)", "",
             "| set-up | launch speed error % median (p95) | deflection error cm median (p95) | reported deflection sigma cm median |",
             "|---|---|---|---|"]
    for label, e in errs.items():
        lines.append(f"| {label} | {np.median(e['speed']):.2f} ({np.percentile(e['speed'], 95):.2f}) | "
                     f"{np.median(e['defl']):.2f} ({np.percentile(e['defl'], 95):.2f}) | {np.median(e['sigma']):.2f} |")
    publish("camera-accuracy", lines)


if __name__ == "__main__":
    main()
