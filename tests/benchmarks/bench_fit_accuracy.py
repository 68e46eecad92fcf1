"""Seeded synthetic ensemble: the full flight fit against the constant-acceleration baseline.

Every ball type, noise 2-20 mm, 60-500 Hz, 0-10 % outliers, some gaps. Errors in launch speed,
deflection at the target plane, transverse spin axis and rate; median and 95th percentile.
Writes the tables into docs/validation.md (between the fit-accuracy markers).

Run: python tests/benchmarks/bench_fit_accuracy.py
Targets for 240 Hz, 5 mm pitches: launch speed < 0.2 %, deflection < 1 cm, spin axis < 3 deg; the
full fit beats the baseline on deflection and spin axis.
"""
import math
import sys
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[2]
sys.path.insert(0, str(ROOT / "tests"))
sys.path.insert(0, str(Path(__file__).resolve().parent))
from _docs import publish  # noqa: E402
from synth import LAUNCHES, make_track  # noqa: E402

from balltraj.record.build import fit_record  # noqa: E402
from balltraj.fitting.flight_fit import fit_flight  # noqa: E402
from balltraj.physics.flight import transverse_spin  # noqa: E402
from balltraj.physics.reference import plane_deflection  # noqa: E402

RPM = 2 * math.pi / 60


def angle_deg(a, b):
    a, b = np.asarray(a, float), np.asarray(b, float)
    na, nb = np.linalg.norm(a), np.linalg.norm(b)
    if na == 0 or nb == 0:
        return math.nan
    return math.degrees(math.acos(np.clip(a @ b / (na * nb), -1, 1)))


def one_case(ball, rate, noise, outl, gap, seed):
    t, xyz, tr = make_track(ball, rate_hz=rate, noise_m=noise, outlier_fraction=outl, gap=gap, seed=seed)
    X = tr["extent"]
    fit = fit_flight(tr["model"], t, xyz)
    rec, _ = fit_record(fit, tr["ball"], tr["air"], fit.model, target_x=X)  # the chosen rung's model
    truth = plane_deflection(tr["model"], 0.0, tr["state0"], tr["params"], X, ground_z=None)
    s0 = tr["state0"]
    wp, _ = transverse_spin(tr["spin"], s0[3:])
    sp = np.linalg.norm(s0[3:])
    bl = rec["baseline"]
    bd = bl.get("deflection") or {"horizontal_m": math.nan, "vertical_m": math.nan}
    full = dict(
        speed=abs(rec["launch"]["speed_mps"] / sp - 1) * 100,
        defl=math.hypot(rec["deflection"]["horizontal_m"] - truth.horizontal_m,
                        rec["deflection"]["vertical_m"] - truth.vertical_m) * 100,
        axis=angle_deg(rec["spin"]["transverse_axis"], wp),
        rate=abs(rec["spin"]["transverse_rate_rpm"] / (np.linalg.norm(wp) / RPM) - 1) * 100)
    base = dict(
        speed=abs(bl["speed_mps"] / sp - 1) * 100,
        defl=math.hypot(bd["horizontal_m"] - truth.horizontal_m, bd["vertical_m"] - truth.vertical_m) * 100,
        axis=angle_deg(bl["transverse_axis"], wp),
        rate=abs(bl["transverse_rate_rpm"] / (np.linalg.norm(wp) / RPM) - 1) * 100)
    return full, base


def table(rows, title):
    keys = [("speed", "launch speed error %"), ("defl", "deflection error cm"), ("axis", "spin axis error deg"),
            ("rate", "spin rate error %")]
    out = [f"**{title}** ({len(rows)} flights)", "", "| quantity | full fit median | full fit p95 | baseline median | baseline p95 |",
           "|---|---|---|---|---|"]
    for k, lab in keys:
        f = np.array([r[0][k] for r in rows], float)
        b = np.array([r[1][k] for r in rows], float)
        out.append(f"| {lab} | {np.nanmedian(f):.3g} | {np.nanpercentile(f, 95):.3g} | {np.nanmedian(b):.3g} | "
                   f"{np.nanpercentile(b, 95):.3g} |")
    return "\n".join(out)


def main():
    rng = np.random.default_rng(20261201)
    rows_by_ball = {}
    for ball in LAUNCHES:
        rows = []
        for k in range(10):
            rate = float(rng.choice([60, 120, 240, 500]))
            noise = float(rng.uniform(0.002, 0.02))
            outl = float(rng.choice([0.0, 0.0, 0.05, 0.1]))
            gap = (0.4, 0.55) if k % 4 == 3 else None
            rows.append(one_case(ball, rate, noise, outl, gap, seed=1000 + k))
        rows_by_ball[ball] = rows
    pitch = [one_case("baseball", 240, 0.005, 0.0, None, seed=s) for s in range(40)]
    text = [table(pitch, "Target case: baseball pitch, 240 Hz, 5 mm noise, no outliers")]
    text.append("")
    text.append(table([r for rs in rows_by_ball.values() for r in rs],
                      "Whole ensemble: every ball, 60-500 Hz, 2-20 mm, 0-10 % outliers, some gaps"))
    text.append("")
    text.append("| ball | deflection error cm, full fit median (p95) | baseline median (p95) | spin axis deg, full (baseline) medians |")
    text.append("|---|---|---|---|")
    for ball, rows in rows_by_ball.items():
        f = np.array([r[0]["defl"] for r in rows])
        b = np.array([r[1]["defl"] for r in rows])
        fa = np.nanmedian([r[0]["axis"] for r in rows])
        ba = np.nanmedian([r[1]["axis"] for r in rows])
        text.append(f"| {ball} | {np.median(f):.2f} ({np.percentile(f, 95):.2f}) | {np.nanmedian(b):.2f} "
                    f"({np.nanpercentile(b, 95):.2f}) | {fa:.1f} ({ba:.1f}) |")
    publish("fit-accuracy", text)


if __name__ == "__main__":
    main()
