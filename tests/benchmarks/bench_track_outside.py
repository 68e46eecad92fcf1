"""Tracking on phone-like clips from a second, separately written renderer (tests/scene_outside.py).

The renderer was written without reading the tracker or the first realism renderer, as a check against
tuning to either. Truth comes from the renderer's own flight integrator and camera: the ball's image
centre in every container frame (mean over the exposure, through hand-held motion, rolling shutter and
lens distortion), its radius, whether it is wholly in view and not hidden, and whether the frame repeats
the previous exposure.

Per clip: the ball's contrast against its surroundings in the decoded luma; recall (the share of
distinct exposures with the ball in flight and wholly in view that carry a flight observation within
max(2 px, 0.5 r) of the true centre); precision (the share of flight observations that are such a
match; one on a repeated frame counts as wrong); flights found against flights expected (one per
airborne segment between kicks and bounces seen in at least 6 exposures); flights that are mostly not
on the ball; tracking over decode-only wall time of the same file (decode best of 2, same run); in
words what goes wrong (no flight, flights on something else, segments missed, a flight running over a
kick or bounce, a segment split into several flights); and, for fixed cameras, the same with the
renderer's camera given as a camera file.

Each shot is rendered twice (seeds 0 and 1: other noise, textures and shake), since single clips scatter.

Run: python tests/benchmarks/bench_track_outside.py [--no-publish] [--preview DIR] [--seeds 0,1,2] [--only TEXT]
(--seeds renders other sets of the same shots, --only runs the shots whose name contains TEXT; neither publishes)
"""
import sys
import tempfile
import time
from dataclasses import replace
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve()
sys.path.insert(0, str(HERE.parents[2]))
sys.path.insert(0, str(HERE.parents[1]))

from outside_camera import camera_file  # noqa: E402
from scene_outside import (BASEBALL, FOOTBALL, SOFTBALL, TENNIS, Lens, Person, Shot, Style,  # noqa: E402
                           fly, render_shot)

from balltraj.vision.clip import decode_only  # noqa: E402
from balltraj.vision.pipeline import track_clip  # noqa: E402

PITCH_LINES = (((-30, 20), (30, 20)), ((0, 8), (0, 40)), ((-30, 35), (30, 35)))
COURT_LINES = (((-12, 4), (12, 4)), ((-12, 8.5), (12, 8.5)), ((0, 4), (0, 8.5)), ((-6.4, 4), (-6.4, 8.5)),
               ((6.4, 4), (6.4, 8.5)))


def kick_times(ball, p0, v0, t0, t1, kicks):
    """Times [s] at which the flight's kicks happen (for the kicking leg)."""
    tt, _, seg = fly(ball, p0, v0, t0, t1, kicks)
    return tuple(tt[1:][np.diff(seg) > 0])


def shots():
    juggle_kicks = ((0.32, (-0.12, 0.05, 3.7)), (0.32, (0.15, -0.05, 3.9)), (0.32, (-0.1, 0.0, 3.6)))
    p0, v0 = (0.05, -0.25, 0.32), (0.08, 0.0, 3.8)
    juggler = Person(-0.38, 0.45, 0, 0, 1.78, (0.1, 0.25, 0.6), (0.05, 0.05, 0.07), cadence=0.8, stride=0.0,
                     arm_swing=0.4, kicks=(0.1,) + kick_times(FOOTBALL, p0, v0, 0.15, 3.0, juggle_kicks))
    thrower = Person(-3.5, 8.0, 0, 0, shirt=(0.05, 0.4, 0.1), cadence=0, stride=0.1, throw_at=0.75)
    pitcher = Person(-4.8, 8.0, 0, 0, shirt=(0.2, 0.2, 0.7), cadence=0, stride=0.1, throw_at=0.4)
    out = [
        ("football juggled, fixed camera, dark room, 30 fps",
         Shot(Lens((1280, 720), 1100, (0, -2.9, 0.6), pitch=10, k1=-0.04), FOOTBALL, p0, v0, 0.15, 2.6, 30, 30,
              shutter=1 / 100, readout=0.028, kicks=juggle_kicks,
              style=Style("floor", "dark", 4.0, sun=(0.3, -0.5, 0.8)), people=(juggler,), flicker=0.03,
              read_noise=0.012, bitrate=3_000_000, seed=1)),
        ("kick across a field, 320x240, 30 fps stored at 24 (drops), 4 px ball",
         Shot(Lens((320, 240), 300, (0, -2, 1.6), pitch=3, k1=-0.08), FOOTBALL, (-7.5, 13.5, 0.11),
              (10.0, 1.5, 7.5), 0.2, 2.0, 30, 24, shutter=1 / 500, readout=0.03,
              style=Style("grass", "trees", 40.0, PITCH_LINES), shake_px=0.25,
              people=(Person(3, 22, -1.3, 0, shirt=(0.7, 0.6, 0.05)), Person(-4, 25, 1.6, 0, shirt=(0.1, 0.1, 0.6)),
                      Person(-9, 13, 0, 0, cadence=0, stride=0, kicks=(0.2,), shirt=(0.6, 0.05, 0.05))),
              bitrate=250_000, seed=2)),
        ("throw past people walking, 640x360, 25 fps stored at 29.97 (repeats), scene cut, hand-held",
         Shot(Lens((640, 360), 560, (0, 0, 1.55), pitch=2, k1=-0.05), SOFTBALL, thrower.hand(0.75), (9.0, 0.5, 5.0),
              0.75, 2.2, 25, 30000 / 1001, shutter=1 / 400, readout=0.03, style=Style("grass", "brick", 16.0),
              holder=0, people=(thrower,
                      Person(4, 5.5, -1.5, 0, shirt=(0.75, 0.2, 0.05), cadence=1.0, arm_swing=0.7),
                      Person(-6, 10, 1.7, 0, shirt=(0.8, 0.8, 0.75), cadence=1.0),
                      Person(7, 4.0, -3.2, 0, shirt=(0.6, 0.05, 0.5), cadence=1.5, stride=0.7, arm_swing=1.0)),
              shake_px=1.2, roll_deg=0.15, cut_at=0.4, cut_style=Style("court", "fence", 12.0, COURT_LINES),
              cut_people=(Person(-2, 6, 2.0, 0, shirt=(0.9, 0.9, 0.1)),), bitrate=800_000, seed=3)),
        ("high lob against the sky, hand-held pan, 30 fps",
         Shot(Lens((1280, 720), 1000, (0, 0, 1.5), pitch=14, k1=-0.06), FOOTBALL, (-11.0, 22.0, 0.11),
              (9.5, -1.0, 13.0), 0.3, 2.9, 30, 30, shutter=1 / 1000, readout=0.03,
              style=Style("grass", "trees", 60.0, PITCH_LINES), shake_px=1.5, follow=0.8, follow_lag=0.3,
              roll_deg=0.3, people=(Person(-11.4, 22.0, 0, 0, cadence=0, stride=0, kicks=(0.3,)),),
              bitrate=3_000_000, seed=4)),
        ("baseball pitch from the side, 240 fps, 5 px ball, strong lift",
         Shot(Lens((1280, 720), 1000, (0, -14.6, 1.2), k1=-0.03), BASEBALL, (-9.0, 0.0, 1.75), (38.0, 0.0, -0.6),
              0.0, 0.5, 240, 240, shutter=1 / 2000, readout=0.004,
              style=Style("grass", "fence", 14.0), people=(Person(7.5, 1.0, 0, 0, 1.85, (0.5, 0.5, 0.55),
                                                                   cadence=0.4, stride=0.05),),
              shake_px=0.3, bitrate=16_000_000, seed=5)),
        ("tennis ball bounce on a court, 60 fps",
         Shot(Lens((960, 540), 800, (0, -0.2, 1.1), pitch=-4, k1=-0.05), TENNIS, (-4.5, 6.0, 1.1), (13.0, 0.4, 1.0),
              0.1, 0.85, 60, 60, shutter=1 / 500, readout=0.02,
              style=Style("court", "fence", 11.0, COURT_LINES),
              people=(Person(3.5, 9.5, -1.0, 0, shirt=(0.9, 0.9, 0.9), cadence=1.2, arm_swing=0.9),),
              shake_px=0.2, bitrate=2_500_000, seed=6)),
        ("netting in front of the lens, softball throw, 30 fps",
         Shot(Lens((1280, 720), 1000, (0, -0.5, 1.4), pitch=3, k1=-0.05), SOFTBALL, pitcher.hand(0.4),
              (13.0, -0.5, 4.0), 0.4, 1.6, 30, 30, shutter=1 / 500, readout=0.03,
              style=Style("grass", "brick", 20.0), netting=True, shake_px=0.4, holder=0, people=(pitcher,),
              bitrate=3_000_000, seed=7)),
        ("23.98 fps stored at 29.97 (3:2-like repeats), dim hall, long streaks",
         Shot(Lens((960, 540), 800, (0, -1.0, 1.3), pitch=4, k1=-0.05), FOOTBALL, (-5.0, 7.0, 0.11),
              (15.0, 0.5, 5.5), 0.15, 1.3, 24000 / 1001, 30000 / 1001, shutter=1 / 40, readout=0.03,
              style=Style("floor", "dark", 12.0, sun=(0.0, -0.3, 1.0), brightness=1.5), flicker=0.05,
              people=(Person(-5.4, 7.0, 0, 0, cadence=0, stride=0, kicks=(0.15,), shirt=(0.7, 0.3, 0.05)),
                      Person(2.0, 9.0, 1.2, 0, shirt=(0.8, 0.8, 0.8))),
              read_noise=0.015, bitrate=1_500_000, seed=8)),
        ("12 fps shown unevenly at 29.97 (repeats 1-4 frames apart), kick-up on a field, 640x360",
         Shot(Lens((640, 360), 520, (0, -1.0, 1.2), pitch=8, k1=-0.06), FOOTBALL, (-3.0, 9.0, 0.11), (5.0, 0.3, 9.0),
              0.2, 2.2, 12, 30000 / 1001, shutter=1 / 250, readout=0.03, uneven=0.35,
              style=Style("grass", "trees", 35.0, PITCH_LINES), shake_px=0.6,
              people=(Person(-3.3, 9.0, 0, 0, cadence=0, stride=0, kicks=(0.2,), shirt=(0.1, 0.5, 0.5)),
                      Person(2.0, 12.0, -1.4, 0, shirt=(0.7, 0.7, 0.2))), bitrate=900_000, seed=9)),
    ]
    return out


def expected_segments(truth, min_exposures=6):
    seen = {}
    for r in truth:
        if r["visible"] and not r["repeat"]:
            seen.setdefault(r["segment"], set()).add(r["exposure"])
    return {s for s, e in seen.items() if len(e) >= min_exposures}


def evaluate(truth, res, expected):
    """Recall, precision, flights mostly not on the ball, and per flight the expected segments it covers."""
    hit, n_obs, n_good, bad, covers = set(), 0, 0, 0, []
    for f in res.flights:
        good_f, segs = 0, {}
        for k, (u, v) in zip(f.frame, f.uv):
            # the row of the stored frame the observation was measured in (matched by time, an exposure
            # re-timed after a repeat met the repeat's row and counted as wrong)
            row = truth[int(k)]
            n_obs += 1
            near = row["visible"] and np.hypot(u - row["u"], v - row["v"]) <= max(2.0, 0.5 * row["r"])
            if near and not row["repeat"]:
                n_good += 1
                good_f += 1
                hit.add(row["exposure"])
                segs[row["segment"]] = segs.get(row["segment"], 0) + 1
        if good_f < 0.5 * len(f.t):
            bad += 1
        else:
            covers.append({s for s, n in segs.items() if n >= 3} & expected)  # 3 good observations cover one
    visible = {r["exposure"] for r in truth if r["visible"]}
    return len(hit & visible) / max(1, len(visible)), n_good / max(1, n_obs), bad, covers, len(visible), n_obs


def verdict(n_flights, expected, bad, covers, precision):
    """What goes wrong, in words: no flight, flights on something else, segments missed, merged or split."""
    if n_flights == 0:
        return "no flight"
    words = [f"{bad} on something else"] if bad else []
    if not bad and precision < 0.9:
        words.append(f"{100 * (1 - precision):.0f} % of the observations off the flying ball")
    missed = len(expected - set().union(*covers)) if covers else len(expected)
    if missed:
        words.append(f"{missed} of {len(expected)} segments missed")
    merged = sum(len(c) > 1 for c in covers)
    if merged:
        words.append(f"{merged} flight(s) run over a kick or bounce")
    split = max((sum(s in c for c in covers) for s in expected), default=0)
    if split > 1:
        words.append(f"a segment split in {split}")
    return ", ".join(words) or "ok"


def contrast(path, truth):
    """Median over visible exposures of the ball's grey-level contrast in the decoded luma: the mean inside 0.7 r
    minus the mean of the ring from 1.5 r to 2.5 r (negative: a ball darker than what is around it)."""
    import av

    vals = []
    with av.open(str(path)) as c:
        for row, f in zip(truth, c.decode(video=0)):
            if not row["visible"] or row["repeat"]:
                continue
            y = f.to_ndarray(format="gray").astype(float)
            x0, y0, r = row["u"], row["v"], max(row["r"], 1.0)
            sl = tuple(slice(max(int(c - 3 * r), 0), min(int(c + 3 * r) + 1, n)) for c, n in zip((y0, x0), y.shape))
            vv, uu = np.mgrid[sl]
            d = np.hypot(uu - x0, vv - y0) / r
            patch = y[sl]
            if (d <= 0.7).any() and ((d >= 1.5) & (d <= 2.5)).any():
                vals.append(patch[d <= 0.7].mean() - patch[(d >= 1.5) & (d <= 2.5)].mean())
    return float(np.median(vals)) if vals else float("nan")


def preview(shot, truth, path, out_png):
    import cv2
    cap = cv2.VideoCapture(str(path))
    vis = [i for i, r in enumerate(truth) if r["visible"]]
    want = vis[len(vis) // 2] if vis else len(truth) // 2
    for i in range(want + 1):
        ok, img = cap.read()
    r = truth[want]
    if r.get("u") is not None:
        cv2.circle(img, (int(round(r["u"])), int(round(r["v"]))), int(r["r"]) + 4, (0, 0, 255), 1)
    cv2.imwrite(str(out_png), img)


def run_clip(name, shot, path, prev=None):
    """Render one clip, track it (without and, for a fixed camera, with the camera file) and score it."""
    truth = render_shot(shot, path)
    if prev:
        preview(shot, truth, path, Path(prev) / f"{path.stem}.png")
    expected = expected_segments(truth)
    dec = min(decode_only(path)[1] for _ in range(2))
    t0 = time.perf_counter()
    res = track_clip(path, None, shot.ball.radius_m, extend="--no-extend" not in sys.argv)
    ratio = (time.perf_counter() - t0) / dec
    rec, prec, bad, covers, n_vis, n_obs = evaluate(truth, res, expected)
    out = dict(rec=rec, prec=prec, bad=bad, n=len(res.flights), expect=len(expected), ratio=ratio, n_vis=n_vis,
               n_obs=n_obs, what=verdict(len(res.flights), expected, bad, covers, prec),
               contrast=contrast(path, truth), diam=[2 * r["r"] for r in truth if r["visible"]], cam=None)
    if not shot.follow and shot.shake_px <= 0.5:  # a fixed camera: its calibration file applies
        res_c = track_clip(path, camera_file(shot), shot.ball.radius_m, extend="--no-extend" not in sys.argv)
        rc, pc, bc, _, _, _ = evaluate(truth, res_c, expected)
        out["cam"] = f"{100 * rc:.0f} % / {100 * pc:.0f} % / {len(res_c.flights)} ({bc})"
    return out


def main():
    seeds = [int(k) for k in sys.argv[sys.argv.index("--seeds") + 1].split(",")] if "--seeds" in sys.argv else [0, 1]
    prev = sys.argv[sys.argv.index("--preview") + 1] if "--preview" in sys.argv else None
    only = sys.argv[sys.argv.index("--only") + 1] if "--only" in sys.argv else None
    rows, tot, t_start = [], np.zeros(4), time.perf_counter()
    with tempfile.TemporaryDirectory() as d:
        for i, (name, shot) in enumerate(shots()):
            if only is not None and only not in name:
                continue
            runs = [run_clip(name, replace(shot, seed=shot.seed + 100 * k), Path(d) / f"outside{i}_{k}.mp4", prev)
                    for k in seeds]
            for r in runs:
                tot += [r["rec"] * r["n_vis"], r["n_vis"], r["prec"] * r["n_obs"], r["n_obs"]]

            def each(key, fmt="{}", scale=1, runs=runs):
                return " · ".join(fmt.format(scale * r[key]) for r in runs)

            diam = [x for r in runs for x in r["diam"]]
            whats = [r["what"] for r in runs]
            what = whats[0] if len(set(whats)) == 1 else " · ".join(f"{k + 1}: {w}" for k, w in enumerate(whats))
            cam = each("cam") if runs[0]["cam"] else "—"
            rows.append(f"| {name} | {shot.lens.size[0]}x{shot.lens.size[1]} | {min(diam):.1f}–{max(diam):.1f} | "
                        f"{each('contrast', '{:+.0f}')} | {each('rec', '{:.0f} %', 100)} | "
                        f"{each('prec', '{:.0f} %', 100)} | {each('n')} ({runs[0]['expect']}) | {each('bad')} | "
                        f"{np.median([r['ratio'] for r in runs]):.1f} | {what} | {cam} |")
            print(rows[-1], flush=True)
    lines = [f"Tracking on clips from the second renderer (tests/scene_outside.py), each shot rendered {len(seeds)} "
             "times with other noise, textures and shake (values per rendering, separated by ·), no camera file, "
             "the ball's size given; match within max(2 px, 0.5 radius)", "",
             "| clip | size | ball diameter (px) | ball contrast (grey levels) | recall | precision | flights found "
             "(expected) | flights not on the ball | tracking / decode time (median) | what goes wrong | with the "
             "camera file: recall / precision / flights (not on the ball) |", "|---" * 11 + "|"]
    lines += rows + [f"| **all clips and renderings** | | | | **{100 * tot[0] / tot[1]:.0f} %** | "
                     f"**{100 * tot[2] / max(tot[3], 1):.0f} %** | | | | | |"]
    print(f"total wall time {time.perf_counter() - t_start:.0f} s", file=sys.stderr)
    if "--no-publish" in sys.argv or "--seeds" in sys.argv or only is not None:
        print("\n".join(lines))
    else:
        from _docs import publish
        publish("track-outside", lines)


if __name__ == "__main__":
    main()
