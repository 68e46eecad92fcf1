"""1,000 pitches integrated as one batch against a loop of solve_ivp at the same accuracy.

Run: python tests/benchmarks/bench_integrator.py   (target: batch >= 50x faster per flight)
"""
import math
import time

import numpy as np
from scipy.integrate import solve_ivp

from balltraj.physics.air import air_conditions
from balltraj.physics.balls import get_ball
from balltraj.physics.flight import FlightModel, FlightParameters, acceleration, fly, launch_state

N = 1000
rng = np.random.default_rng(0)
model = FlightModel.for_ball(get_ball("baseball"), air_conditions())
s0 = np.array([launch_state([0, rng.uniform(-0.5, 0.5), rng.uniform(1.6, 2.0)], rng.uniform(30, 45),
                            math.radians(rng.uniform(-3, 2)), math.radians(rng.uniform(-3, 3))) for _ in range(N)])
spin = rng.normal(0, 150, (N, 3))
params = FlightParameters.make(N, spin=spin)

t = time.perf_counter()
tr = fly(model, 0.0, s0, params, stop_x=18.44, ground_z=None, max_step=0.02)
tc, sc = tr.first_crossing(0, 18.44)
t_batch = time.perf_counter() - t

M = 100  # the loop is slow: time a subset and scale per flight
t = time.perf_counter()
err = []
for i in range(M):
    p1 = FlightParameters.make(1, spin=spin[i])

    def rhs(tt, y):
        return np.concatenate([y[3:], acceleration(model, p1, 0.0, tt, y[None])[0]])

    ev = lambda tt, y: y[0] - 18.44  # noqa: E731
    ev.terminal = True
    sol = solve_ivp(rhs, (0, 2), s0[i], method="DOP853", rtol=1e-10, atol=1e-12, events=ev)
    err.append(np.abs(sol.y_events[0][0][:3] - sc[i, :3]).max())
t_loop = (time.perf_counter() - t) / M * N

print(f"batch of {N} pitches: {t_batch * 1e3:.1f} ms ({t_batch / N * 1e6:.1f} us per flight)")
print(f"solve_ivp DOP853 loop (rtol 1e-10), scaled to {N}: {t_loop:.2f} s ({t_loop / N * 1e3:.2f} ms per flight)")
print(f"ratio (loop / batch, per flight): {t_loop / t_batch:.0f}x   max position difference at the plate: "
      f"{max(err) * 1e3:.2e} mm")
