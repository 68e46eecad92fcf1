"""Fits of flights made with OTHER aerodynamic laws than the fitter's catalogue defaults.

Truth: the equations of motion written here, with the published laws re-implemented here (not
balltraj's), integrated by scipy solve_ivp (DOP853, rtol 1e-10). Deflection truth: that path minus
a no-spin solve_ivp path from the same launch with the same (true) drag law at zero spin and the same
wind, at the plane x = X (docs/architecture.md, conventions). Noise, rates and durations of practice footage.

Targets: median launch-speed error <= 0.3 %, p95 <= 1 %; deflection error <= max(2 cm, 5 %) for
>= 90 % of flights; one-sigma coverage of speed and deflection 60-80 %; >= 95 % within 3 sigma.

Run: python tests/benchmarks/bench_model_error.py [--quick]
"""
import math
import sys
import time
from pathlib import Path

import numpy as np
from scipy.integrate import solve_ivp

sys.path.insert(0, str(Path(__file__).resolve().parent))
from _docs import publish  # noqa: E402

from balltraj.fitting.deflection import fit_deflection, launch_speed  # noqa: E402
from balltraj.fitting.flight_fit import FitOptions, fit_flight  # noqa: E402
from balltraj.physics.air import air_conditions  # noqa: E402
from balltraj.physics.balls import get_ball  # noqa: E402
from balltraj.physics.flight import FlightModel  # noqa: E402

RPM = 2 * math.pi / 60
G = 9.80665


# ---- published laws, written out again here (sources as in balltraj/physics/aero*.py) ----------
def cd_giordano(v, S, ball, rho):  # Giordano & Nakanishi 2006 eq. 2.26 (from memory)
    b2m = 0.0039 + 0.0058 / (1 + math.exp(min(60.0, (v - 35.0) / 5.0)))
    return 2 * ball.mass_kg * b2m / (rho * math.pi * ball.diameter_m**2 / 4)


def cd_stepanek(v, S, ball, rho):  # Stepanek 1988
    return 0.508 + (22.053 + 4.196 * max(S, 1e-9) ** -2.5) ** -0.4 if S > 0 else 0.508


def cl_stepanek(S):
    return 1 / (2.022 + 0.981 / S) if S > 0 else 0.0


def cl_sawicki(S):  # Sawicki, Hubbard & Stronge 2003
    return 1.5 * S if S < 0.1 else 0.09 + 0.6 * S


def crisis(sub, sup, rec, width):  # logistic drag crisis with the given Re_c
    def f(v, S, ball, rho, nu=1.5e-5):
        Re = v * ball.diameter_m / nu
        return sup + (sub - sup) / (1 + math.exp(max(-60.0, min(60.0, (Re - rec) / width))))
    return f


LAWS = {
    # name: ball, drag(v, S), lift(S), spin decay model, wind, rate Hz, noise m, launch generator
    "pitch, speed-dependent drag (Giordano)": dict(
        ball="baseball", cd=cd_giordano, cl=cl_sawicki, rate=240, noise=0.005, x_end=17.0,
        launch=lambda r: ([0, 0, 1.8], r.uniform(34, 44), r.uniform(-2, 1), r.uniform(-2, 2), r.uniform(1800, 2600),
                          [r.uniform(-0.3, 0.3), -1, r.uniform(-0.3, 0.3)])),
    "pitch, spin-dependent drag + saturating lift": dict(
        ball="baseball", cd=lambda v, S, b, rho: 0.30 + 0.25 * S, cl=lambda S: S / (0.65 + 2.5 * S),
        rate=240, noise=0.005, x_end=17.0,
        launch=lambda r: ([0, 0, 1.8], r.uniform(34, 44), r.uniform(-2, 1), r.uniform(-2, 2), r.uniform(1800, 2800),
                          [r.uniform(-0.5, 0.5), r.uniform(-1, 1), r.uniform(-0.6, 0.6)])),
    "soccer kick through the drag crisis": dict(
        ball="soccer", cd=crisis(0.45, 0.15, 3.0e5, 2.5e4), cl=lambda S: S, rate=120, noise=0.012, x_end=24.0,
        launch=lambda r: ([0, 0, 0.11], r.uniform(26, 31), r.uniform(14, 20), r.uniform(-4, 4), r.uniform(300, 600),
                          [r.uniform(-0.2, 0.2), r.uniform(-0.4, 0.4), 1])),
    "soccer lob, saturating lift": dict(
        ball="soccer", cd=crisis(0.47, 0.20, 2.6e5, 2.0e4), cl=lambda S: S / (0.6 + 3.0 * S), rate=120, noise=0.015,
        x_end=22.0,
        launch=lambda r: ([0, 0, 0.11], r.uniform(18, 24), r.uniform(30, 40), r.uniform(-3, 3), r.uniform(400, 700),
                          [r.uniform(-0.3, 0.3), -1, r.uniform(-0.3, 0.3)])),
    "tennis stroke, Stepanek drag and lift": dict(
        ball="tennis", cd=cd_stepanek, cl=cl_stepanek, rate=240, noise=0.008, x_end=20.0,
        launch=lambda r: ([0, 0, 1.0], r.uniform(28, 38), r.uniform(4, 9), r.uniform(-3, 3), r.uniform(1500, 3000),
                          [r.uniform(-0.2, 0.2), 1, r.uniform(-0.3, 0.3)])),
    "golf wedge, spin decay (Smits & Smith)": dict(
        ball="golf", cd=lambda v, S, b, rho: 0.24 + 0.18 * S, cl=lambda S: S / (0.9 + 1.2 * S), decay=2.0e-5,
        rate=120, noise=0.015, x_end=70.0, t_max=3.0,
        launch=lambda r: ([0, 0, 0], r.uniform(38, 46), r.uniform(24, 30), r.uniform(-3, 3), r.uniform(7000, 9500),
                          [0, -1, r.uniform(-0.15, 0.15)])),
    "golf drive, crosswind": dict(
        ball="golf", cd=lambda v, S, b, rho: 0.25, cl=lambda S: S, rate=60, noise=0.02, x_end=200.0, t_max=2.5,
        wind=lambda r: (r.uniform(-3, 3), r.uniform(-5, 5), 0.0),
        # what the user tells the fit: "a breeze of up to about 5 m/s, direction not known", taken as a
        # two-sigma bound on each horizontal component (FitOptions.wind_sigma_mps); the wind itself is not given
        stated_wind_sigma=2.5,
        launch=lambda r: ([0, 0, 0], r.uniform(62, 72), r.uniform(9, 13), r.uniform(-2, 2), r.uniform(2400, 3200),
                          [0, -1, r.uniform(-0.2, 0.2)])),
}


def truth_path(ball, rho, law, s0, spin, wind, t_eval=None, x_stop=None, spin_on=True):
    r = ball.radius_m
    K = rho * math.pi * r * r / (2 * ball.mass_kg)
    decay = law.get("decay")
    w = np.asarray(wind, float)

    def rhs(t, y):
        v = y[3:6] - w
        sp = math.sqrt(v @ v)
        om = y[6:9]
        vh = v / sp
        wp = om - (om @ vh) * vh
        wpn = math.sqrt(wp @ wp)
        S = r * wpn / sp
        cd = law["cd"](sp, S, ball, rho)
        cl = law["cl"](S) if wpn > 0 else 0.0
        a = -K * cd * sp * v + (K * cl * sp * sp * np.cross(wp / wpn, vh) if wpn > 0 else 0.0)
        a = a + np.array([0, 0, -G])
        dom = -decay * sp / r * om if decay else np.zeros(3)  # d omega/dt = -2e-5 omega v / r (Penner 2001 eq. 16)
        return np.concatenate([y[3:6], a, dom])

    y0 = np.concatenate([s0, spin if spin_on else np.zeros(3)])
    ev = None
    if x_stop is not None:
        ev = lambda t, y: y[0] - x_stop  # noqa: E731
        ev.terminal = True
    return solve_ivp(rhs, (0, 20), y0, method="DOP853", rtol=1e-10, atol=1e-10, t_eval=t_eval, events=ev)


def one(law_name, law, seed):
    rng = np.random.default_rng(seed)
    ball = get_ball(law["ball"])
    air = air_conditions()
    pos, speed, el, az, rpm, axis = law["launch"](rng)
    el, az = math.radians(el), math.radians(az)
    v0 = speed * np.array([math.cos(el) * math.cos(az), math.cos(el) * math.sin(az), math.sin(el)])
    s0 = np.concatenate([pos, v0])
    axis = np.asarray(axis, float)
    vh = v0 / speed
    axis = axis - (axis @ vh) * vh
    spin = rpm * RPM * axis / np.linalg.norm(axis)
    wind = law["wind"](rng) if "wind" in law else (0.0, 0.0, 0.0)
    end = truth_path(ball, air.density, law, s0, spin, wind, x_stop=law["x_end"])
    t_end = float(end.t_events[0][0]) if len(end.t_events[0]) else float(end.t[-1])
    t_end = min(t_end, law.get("t_max", t_end))
    t = np.arange(0.0, t_end, 1.0 / law["rate"])
    path = truth_path(ball, air.density, law, s0, spin, wind, t_eval=t)
    xyz = path.y[:3].T + rng.normal(0, law["noise"], (len(t), 3))
    target = float(path.y[0, -1]) - 0.01
    a = truth_path(ball, air.density, law, s0, spin, wind, x_stop=target)
    b = truth_path(ball, air.density, law, s0, spin, wind, x_stop=target, spin_on=False)
    d_true = a.y_events[0][0][1:3] - b.y_events[0][0][1:3]
    model = FlightModel.for_ball(ball, air)  # the fitter knows the ball, not the law (nor the wind)
    t0 = time.perf_counter()
    fit = fit_flight(model, t, xyz, options=FitOptions(wind_sigma_mps=law.get("stated_wind_sigma", 0.0)))
    dt = time.perf_counter() - t0
    sp, ssp = launch_speed(fit)
    d, dcov = fit_deflection(fit, model, target)
    ds = np.sqrt(np.clip(np.diag(dcov), 0, None))
    return dict(law=law_name, speed_err=(sp - speed) / speed, speed_z=(sp - speed) / ssp, d_err=d - d_true,
                d_true=d_true, d_z=(d - d_true) / ds, rung=fit.rung, fits=fit.misfit.get("fits"), time=dt,
                ok=fit.success)


# ---- what one flight cannot tell: two truths, one track ----------------------------------------
def _launch(law, seed):
    rng = np.random.default_rng(seed)
    ball = get_ball(law["ball"])
    rho = air_conditions().density
    pos, speed, el, az, rpm, axis = law["launch"](rng)
    el, az = math.radians(el), math.radians(az)
    v0 = speed * np.array([math.cos(el) * math.cos(az), math.cos(el) * math.sin(az), math.sin(el)])
    axis = np.asarray(axis, float)
    axis = axis - (axis @ v0) * v0 / speed**2
    spin = rpm * RPM * axis / np.linalg.norm(axis)
    wind = law["wind"](rng) if "wind" in law else (0.0, 0.0, 0.0)
    return ball, rho, np.concatenate([pos, v0]), spin, np.asarray(wind, float)


def _deflection(ball, rho, law, s0, spin, wind, x):
    a = truth_path(ball, rho, law, s0, spin, wind, x_stop=x)
    b = truth_path(ball, rho, law, s0, spin, wind, x_stop=x, spin_on=False)
    return a.y_events[0][0][1:3] - b.y_events[0][0][1:3]


def twins(law_name, seed):
    """Truth A (the law) and a truth B of another physical form whose spinning flight is the same
    track: B's drag depends on speed only (the spin adds none), tabulated as the drag A's spinning
    ball has at each speed along its path (exact while the speed falls monotonically); for the
    crosswind, B is still air with the sidespin that best mimics the wind (least squares over two
    spin components and a speed-dependent drag). Returns (rms track difference [m], deflection A, deflection B [m], tolerance)."""
    from scipy.optimize import least_squares

    law = LAWS[law_name]
    ball, rho, s0, spin, wind = _launch(law, seed)
    end = truth_path(ball, rho, law, s0, spin, wind, x_stop=law["x_end"])
    t_end = min(float(end.t_events[0][0]) if len(end.t_events[0]) else float(end.t[-1]), law.get("t_max", 1e9))
    t = np.arange(0.0, t_end, 1.0 / law["rate"])
    A = truth_path(ball, rho, law, s0, spin, wind, t_eval=t)
    x = float(A.y[0, -1]) - 0.01
    if "wind" in law:
        lawB = {k: v for k, v in law.items() if k != "wind"}
        vh = s0[3:] / np.linalg.norm(s0[3:])
        e1 = np.cross([0, 0, 1.0], vh)
        e1 /= np.linalg.norm(e1)
        e2 = np.cross(vh, e1)

        v0 = float(np.linalg.norm(s0[3:]))

        def spinB(q):
            return spin + 100.0 * (q[0] * e1 + q[1] * e2)

        def lawq(q):  # still air; a headwind's extra drag taken up by a speed-dependent drag law
            return dict(lawB, cd=lambda v_, S_, b_, rho_: law["cd"](v_, S_, b_, rho_) * (q[2] + q[3] * v0 / v_))

        def res(q):
            return (truth_path(ball, rho, lawq(q), s0, spinB(q), (0, 0, 0), t_eval=t).y[:3] - A.y[:3]).ravel()

        q = least_squares(res, np.array([0.0, 0.0, 1.0, 0.0]), diff_step=1e-4).x
        B, dB = truth_path(ball, rho, lawq(q), s0, spinB(q), (0, 0, 0), t_eval=t), \
            _deflection(ball, rho, lawq(q), s0, spinB(q), (0, 0, 0), x)
    else:
        fine = truth_path(ball, rho, law, s0, spin, wind, t_eval=np.linspace(0, t_end, 4000))
        r = ball.radius_m
        v = fine.y[3:6].T - wind
        sp = np.linalg.norm(v, axis=1)
        om = fine.y[6:9].T
        wp = om - np.sum(om * v, axis=1)[:, None] * v / sp[:, None] ** 2
        S = r * np.linalg.norm(wp, axis=1) / sp
        cd = np.array([law["cd"](a, b, ball, rho) for a, b in zip(sp, S)])
        if not np.all(np.diff(sp) < 0):
            return None
        lawB = dict(law, cd=lambda v_, S_, b_, rho_: float(np.interp(v_, sp[::-1], cd[::-1])))
        B = truth_path(ball, rho, lawB, s0, spin, wind, t_eval=t)
        dB = _deflection(ball, rho, lawB, s0, spin, wind, x)
    dA = _deflection(ball, rho, law, s0, spin, wind, x)
    rms = float(np.sqrt(np.mean(np.sum((B.y[:3] - A.y[:3]) ** 2, axis=0))))
    return rms, dA, dB, np.maximum(0.02, 0.05 * np.abs(dA))


def twin_lines(seeds):
    out = ["| law | seed | track difference A - B, rms mm | track noise, mm | deflection A (side, up) cm | "
           "deflection B cm | difference cm | tolerance max(2 cm, 5 %) cm |", "|---|---|---|---|---|---|---|---|"]
    for name in ("tennis stroke, Stepanek drag and lift", "golf wedge, spin decay (Smits & Smith)",
                 "golf drive, crosswind"):
        for seed in seeds:
            tw = twins(name, seed)
            if tw is None:
                out.append(f"| {name} | {seed} | speed not monotone: no exact twin | | | | | |")
                continue
            rms, dA, dB, tol = tw
            f = lambda v: ", ".join(f"{100 * x:.1f}" for x in v)  # noqa: E731
            out.append(f"| {name} | {seed} | {1e3 * rms:.2f} | {1e3 * LAWS[name]['noise']:.0f} | {f(dA)} | {f(dB)} | "
                       f"{f(dA - dB)} | {f(tol)} |")
    return out


def main():
    quick = "--quick" in sys.argv
    per_law = 4 if quick else 12
    rows = []
    for name, law in LAWS.items():
        for seed in range(per_law):
            rows.append(one(name, law, 1000 + seed))
        print(f"{name}: done", file=sys.stderr)
    lines = [f"{len(rows)} flights, {per_law} per law, made with solve_ivp (DOP853, rtol 1e-10) and laws the "
             "fitter does not assume; fitted with the ball's catalogue model and the ladder (`aero_model='auto'`).",
             "", "| law | flights | speed error median % | p95 % | deflection within max(2 cm, 5 %) | "
             "speed within 1 sigma | deflection within 1 sigma | within 3 sigma (speed, defl.) | rungs chosen |",
             "|---|---|---|---|---|---|---|---|---|"]

    def stats(rs):
        se = np.abs([r["speed_err"] for r in rs]) * 100
        dz = np.concatenate([np.abs(r["d_z"]) for r in rs])
        sz = np.abs([r["speed_z"] for r in rs])
        dok = [bool(np.all(np.abs(r["d_err"]) <= np.maximum(0.02, 0.05 * np.abs(r["d_true"])))) for r in rs]
        return se, sz, dz, dok

    for name in LAWS:
        rs = [r for r in rows if r["law"] == name]
        se, sz, dz, dok = stats(rs)
        rungs = {}
        for r in rs:
            rungs[r["rung"]] = rungs.get(r["rung"], 0) + 1
        lines.append(f"| {name} | {len(rs)} | {np.median(se):.3f} | {np.percentile(se, 95):.3f} | "
                     f"{100 * np.mean(dok):.0f} % | {100 * np.mean(sz <= 1):.0f} % | {100 * np.mean(dz <= 1):.0f} % | "
                     f"{100 * np.mean(sz <= 3):.0f} %, {100 * np.mean(dz <= 3):.0f} % | "
                     + ", ".join(f"{k} {v}" for k, v in sorted(rungs.items())) + " |")
    se, sz, dz, dok = stats(rows)
    lines += ["", f"**All flights**: launch-speed error median {np.median(se):.3f} %, p95 {np.percentile(se, 95):.3f} % "
              f"(targets 0.3 %, 1 %); deflection within max(2 cm, 5 %): {100 * np.mean(dok):.0f} % (target 90 %); "
              f"within one sigma: speed {100 * np.mean(sz <= 1):.0f} %, deflection {100 * np.mean(dz <= 1):.0f} % "
              f"(target 60-80 %); within 3 sigma: speed {100 * np.mean(sz <= 3):.0f} %, deflection "
              f"{100 * np.mean(dz <= 3):.0f} % (target 95 %); median fit time "
              f"{1e3 * np.median([r['time'] for r in rows]):.0f} ms. Deflection components counted separately "
              "for the sigma figures. Command: `python tests/benchmarks/bench_model_error.py`."]
    twin = ["Two truths per row: A is the law of the table above; B is another physical law (drag depending on "
            "speed only, or still air with sidespin instead of the crosswind) built to fly the same spinning path. "
            "Both integrated with solve_ivp here; no fit involved.", ""] + twin_lines([1000, 1001] if quick else
                                                                                    [1000, 1001, 1002])
    if quick:
        print("\n".join(lines + [""] + twin))
    else:
        publish("model-error", lines)
        publish("model-error-twins", twin)


if __name__ == "__main__":
    main()
