"""Tracking speed: wall time of tracking a 720p 240 fps clip with several throws against the
decode-only time of the same file, in one run (target ratio <= 1.5). Also checks memory stays flat
(clips are streamed frame by frame).

Run: python tests/benchmarks/bench_track.py
     python tests/benchmarks/bench_track.py --profile   (one tracking pass under cProfile instead: where
     the time goes, the 15 largest own-time items; profiler overhead included, so no ratio is printed)
"""
import math
import resource
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from balltraj.camera.model import look_at_camera  # noqa: E402
from balltraj.physics.air import air_conditions  # noqa: E402
from balltraj.physics.balls import get_ball  # noqa: E402
from balltraj.physics.flight import FlightModel, FlightParameters, fly, launch_state  # noqa: E402
from balltraj.vision.clip import decode_only  # noqa: E402
from balltraj.vision.pipeline import track_clip  # noqa: E402
from balltraj.vision.render import Scene, render_clip  # noqa: E402


REPEATS = 5


def main():
    cam = look_at_camera("side", [9.0, -13.0, 1.5], [9.0, 0.0, 1.4], 1100, (1280, 720))
    model = FlightModel.for_ball(get_ball("baseball"), air_conditions())
    flights = []
    rng = np.random.default_rng(0)
    for k, start in enumerate([0.1, 0.9, 1.7, 2.5]):
        s0 = launch_state([0, rng.uniform(-0.3, 0.3), 1.8], rng.uniform(32, 40), math.radians(-1), 0.0)
        spin = rng.normal(0, 150, 3)
        tr = fly(model, 0.0, s0, FlightParameters.make(1, spin=spin), stop_x=19, ground_z=None)
        t_end = float(tr.first_crossing(0, 18.5)[0][0])
        flights.append((start, start + t_end, lambda ts, tr=tr, s=start, e=t_end: tr.positions(np.clip(ts - s, 0, e))[0]))
    with tempfile.TemporaryDirectory() as d:
        clip = Path(d) / "throws.mp4"
        render_clip(Scene(cam, duration_s=3.3, flights=flights, ball_radius_m=model.radius_m, seed=3), clip)
        if "--profile" in sys.argv:
            _profile(clip, cam, model.radius_m)
            return
        rss0 = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss
        t_dec, t_trk, c_dec, c_trk = [], [], [], []
        for _ in range(REPEATS):  # interleaved repeats; the best of each (timing noise here is ~10 %)
            c0 = time.process_time()
            n, t = decode_only(clip)
            c_dec.append(time.process_time() - c0)
            t_dec.append(t)
            t0, c0 = time.perf_counter(), time.process_time()
            # tracking alone: the edge-fit radius pass that follows with a camera (``refine_radius``) has
            # its own cost figures in bench_ball_size.py
            res = track_clip(clip, cam, model.radius_m, refine_radius=False)
            t_trk.append(time.perf_counter() - t0)
            c_trk.append(time.process_time() - c0)
        t_dec, t_trk, c_dec, c_trk = min(t_dec), min(t_trk), min(c_dec), min(c_trk)
        rss1 = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss
    print(f"clip: 1280x720, {n} frames at 240 fps (mp4v), 4 throws")
    print(f"decode only (BGR, as a plain reader gets it; best of {REPEATS}): {t_dec:.2f} s ({n / t_dec:.0f} frames/s)")
    print(f"tracking (luma decode + detect + link; best of {REPEATS}): {t_trk:.2f} s ({n / t_trk:.0f} frames/s), "
          f"{len(res.flights)} flights")
    print(f"ratio tracking / decode-only: {t_trk / t_dec:.2f}   peak RSS grew by {(rss1 - rss0) / 1024:.0f} MB")
    # the same in processor time (all threads): less sensitive to other work on a shared machine, but it
    # counts the decoding thread's and the tracking thread's work together, so it is no wall-time figure
    print(f"processor time tracking / decode-only: {c_trk / c_dec:.2f} ({c_trk:.2f} s / {c_dec:.2f} s)")


def _profile(clip, cam, radius_m):
    """Decode-only and one tracking pass under cProfile; the main thread's largest own-time items."""
    import cProfile
    import pstats
    for label, call in (("decode only", lambda: decode_only(clip)),
                        ("tracking", lambda: track_clip(clip, cam, radius_m, refine_radius=False))):
        prof = cProfile.Profile()
        prof.enable()
        call()
        prof.disable()
        print(f"--- {label} (main thread; the decoding thread's own work shows as waits on its queue)")
        pstats.Stats(prof).sort_stats("tottime").print_stats(15)


if __name__ == "__main__":
    main()
