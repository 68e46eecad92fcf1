"""The ball's image centre, detector against the edge fit (vision/ball_size.py), against the truth of the two
independent renderers (tests/scene_realism.py penalty kicks, tests/scene_outside.py fixed-camera shots).

Per clip: the median error vector (bias) and the median and RMS distance to the true centre, over every tracked
point on the ball and over the refined points only.
Run: PYTHONPATH=$PWD python tools/centre_errors.py realism 2     (kicks; plain and dark ground alternately)
     PYTHONPATH=$PWD python tools/centre_errors.py outside 0     (seeds, comma-separated)
"""
import sys
import tempfile
from dataclasses import replace
from pathlib import Path
import numpy as np
ROOT = Path.cwd()
sys.path[:0] = [str(ROOT / "tests"), str(ROOT / "tests/benchmarks")]
from balltraj.vision.pipeline import track_clip
from balltraj.vision.ball_size import REFINED, refine_flight_radii

def stats(err):
    if len(err) < 5:
        return "n<5"
    e = np.array(err)
    d = np.hypot(e[:, 0], e[:, 1])
    return f"n={len(e)} bias=({np.median(e[:,0]):+.2f},{np.median(e[:,1]):+.2f}) med|e|={np.median(d):.2f} rms={np.sqrt(np.mean(d**2)):.2f}"

def compare(path, cam, R, truth_uv, label):
    res = track_clip(path, cam, R, refine_radius=False)
    refs = refine_flight_radii(path, res.flights, cam)
    det, ref, refonly_det, refonly_ref = [], [], [], []
    for f0, rr in zip(res.flights, refs):
        for i, k in enumerate(f0.frame):
            tu = truth_uv(f0, i, int(k))
            if tu is None:
                continue
            u, v, r = tu
            if np.hypot(*(f0.uv[i] - [u, v])) > max(2.0, 0.5 * r) and np.hypot(*(rr.centre_px[i] - [u, v])) > max(2.0, 0.5 * r):
                continue
            det.append(f0.uv[i] - [u, v]); ref.append(rr.centre_px[i] - [u, v])
            if rr.source[i] == REFINED:
                refonly_det.append(f0.uv[i] - [u, v]); refonly_ref.append(rr.centre_px[i] - [u, v])
    print(f"{label}: detector {stats(det)} | refined {stats(ref)} || refined frames only: det {stats(refonly_det)} ref {stats(refonly_ref)}", flush=True)

which = sys.argv[1]
tmp = Path(tempfile.mkdtemp())
if which == "outside":
    from bench_track_outside import camera_file, shots
    from scene_outside import render_shot
    for i, (name, shot) in enumerate(shots()):
        if shot.follow or shot.shake_px > 0.5:
            continue
        for k in [int(a) for a in sys.argv[2].split(",")]:
            sh = replace(shot, seed=shot.seed + 100 * k)
            p = tmp / f"o{i}_{k}.mp4"
            truth = render_shot(sh, p)
            by = {r["frame"]: r for r in truth if r["visible"] and not r["repeat"]}
            def tu(f, i_, kk, by=by):
                r = by.get(kk)
                return None if r is None else (r["u"], r["v"], r["r"])
            compare(p, camera_file(sh), sh.ball.radius_m, tu, f"outside {name[:40]} s{k}")
else:
    import scene_realism as S
    from bench_single_camera_realism import radius_shots
    for k, j, label, var, shot, cam in radius_shots(int(sys.argv[2]), [dict(), dict(sky=False)]):
        p = tmp / f"r{k}_{j}.mp4"
        frames = S.render_shot(shot, p)
        # by the decoded frame's index (a stored frame is one row of the renderer's truth); not by round(t * FPS):
        # the tracker's times of a flight may drift by over half a frame from k / FPS (exposure_time's line fit
        # after a frame taken for a repeat), which matched a neighbouring frame's truth
        def tu(fl, i_, kk, frames=frames):
            r = frames[kk] if 0 <= kk < len(frames) else None
            return None if r is None or "r" not in r or r["repeat"] else (r["u"], r["v"], r["r"])
        compare(p, cam, S.SOCCER.radius_m, tu, f"realism {label} {var or 'plain'} k{k}")
