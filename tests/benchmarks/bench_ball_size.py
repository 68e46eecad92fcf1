"""The ball's apparent radius, detector against the refined edge fit (vision/ball_size.py), on clips of the
second, separately written renderer (tests/scene_outside.py: its own flight, lens with radial distortion,
shaded panelled ball, blur, rolling shutter, noise, H.264), and what the refinement costs.

Truth per frame: the renderer's radius (f R / depth times its lens's local magnification) for exposures with
the ball wholly in view and not hidden. The refined radius is f R / depth (balltraj divides the lens's
magnification out), so it is multiplied by ``lens_magnification`` at its centre before it is compared.
Per clip: the scale error (median r / r_true - 1), the per-frame scatter (1.4826 MAD of r - (1 + scale)
r_true) [px], the share of refined frames within their stated one-sigma of the truth, and the wall time of
tracking with and without the refinement against decoding alone (same run, same file).

Fixed-camera shots of bench_track_outside.py (their camera file applies), seeds 0 and 1 (or --seeds 0,...).
Run: PYTHONPATH=$PWD python tests/benchmarks/bench_ball_size.py [--no-publish] [--seeds 0]
"""
import sys
import tempfile
import time
from dataclasses import replace
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve()
sys.path.insert(0, str(HERE.parents[1]))
sys.path.insert(0, str(HERE.parent))
from _docs import publish  # noqa: E402
from bench_track_outside import camera_file, shots  # noqa: E402
from scene_outside import render_shot  # noqa: E402

from balltraj.vision.ball_size import REFINED  # noqa: E402
from balltraj.vision.clip import decode_only  # noqa: E402
from balltraj.vision.detect import lens_magnification  # noqa: E402
from balltraj.vision.pipeline import track_clip  # noqa: E402


def _stats(pairs):
    if len(pairs) < 8:
        return None
    a = np.array(pairs, float)
    rt, r = a[:, 0], a[:, 1]
    scale = float(np.median(r / rt) - 1.0)
    res = r - (1 + scale) * rt
    out = {"scale": scale, "noise": float(1.4826 * np.median(np.abs(res - np.median(res))))}
    if a.shape[1] > 2:
        out["cover"] = float(np.mean(np.abs(r - rt) <= a[:, 2]))
    return out


def run_clip(shot, path):
    truth = render_shot(shot, path)
    by_frame = {r["frame"]: r for r in truth if r["visible"] and not r["repeat"]}
    cam = camera_file(shot)
    dec = min(decode_only(path)[1] for _ in range(2))
    t0 = time.perf_counter()
    track_clip(path, cam, shot.ball.radius_m, refine_radius=False)
    t1 = time.perf_counter()
    res = track_clip(path, cam, shot.ball.radius_m)
    t2 = time.perf_counter()
    det, ref, n_ref, n = [], [], 0, 0
    for f, rr in zip(res.flights, res.radii):
        mag = lens_magnification(cam, f.uv)
        for i, k in enumerate(f.frame):
            row = by_frame.get(int(k))
            if row is None or np.hypot(f.uv[i, 0] - row["u"], f.uv[i, 1] - row["v"]) > max(2.0, 0.5 * row["r"]):
                continue  # not on the ball
            n += 1
            det.append((row["r"], rr.detector_radius_px[i]))
            if rr.source[i] == REFINED:
                n_ref += 1
                ref.append((row["r"], rr.radius_px[i] * mag[i], rr.radius_sigma_px[i] * mag[i]))
    diam = [2 * r["r"] for r in by_frame.values()]
    return {"det": _stats(det), "ref": _stats(ref), "n": n, "n_ref": n_ref, "track": (t1 - t0) / dec,
            "track_refined": (t2 - t1) / dec, "r": (min(diam) / 2, max(diam) / 2) if diam else (0, 0)}


def _cell(s, key, fmt):
    return "–" if s is None else fmt.format(s[key])


SEEDS = [int(k) for k in sys.argv[sys.argv.index("--seeds") + 1].split(",")] if "--seeds" in sys.argv else [0, 1]


def main():
    rows = []
    with tempfile.TemporaryDirectory() as d:
        for i, (name, shot) in enumerate(shots()):
            if shot.follow or shot.shake_px > 0.5:
                continue  # hand-held: no camera file applies
            for k in SEEDS:
                r = run_clip(replace(shot, seed=shot.seed + 100 * k), Path(d) / f"size{i}_{k}.mp4")
                rows.append(f"| {name} (seed {k}) | {r['r'][0]:.1f}–{r['r'][1]:.1f} | {r['n_ref']}/{r['n']} | "
                            f"{_cell(r['det'], 'scale', '{:+.1%}')} ({_cell(r['det'], 'noise', '{:.2f}')}) | "
                            f"{_cell(r['ref'], 'scale', '{:+.1%}')} ({_cell(r['ref'], 'noise', '{:.2f}')}) | "
                            f"{_cell(r['ref'], 'cover', '{:.0%}')} | {r['track']:.1f} / {r['track_refined']:.1f} |")
                print(rows[-1], flush=True)
    lines = ["The ball's apparent radius on clips of the second renderer (tests/scene_outside.py), fixed-camera shots "
             "tracked with their camera file; truth the renderer's radius (f R / depth times its lens magnification). "
             f"Command: `PYTHONPATH=$PWD python tests/benchmarks/bench_ball_size.py --seeds {','.join(map(str, SEEDS))}`",
             "",
             "| shot | true radius px | frames refined / on the ball | detector: scale (scatter px) | refined: scale "
             "(scatter px) | refined within one sigma | wall time / decode only: tracking / tracking + refinement |",
             "|---|---|---|---|---|---|---|", *rows]
    if "--no-publish" not in sys.argv:
        publish("ball-size-outside", lines)
    else:
        print("\n".join(lines))


if __name__ == "__main__":
    main()
