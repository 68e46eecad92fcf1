"""Median time per fit against a plain solve_ivp-inside-least_squares fit of the same data.

Run: python tests/benchmarks/bench_fit_speed.py   (targets: ratio <= 0.2, <= 40 ms per pitch)
"""
import statistics
import sys
import time
from pathlib import Path

import numpy as np
from scipy.integrate import solve_ivp
from scipy.optimize import least_squares

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))
from synth import make_track  # noqa: E402

from balltraj.fitting.flight_fit import fit_flight, _basis  # noqa: E402
from balltraj.physics.flight import FlightParameters, acceleration  # noqa: E402


def plain_fit(model, t, xyz, p0):
    """The obvious implementation: solve_ivp for every residual, finite-difference Jacobian."""
    basis = _basis(p0[3:6])

    def res(p):
        spin = p[6] * basis[0] + p[7] * basis[1]
        prm = FlightParameters.make(1, spin=spin)
        sol = solve_ivp(lambda tt, y: np.concatenate([y[3:], acceleration(model, prm, 0.0, tt, y[None])[0]]),
                        (t[0], t[-1]), p[:6], method="DOP853", rtol=1e-8, atol=1e-10, t_eval=t)
        return (sol.y[:3].T - xyz).ravel()

    return least_squares(res, p0, method="trf", x_scale="jac")


times_ours, times_plain, agree = [], [], []
for seed in range(7):
    t, xyz, truth = make_track("baseball", seed=seed)
    model = truth["model"]
    fit_flight(model, t, xyz)  # warm-up
    t0 = time.perf_counter()
    f = fit_flight(model, t, xyz)
    times_ours.append(time.perf_counter() - t0)
    p0 = np.concatenate([xyz[0], (xyz[5] - xyz[0]) / (t[5] - t[0]), [0.0, -100.0]])
    t0 = time.perf_counter()
    sol = plain_fit(model, t - t[0], xyz, p0)
    times_plain.append(time.perf_counter() - t0)
    agree.append(abs(np.linalg.norm(sol.x[3:6]) - np.linalg.norm(f.state0[3:])))

mo, mp = statistics.median(times_ours), statistics.median(times_plain)
print(f"balltraj fit: median {mo * 1e3:.1f} ms per pitch ({len(t)} points)")
print(f"solve_ivp inside least_squares: median {mp * 1e3:.0f} ms per pitch")
print(f"ratio {mo / mp:.3f}   launch-speed agreement between the two: max {max(agree) * 1e3:.2f} mm/s")
