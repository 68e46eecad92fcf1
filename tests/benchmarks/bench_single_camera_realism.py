"""One camera, penalty kicks rendered by tests/scene_realism.py (a renderer written independently of
balltraj: its own solve_ivp flight with constant C_D 0.25 and constant C_L 0.15, its own pinhole, a
shaded seamed ball, motion blur, sensor noise, H.264), analysed end to end by ``pipeline.analyze_clip``.

The kicks leave the penalty mark of the ``soccer-goal`` template (x toward the goal, mark at x = -11 m);
scene_realism draws no ball before the kick, so no ball at rest is seen. Each clip is analysed twice:
with a camera file that records the template (depth anchor: the template's launch zone) and with one
that does not (apparent size only). Deflection truth: scene_realism's path minus its no-spin path from
the true state at the record's launch time, at the goal line x = 0.

Run: PYTHONPATH=$PWD python tests/benchmarks/bench_single_camera.py realism [N] [--detector-centres] [--no-publish]
        (about 20 s a clip; --detector-centres: the flights' pixel centres from the detector, not the edge fit
        (``ball_size.EDGE_CENTRES_FOR_FLIGHT`` off; --edge-centres: on), whatever its default; --capture-fps: the clip's true rate
        given, so that frame k is at k / 240 s whatever the tracker takes for a repeated frame)
     PYTHONPATH=$PWD python tests/benchmarks/bench_single_camera.py detector-radius [N]
        (the detector's apparent-radius errors on N penalty kicks per set-up, written to
        tests/benchmarks/detector_radius_errors.json; bench_single_camera.py draws its "detector-sized"
        radius errors from that file)
"""
import json
import math
import os
import sys
import tempfile
from dataclasses import replace
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parent))
sys.path.insert(0, str(Path(__file__).resolve().parents[1]))
from _docs import publish  # noqa: E402
import scene_realism as S  # noqa: E402

from balltraj.camera.calibrate import TEMPLATES  # noqa: E402
from balltraj.camera.model import look_at_camera  # noqa: E402
from balltraj.errors import BallTrajError  # noqa: E402
from balltraj.physics.air import air_conditions  # noqa: E402
from balltraj.physics.balls import get_ball  # noqa: E402
from balltraj.camera.anchors import apply_anchor, choose_anchor  # noqa: E402
from balltraj.formats import CameraObservations, Observations  # noqa: E402
from balltraj.pipeline import ClipInput, FitSettings, analyze_clip, fit_observations  # noqa: E402
from balltraj.pipeline_depth import template_zone  # noqa: E402
from bench_single_camera import stat_cells  # noqa: E402
from balltraj.vision.pipeline import track_clip  # noqa: E402

RADIUS_ERRORS = Path(__file__).resolve().parent / "detector_radius_errors.json"
REFINED_ERRORS = Path(__file__).resolve().parent / "refined_radius_errors.json"

MARK = np.array([-11.0, 0.0, S.SOCCER.radius_m])
START_S = 0.1
FPS = 240.0
SIZE = (960, 540)
SETUPS = {  # centre, target, focal [px]; world frame of the soccer-goal template
    "side": ((-5.5, -14.0, 1.5), (-5.5, 0.0, 1.2), 700.0),
    "behind": ((-18.0, 0.8, 1.7), (0.0, 0.0, 1.0), 800.0),
    "high behind": ((-21.0, 1.0, 5.0), (0.0, 0.0, 0.8), 800.0),
}


def _velocity(pos, t, h=1e-4):
    return (pos([t + h])[0] - pos([t - h])[0]) / (2 * h)


def _at_goal_line(pos, t_from, t_to):
    tt = np.linspace(t_from, t_to, 4001)
    x = pos(tt)[:, 0]
    i = int(np.argmax(x >= 0.0))
    lo, hi = tt[max(i - 1, 0)], tt[i]
    for _ in range(50):
        mid = 0.5 * (lo + hi)
        lo, hi = (mid, hi) if pos([mid])[0, 0] < 0.0 else (lo, mid)
    return pos([0.5 * (lo + hi)])[0]


def truth(p0, v0, axis, t_launch):
    """(speed [m/s], sideways and up-down deflection at x = 0 [m]) at clip time ``t_launch``."""
    f, _ = S.fly(S.SOCCER, p0, v0, axis, t_end=2.0, bounce=False)
    tau = max(t_launch - START_S, 1e-4)  # a launch placed on the zone's plane may lie a hair before the kick
    p, v = f([tau])[0], _velocity(f, tau)
    g, _ = S.fly(S.SOCCER, p, v, (0.0, 0.0, 0.0), t_end=2.0, bounce=False)
    a, b = _at_goal_line(f, tau, 1.5), _at_goal_line(g, 0.0, 1.5)
    return float(np.linalg.norm(v)), float(a[1] - b[1]), float(a[2] - b[2])


def _metrics(rec, v0, axis):
    sp, dh, dv = truth(MARK, v0, axis, rec["launch"]["t_s"])
    u = rec["uncertainty"]
    return {"speed_err": abs(rec["launch"]["speed_mps"] / sp - 1) * 100,
            "defl_err": math.hypot(rec["deflection"]["horizontal_m"] - dh, rec["deflection"]["vertical_m"] - dv),
            "defl": math.hypot(dh, dv),
            "z": [(rec["launch"]["speed_mps"] - sp) / u["launch"]["speed_mps"],
                  (rec["deflection"]["horizontal_m"] - dh) / u["deflection"]["horizontal_m"],
                  (rec["deflection"]["vertical_m"] - dv) / u["deflection"]["vertical_m"]]}


def _true_pixel_fits(e, frames, cam, settings, v0, axis):
    """The renderer's own centres and radii of the same frames (no detector): the depth machinery alone."""
    rows = [r for r in frames if "u" in r and not r["repeat"] and r["t"] > START_S + 0.5 / FPS]
    rows = [r for r in rows if r["t"] - START_S < 0.55]  # up to about the goal line
    t = np.array([r["t"] for r in rows])
    uv = np.array([[r["u"], r["v"]] for r in rows])
    rad = np.array([r["r"] for r in rows])
    zone = template_zone(cam, settings.ball.radius_m, t[:10], uv[:10], rad[:10])[0]
    for mode, anchor in (("true zone", choose_anchor(zone=zone, radii_observed=True)),
                         ("true none", choose_anchor(radii_observed=True))):
        obs = Observations("renderer", t, [cam.name] * len(t), uv, rad, np.ones(len(t)), None)
        try:
            rec = fit_observations(CameraObservations(obs, [cam]), apply_anchor(settings, anchor)).record
        except BallTrajError as exc:
            e[mode].append(None)
            e["why"].append(f"{mode}: {exc.one_line()[:120]}")
            continue
        e[mode].append(_metrics(rec, v0, axis))


def run(n):
    rng = np.random.default_rng(4711)
    ball, air = get_ball("soccer"), air_conditions()
    settings = FitSettings(ball=ball, air=air, target_x_m=0.0)
    frame = TEMPLATES["soccer-goal"]["frame"]
    tmp = Path(tempfile.mkdtemp(prefix="bench_single_realism_"))
    rows = {}
    for k in range(n):
        speed = rng.uniform(22, 28)
        aim_y, el = rng.uniform(-2.8, 2.8), math.radians(rng.uniform(8, 13))  # no bounce before the goal line
        az = math.atan2(aim_y, 11.0)
        v0 = speed * np.array([math.cos(el) * math.cos(az), math.cos(el) * math.sin(az), math.sin(el)])
        axis = np.array([rng.uniform(-0.2, 0.2), rng.uniform(-0.3, 0.3), rng.choice([-1.0, 1.0])])
        axis /= np.linalg.norm(axis)
        for j, (label, (c, tg, f)) in enumerate(SETUPS.items()):
            e = rows.setdefault(label, {"zone": [], "none": [], "true zone": [], "true none": [], "anchor": [],
                                        "why": []})
            shot = S.Shot(S.Cam(c, tg, f, SIZE), S.SOCCER, [(START_S, MARK, v0, axis)], duration_s=START_S + 0.62,
                          capture_fps=FPS, exposure_s=1 / 1000, seed=100 * k + j)
            clip = tmp / f"pen{k}_{j}.mp4"
            frames = S.render_shot(shot, clip)
            cam = look_at_camera(label, c, tg, f, SIZE)
            _true_pixel_fits(e, frames, replace(cam, template="soccer-goal", world_frame=frame), settings, v0, axis)
            for mode, camera in (("zone", replace(cam, template="soccer-goal", world_frame=frame)), ("none", cam)):
                try:
                    res = analyze_clip(ClipInput(clip, [camera], capture_fps=FPS if "--capture-fps" in sys.argv
                                                 else None), settings)
                except BallTrajError as exc:
                    e[mode].append(None)
                    e["why"].append(f"{mode}: {exc.one_line()[:120]}")
                    continue
                rec = max(res.records, key=lambda r: r["clip"]["frames"])
                if mode == "zone":
                    e["anchor"].append(rec["depth_anchor"]["name"])
                e[mode].append(_metrics(rec, v0, axis))
            clip.unlink()
        print(f"penalty {k + 1}/{n} done", flush=True)
    return rows


def _radius_row(pairs):
    """scale (median r / r_true - 1), per-frame scatter (1.4826 MAD of r - (1 + scale) r_true) [px] and, with
    sigmas, the share of |r - r_true| <= sigma, of (r_true, r[, sigma]) pairs."""
    a = np.array(pairs, float)
    rt, rd = a[:, 0], a[:, 1]
    scale = float(np.median(rd / rt) - 1.0)
    resid = rd - (1.0 + scale) * rt
    row = {"scale": scale, "noise_px": float(1.4826 * np.median(np.abs(resid - np.median(resid)))),
           "true_radius_px_median": float(np.median(rt))}
    if a.shape[1] > 2:
        row["within_one_sigma"] = float(np.mean(np.abs(rd - rt) <= a[:, 2]))
    return row


def _write(path, doc):
    tmp_path = path.with_suffix(".tmp")
    tmp_path.write_text(json.dumps(doc, indent=1) + "\n")
    os.replace(tmp_path, path)


def radius_shots(n, variants):
    """The seeded penalty kicks of the radius measurement: (kick, set-up index, set-up name, variant, Shot,
    balltraj camera) for ``n`` kicks, each filmed by every set-up, the variants taken in turn."""
    rng = np.random.default_rng(9001)
    for k in range(n):
        speed = rng.uniform(22, 28)
        aim_y, el = rng.uniform(-2.8, 2.8), math.radians(rng.uniform(8, 13))
        az = math.atan2(aim_y, 11.0)
        v0 = speed * np.array([math.cos(el) * math.cos(az), math.cos(el) * math.sin(az), math.sin(el)])
        axis = np.array([rng.uniform(-0.2, 0.2), rng.uniform(-0.3, 0.3), rng.choice([-1.0, 1.0])])
        axis /= np.linalg.norm(axis)
        var = variants[k % len(variants)]
        for j, (label, (c, tg, f)) in enumerate(SETUPS.items()):
            shot = S.Shot(S.Cam(c, tg, f, SIZE), S.SOCCER, [(START_S, MARK, v0, axis)], duration_s=START_S + 0.62,
                          capture_fps=FPS, seed=500 + 10 * k + j, **{"exposure_s": 1 / 1000, **var})
            yield k, j, label, var, shot, look_at_camera(label, c, tg, f, SIZE)


def measure_radius_errors(n):
    """The apparent-radius errors on balls balltraj did not draw: per tracked clip of scene_realism
    (its own shading, seam, blur, noise and H.264; truth radius f R / depth times the lens magnification),
    the common scale error (median of r / r_true - 1) and the per-frame scatter (1.4826 MAD of
    r - (1 + scale) r_true) [px], of the detector's radius (written to RADIUS_ERRORS) and of the refined
    edge-fit radius that the flights now carry (``vision/ball_size.py``, to REFINED_ERRORS, with the share
    of frames whose error is within the stated one-sigma and how many frames were refined)."""
    from balltraj.vision.ball_size import REFINED
    from balltraj.vision.detect import lens_magnification

    tmp = Path(tempfile.mkdtemp(prefix="bench_radius_"))
    out, out_ref = [], []
    variants = [dict(), dict(exposure_s=1 / 250), dict(sky=False), dict(noise=4.0, bitrate=1_000_000)]
    for k, j, label, var, shot, cam in radius_shots(n, variants):
        clip = tmp / f"r{k}_{j}.mp4"
        frames = S.render_shot(shot, clip)
        res = track_clip(clip, cam, S.SOCCER.radius_m)
        clip.unlink()
        truth = {round(r["t"] * FPS): r["r"] for r in frames if "r" in r and not r["repeat"]}
        pairs, pairs_ref, n_ref = [], [], 0
        for fl, rr in zip(res.flights, res.radii):
            mag = lens_magnification(cam, fl.uv)  # the refined radius is f R / depth; the truth carries the lens
            for i, t in enumerate(fl.t):
                key = round(t * FPS)
                if key not in truth or not np.isfinite(rr.detector_radius_px[i]):
                    continue
                pairs.append((truth[key], rr.detector_radius_px[i]))
                if rr.source[i] == REFINED:
                    n_ref += 1
                    pairs_ref.append((truth[key], rr.radius_px[i] * mag[i], rr.radius_sigma_px[i] * mag[i]))
        base = {"set_up": label, "variant": ", ".join(f"{a}={b}" for a, b in var.items()) or "plain"}
        row = {**base, "frames": len(pairs), **(_radius_row(pairs) if len(pairs) >= 8 else {})}
        row_ref = {**base, "frames": len(pairs), "refined": n_ref,
                   **(_radius_row(pairs_ref) if len(pairs_ref) >= 8 else {})}
        out.append(row)
        out_ref.append(row_ref)
        print(row, row_ref, flush=True)
    cmd = f"PYTHONPATH=$PWD python tests/benchmarks/bench_single_camera.py detector-radius {n}"
    doc = {"what": "apparent-radius errors of balltraj.vision's detector on tests/scene_realism.py penalty kicks "
                   "(scale = median r_detected / r_true - 1; noise_px = 1.4826 MAD of what is left per frame)",
           "command": cmd, "clips": out}
    _write(RADIUS_ERRORS, doc)
    _write(REFINED_ERRORS, {"what": "apparent-radius errors of the refined (edge-fit) radius, vision/ball_size.py, on "
                                    "the same clips (scale, noise_px as for the detector; within_one_sigma: share of "
                                    "frames with |r - r_true| <= the stated sigma; refined: frames the edge fit gave)",
                            "command": cmd, "clips": out_ref})
    publish_radius_table()
    return doc


def publish_radius_table():
    """The detector's and the edge fit's radius errors per clip (from the two JSON files) into docs/validation.md."""
    det = json.loads(RADIUS_ERRORS.read_text())
    ref = json.loads(REFINED_ERRORS.read_text())
    lines = ["The ball's apparent radius on tests/scene_realism.py penalty kicks (960x540, 240 fps, soccer ball 4-7 px), "
             "tracked by balltraj.vision; truth the renderer's radius. Scale = median r / r_true - 1, scatter = 1.4826 "
             f"MAD of r - (1 + scale) r_true. Command: `{det['command']}`", "",
             "| set-up | variant | frames refined / tracked | detector: scale (scatter px) | refined: scale (scatter px) "
             "| refined within one sigma |", "|---|---|---|---|---|---|"]
    for a, b in zip(det["clips"], ref["clips"]):
        if "scale" not in a:
            lines.append(f"| {a['set_up']} | {a['variant']} | – | no flight | – | – |")
            continue
        rs = (f"{100 * b['scale']:+.1f} % ({b['noise_px']:.2f})", f"{100 * b['within_one_sigma']:.0f} %") \
            if "scale" in b else ("–", "–")
        lines.append(f"| {a['set_up']} | {a['variant']} | {b.get('refined', 0)}/{a['frames']} | "
                     f"{100 * a['scale']:+.1f} % ({a['noise_px']:.2f}) | {rs[0]} | {rs[1]} |")
    sd = np.array([c["scale"] for c in det["clips"] if "scale" in c])
    sr = np.array([c["scale"] for c in ref["clips"] if "scale" in c])
    if len(sd) and len(sr):
        lines += ["", f"Median scale error over the clips: detector {100 * np.median(sd):+.1f} % (range "
                  f"{100 * sd.min():+.1f} to {100 * sd.max():+.1f}), refined {100 * np.median(sr):+.1f} % (range "
                  f"{100 * sr.min():+.1f} to {100 * sr.max():+.1f})."]
    publish("ball-size-realism", lines)


def main_realism(n):
    if "--edge-centres" in sys.argv or "--detector-centres" in sys.argv:
        from balltraj.vision import ball_size
        ball_size.EDGE_CENTRES_FOR_FLIGHT = "--detector-centres" not in sys.argv
    rows = run(n)
    lines = [f"Penalty kicks rendered by `tests/scene_realism.py` (independent renderer and laws: C_D 0.25, C_L "
             f"0.15; shaded seamed ball, blur, noise, H.264; 960x540, 240 fps), {n} a camera, tracked and fitted "
             "by `pipeline.analyze_clip` with the soccer ball's catalogue laws; deflection at the goal line. "
             f"Command: `PYTHONPATH=$PWD python tests/benchmarks/bench_single_camera.py realism {n}`", "",
             "| camera | camera file | anchor chosen | records | launch speed error % median (max) | deflection "
             "error cm median (max) | deflection cm median | one-sigma coverage (speed / sideways / up-down) |",
             "|---|---|---|---|---|---|---|---|"]
    for label, e in rows.items():
        for mode, name in (("zone", "records the template"), ("none", "no template key"),
                           ("true zone", "records the template; the renderer's true pixels"),
                           ("true none", "no template key; the renderer's true pixels")):
            ok = [x for x in e[mode] if x is not None]
            anchors = ", ".join(f"{a} {e['anchor'].count(a)}" for a in sorted(set(e["anchor"]))) \
                if mode == "zone" else ("template zone" if mode == "true zone" else "apparent size")
            if not ok:
                lines.append(f"| {label} | {name} | {anchors or '–'} | 0/{len(e[mode])} | – | – | – | – |")
                continue
            lines.append(f"| {label} | {name} | {anchors} | {len(ok)}/{len(e[mode])} | {stat_cells(ok)} |")
    whys = sorted({w for e in rows.values() for w in e["why"]})
    if whys:
        lines += ["", "Not analysed: " + "; ".join(whys[:6])]
    publish("single-camera-realism", lines)


if __name__ == "__main__":
    main_realism(int(sys.argv[1]) if len(sys.argv) > 1 else 2)
