"""Synthetic tracked flights for tests and benchmarks (seeded)."""
import math

import numpy as np

from balltraj.physics.air import air_conditions
from balltraj.physics.balls import get_ball
from balltraj.physics.flight import FlightModel, FlightParameters, fly, launch_state

RPM = 2 * math.pi / 60

# typical launches per ball: position, speed, elevation, azimuth, spin rpm, spin axis, flight x extent
LAUNCHES = {
    "baseball": ([0, 0, 1.8], 40.0, -1.0, 1.0, 2200, [0.15, -0.95, 0.25], 17.0),
    "softball": ([0, 0, 0.6], 27.0, 3.0, 0.0, 1200, [0.0, 0.5, 0.85], 12.5),
    "soccer": ([0, 0, 0.11], 27.0, 17.0, -5.0, 500, [0.05, -0.3, 0.95], 24.0),
    "golf": ([0, 0, 0], 65.0, 11.0, 1.0, 2800, [0.0, -0.98, 0.2], 60.0),
    "tennis": ([0, 0, 2.7], 45.0, -4.0, 2.0, 1800, [0.0, 0.9, 0.4], 20.0),
    "cricket": ([0, 0, 2.2], 36.0, -5.0, 0.0, 900, [0.0, -0.7, 0.7], 16.0),
    "volleyball": ([0, 0, 2.8], 20.0, 8.0, 0.0, 300, [0.0, 0.95, 0.3], 12.0),
    "basketball": ([0, 0, 2.2], 8.0, 48.0, 0.0, 150, [0.0, -1.0, 0.0], 4.2),
    "table-tennis": ([0, 0, 0.9], 16.0, 8.0, 3.0, 3000, [0.0, 0.8, 0.6], 2.7),
}


def make_track(ball_name="baseball", rate_hz=240.0, noise_m=0.005, outlier_fraction=0.0, gap=None, seed=0,
               jitter=0.0, launch=None, transverse_only=True):
    """(t, xyz, truth) of a simulated flight sampled at rate_hz until x passes the extent.

    With ``transverse_only`` the spin axis is made perpendicular to the launch velocity (the fit's
    model: a gyro part at launch turns partly transverse as the path bends, which the fit cannot
    represent; see docs/method.md)."""
    rng = np.random.default_rng(seed)
    ball = get_ball(ball_name)
    air = air_conditions()
    model = FlightModel.for_ball(ball, air)
    pos, speed, el, az, rpm, axis, extent = launch or LAUNCHES[ball_name]
    s0 = launch_state(pos, speed, math.radians(el), math.radians(az))
    axis = np.asarray(axis, float) / np.linalg.norm(axis)
    if transverse_only:
        vhat = s0[3:] / np.linalg.norm(s0[3:])
        axis = axis - (axis @ vhat) * vhat
        axis /= np.linalg.norm(axis)
    spin = rpm * RPM * axis
    params = FlightParameters.make(1, spin=spin)
    tr = fly(model, 0.0, s0, params, stop_x=extent + 0.5, ground_z=None, t_max=20)
    tc, _ = tr.first_crossing(0, extent, +1)
    t = np.arange(0.0, tc[0], 1.0 / rate_hz)
    if jitter:
        t = t + rng.uniform(-jitter, jitter, t.size) / rate_hz
        t[0] = 0.0
        t = np.sort(t)
    if gap is not None:
        lo, hi = gap
        t = t[(t < lo * t[-1]) | (t > hi * t[-1])]
    xyz = tr.positions(t)[0] + rng.normal(0, noise_m, (t.size, 3))
    n_out = int(round(outlier_fraction * t.size))
    idx = rng.choice(np.arange(2, t.size - 2), n_out, replace=False) if n_out else np.array([], int)
    xyz[idx] += rng.normal(0, 1, (n_out, 3)) * 0.15 + np.sign(rng.normal(0, 1, (n_out, 3))) * 0.1
    truth = dict(ball=ball, air=air, model=model, state0=s0, spin=spin, params=params, outliers=idx,
                 extent=extent)
    return t, xyz, truth


def write_track(path, t, xyz, sigma=None):
    with open(path, "w") as f:
        f.write("t,x,y,z" + (",sigma" if sigma is not None else "") + "\n")
        for i in range(len(t)):
            row = [t[i], *xyz[i]] + ([sigma[i]] if sigma is not None else [])
            f.write(",".join(f"{v:.9g}" for v in row) + "\n")
