"""Where is the ball lost? One clip of a tracking benchmark rendered, tracked and compared with its truth
exposure by exposure: did the detector give a candidate at the ball (within max(2 px, 0.5 r)), how far
off was the nearest one, and did a flight carry it.

Run: PYTHONPATH=$PWD python tools/diagnose_track.py outside 0 [--seed 0] [--every 1]
     PYTHONPATH=$PWD python tools/diagnose_track.py realism 3
     PYTHONPATH=$PWD python tools/diagnose_track.py juggle
"""

from __future__ import annotations

import sys
import tempfile
from dataclasses import replace
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT / "tests"))
sys.path.insert(0, str(ROOT / "tests" / "benchmarks"))


def _shot(kind: str, i: int, seed: int):
    if kind == "outside":
        import bench_track_outside as b
        name, shot = b.shots()[i]
        shot = replace(shot, seed=shot.seed + 100 * seed)
        from scene_outside import render_shot
        return name, shot, render_shot, shot.ball.radius_m
    if kind == "juggle":  # the clip of tests/vision/test_track_outside.py
        sys.path.insert(0, str(ROOT / "tests" / "vision"))
        from scene_outside import FOOTBALL, render_shot
        from test_track_outside import juggle_shot
        return "juggle (test clip)", juggle_shot(), render_shot, FOOTBALL.radius_m
    import bench_track_realism as b
    name, shot, _ = b.shots()[i]
    from scene_realism import render_shot
    return name, shot, render_shot, shot.ball.radius_m


class _Usage(Exception):
    pass


def _arguments(argv: list[str]):
    """(kind, clip index, seed, every) from the command line; _Usage with a one-line reason if bad."""
    def number(flag, default):
        if flag not in argv:
            return default
        j = argv.index(flag) + 1
        if j >= len(argv) or not argv[j].isdigit():
            raise _Usage(f"{flag} needs a whole number")
        return int(argv[j])

    if not argv or argv[0] not in ("outside", "realism", "juggle"):
        raise _Usage("the first argument must be outside, realism or juggle")
    kind = argv[0]
    if kind == "juggle":
        i = 0
    else:
        if len(argv) < 2 or not argv[1].isdigit():
            raise _Usage(f"{kind} needs a clip number (0, 1, ...)")
        i = int(argv[1])
        if kind == "outside":
            import bench_track_outside as b
            n = len(b.shots())
        else:
            import bench_track_realism as b
            n = len(b.shots())
        if i >= n:
            raise _Usage(f"{kind} has clips 0 to {n - 1}, not {i}")
    return kind, i, number("--seed", 0), max(1, number("--every", 1))


def main(argv: list[str]) -> int:
    from balltraj.vision.pipeline import track_clip

    kind, i, seed, every = _arguments(argv)
    name, shot, render, radius_m = _shot(kind, i, seed)
    with tempfile.TemporaryDirectory() as d:
        path = Path(d) / "clip.mp4"
        truth = render(shot, path)
        seen: dict[int, list] = {}
        res = track_clip(path, None, radius_m, on_exposure=lambda k, t, c: seen.__setitem__(k, c))
    print(f"{name}: {len(res.flights)} flight(s); warnings: {res.warnings}")
    in_flight = {}
    for f in res.flights:
        for k, (u, v) in zip(f.frame, f.uv):
            in_flight[int(k)] = (f.flight, float(u), float(v))
    n_vis = n_det = n_hit = 0
    for k, row in enumerate(truth):
        vis = row.get("visible", "u" in row) and row.get("u") is not None
        if not vis or row.get("repeat"):
            continue
        n_vis += 1
        tol = max(2.0, 0.5 * row["r"])
        cands = seen.get(k, [])
        d = [float(np.hypot(c.u - row["u"], c.v - row["v"])) for c in cands]
        j = int(np.argmin(d)) if d else -1
        det = j >= 0 and d[j] <= tol
        n_det += det
        fl = in_flight.get(k)
        hit = fl is not None and np.hypot(fl[1] - row["u"], fl[2] - row["v"]) <= tol
        n_hit += hit
        if k % every == 0:
            near = (f"nearest {d[j]:6.1f} px ({cands[j].u - row['u']:+5.1f},{cands[j].v - row['v']:+5.1f}) r={cands[j].radius_px:5.1f} s={cands[j].streak_px:5.1f} "
                    f"c={cands[j].contrast:5.1f}") if j >= 0 else "no candidate"
            print(f"{k:4d} t={row['t']:.3f} truth ({row['u']:7.1f},{row['v']:6.1f}) r={row['r']:5.1f} "
                  f"n={len(cands):2d} {near} {'DET' if det else '   '} {'HIT' if hit else ''}"
                  f"{'' if fl is None else f' flight {fl[0]}'}")
    n_obs = len(in_flight)
    print(f"visible exposures {n_vis}: a candidate at the ball {n_det} ({100 * n_det / max(n_vis, 1):.0f} %), "
          f"in a flight {n_hit} ({100 * n_hit / max(n_vis, 1):.0f} %); flight observations {n_obs}, on the ball "
          f"{100 * n_hit / max(n_obs, 1):.0f} %; ends: {[f.end_reason for f in res.flights]}")
    return 0


if __name__ == "__main__":
    try:
        sys.exit(main(sys.argv[1:]))
    except _Usage as e:
        print(f"diagnose_track: {e}", file=sys.stderr)
        sys.exit(2)
