"""Median time per fit against a plain solve_ivp-inside-least_squares fit of the same data.

The plain reference fits the same aerodynamic rungs the ladder solved for that pitch (each with
solve_ivp for every residual and scipy's finite-difference Jacobian, started from the
constant-acceleration guess), so the ratio prices the ladder as well as the integrator.

Run: python tests/benchmarks/bench_fit_speed.py   (target: ratio <= 0.2)
"""
import statistics
import sys
import time
from pathlib import Path

import numpy as np
from scipy.integrate import solve_ivp
from scipy.optimize import least_squares

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))
sys.path.insert(0, str(Path(__file__).resolve().parent))
from synth import make_track  # noqa: E402
from _docs import publish  # noqa: E402

from balltraj.fitting.flight_fit import _basis, fit_flight  # noqa: E402
from balltraj.fitting.ladder import batch_model, decay_and_scale, rung_names  # noqa: E402
from balltraj.physics.flight import FlightParameters, acceleration  # noqa: E402


def plain_fit(model, t, xyz, p0, rung):
    """The obvious implementation: solve_ivp for every residual, finite-difference Jacobian."""
    basis = _basis(p0[3:6])
    names = rung_names(rung)

    def res(p):
        spin = p[6] * basis[0] + p[7] * basis[1]
        vals = np.asarray(p[8:])[None]
        tau, scale = decay_and_scale(names, vals)
        prm = FlightParameters.make(1, spin=spin, drag_scale=scale, spin_decay_s=tau)
        m = batch_model(model, names, vals, np.array([np.linalg.norm(p[3:6])]), np.array([np.hypot(p[6], p[7])]))
        sol = solve_ivp(lambda tt, y: np.concatenate([y[3:], acceleration(m, prm, 0.0, tt, y[None])[0]]),
                        (t[0], t[-1]), p[:6], method="DOP853", rtol=1e-8, atol=1e-10, t_eval=t)
        if sol.y.shape[1] != len(t):  # a wild trial step the solver could not integrate
            return np.full(xyz.size, 1e3)
        return (sol.y[:3].T - xyz).ravel()

    start = np.concatenate([p0, np.zeros(len(names))])
    if "lift_exponent" in names:
        start[8 + names.index("lift_exponent")] = 1.0
    return least_squares(res, start, method="trf", x_scale="jac")


times_ours, times_plain, agree, n_rungs = [], [], [], []
for seed in range(5):
    t, xyz, truth = make_track("baseball", seed=seed)
    model = truth["model"]
    fit_flight(model, t, xyz)  # warm-up
    t0 = time.perf_counter()
    f = fit_flight(model, t, xyz)
    times_ours.append(time.perf_counter() - t0)
    rungs = [r["rung"] for r in f.model_choice["rungs"]]
    n_rungs.append(len(rungs))
    p0 = np.concatenate([xyz[0], (xyz[5] - xyz[0]) / (t[5] - t[0]), [0.0, -100.0]])
    t0 = time.perf_counter()
    sols = {r: plain_fit(model, t - t[0], xyz, p0, r) for r in rungs}
    times_plain.append(time.perf_counter() - t0)
    agree.append(abs(np.linalg.norm(sols[f.rung].x[3:6]) - np.linalg.norm(f.state0[3:])))

mo, mp = statistics.median(times_ours), statistics.median(times_plain)
publish("fit-speed", [
    f"| `bench_fit_speed.py`: one pitch ({len(t)} points) through the model ladder ({min(n_rungs)}-{max(n_rungs)} rungs "
    f"solved) vs `solve_ivp` inside `least_squares` over the same rungs | **{mo * 1e3:.0f} ms** median; plain "
    f"{mp * 1e3:.0f} ms; **ratio {mo / mp:.3f}** (target 0.2); launch speeds agree to {max(agree) * 1e3:.2f} mm/s |"])
