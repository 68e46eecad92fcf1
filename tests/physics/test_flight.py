import math
from dataclasses import replace

import numpy as np
import pytest
from hypothesis import given, strategies as st
from scipy.integrate import solve_ivp

from balltraj.physics.air import air_conditions
from balltraj.physics.balls import get_ball
from balltraj.physics.flight import (FlightModel, FlightParameters, acceleration, fly, integrate, launch_state)
from balltraj.physics.reference import batch_deflections, plane_deflection

G = 9.80665
RPM = 2 * math.pi / 60


def vacuum_model():
    return FlightModel(mass_kg=0.145, diameter_m=0.07378, air_density=0.0, air_viscosity=1.8e-5,
                       drag_model="constant", drag_params={"value": 0.35}, lift_model="constant",
                       lift_params={"value": 0.0})


def baseball_reference_model():
    # docs/references.md 6.3: m = 0.145 kg, d = 73.78 mm, C_D = 0.35, rho = 1.225; its tables were computed
    # with the rounded v_t = 39.387 m/s (k = g / v_t^2), so the area is set from that v_t here
    area = (G / 39.387**2) * 2 * 0.145 / (1.225 * 0.35)
    return FlightModel(mass_kg=0.145, diameter_m=math.sqrt(4 * area / math.pi), air_density=1.225, air_viscosity=1.8e-5,
                       drag_model="constant", drag_params={"value": 0.35}, lift_model="constant",
                       lift_params={"value": 0.0})


def test_vacuum_projectile():
    # Source: textbook closed form; docs/references.md 6.2: v0 30 m/s, 45 deg -> R 91.7745, H 22.9436, T 4.3263
    m = vacuum_model()
    s0 = launch_state([0, 0, 0], 30.0, math.radians(45), 0.0)
    tr = fly(m, 0.0, s0, FlightParameters.make(1), ground_z=0.0, max_step=0.01)
    tg, sg = tr.first_crossing(2, 0.0, -1, after=0.1)
    assert tg[0] == pytest.approx(4.3263, abs=1e-4)
    assert sg[0, 0] == pytest.approx(91.7745, abs=1e-4)
    t_apex, s_apex = tr.first_crossing(5, 0.0, -1)
    assert s_apex[0, 2] == pytest.approx(22.9436, abs=1e-4)


def test_vertical_fall_with_quadratic_drag():
    # Source: v(t) = v_t tanh(g t / v_t), y = (v_t^2/g) ln cosh(g t / v_t); docs/references.md 6.3 table
    m = baseball_reference_model()
    k = m.k_factor * 0.35
    vt = math.sqrt(G / k)
    assert vt == pytest.approx(39.387, abs=1e-9)
    tr = integrate(m, 0.0, np.array([[0, 0, 1000.0, 0, 0, 0]]), FlightParameters.make(1), (0, 5.0), max_step=0.01)
    st_ = tr.sample([0.5, 1.0, 2.0, 5.0])[0]
    for (t, v_ref, y_ref), s in zip([(0.5, 4.8782, 1.2227), (1.0, 9.6089, 4.8535), (2.0, 18.1383, 18.8526),
                                     (5.0, 33.3547, 99.8867)], st_):
        # the table's inputs are printed to 5 significant digits: compare to 1e-5 relative
        assert -s[5] == pytest.approx(v_ref, rel=1e-5, abs=1e-4)
        assert 1000.0 - s[2] == pytest.approx(y_ref, rel=1e-5, abs=1e-4)
        assert 1000.0 - s[2] == pytest.approx(vt**2 / G * math.log(math.cosh(G * t / vt)), rel=1e-9)
        assert -s[5] == pytest.approx(vt * math.tanh(G * t / vt), rel=1e-9)


def test_up_throw_with_quadratic_drag():
    # Source: t_apex = (v_t/g) atan(v0/v_t); H = (v_t^2/2g) ln(1 + v0^2/v_t^2); docs/references.md 6.3
    m = baseball_reference_model()
    tr = integrate(m, 0.0, np.array([[0, 0, 0, 0, 0, 30.0]]), FlightParameters.make(1), (0, 4.0), max_step=0.01)
    t_apex, s = tr.first_crossing(5, 0.0, -1)
    assert t_apex[0] == pytest.approx(2.6144, abs=1e-4)
    assert s[0, 2] == pytest.approx(36.1877, abs=1e-4)


def test_horizontal_drag_only_decay():
    # Source: v(t) = v0/(1 + k v0 t), x = ln(1 + k v0 t)/k; docs/references.md 6.3 (k = 6.322e-3 1/m)
    m = replace(baseball_reference_model(), gravity=0.0)
    k = m.k_factor * 0.35
    assert k == pytest.approx(6.322e-3, rel=1e-3)
    tr = integrate(m, 0.0, np.array([[0, 0, 0, 40.0, 0, 0]]), FlightParameters.make(1), (0, 0.5), max_step=0.01)
    s = tr.sample([0.1, 0.2, 0.4])[0]
    for t, row in zip([0.1, 0.2, 0.4], s):
        assert row[3] == pytest.approx(40.0 / (1 + k * 40.0 * t), rel=1e-10)
        assert row[0] == pytest.approx(math.log(1 + k * 40.0 * t) / k, rel=1e-9)
    assert s[2, 3] == pytest.approx(36.3258, abs=1e-4) and s[2, 0] == pytest.approx(15.2416, abs=1e-4)


def test_magnus_only_circle():
    # Source: constant C_L, no gravity or drag: uniform circle of radius R = 2m/(rho A C_L)
    # (docs/references.md 6.1)
    m = FlightModel(mass_kg=0.43, diameter_m=0.22, air_density=1.2, air_viscosity=1.8e-5, gravity=0.0,
                    drag_model="constant", drag_params={"value": 0.0}, lift_model="constant",
                    lift_params={"value": 0.25})
    R = 2 * m.mass_kg / (m.air_density * math.pi * 0.11**2 * 0.25)
    p = FlightParameters.make(1, spin=[0, 0, 10.0])  # spin up: force along omega x v = +y for v along +x
    tr = integrate(m, 0.0, np.array([[0, 0, 0, 25.0, 0, 0]]), p, (0, 3.0), max_step=0.01)
    xy = tr.state[0, :, :2]
    centre = np.array([0.0, R])
    assert np.linalg.norm(xy - centre, axis=1) == pytest.approx(np.full(len(xy), R), rel=1e-8)


def _solve_ivp_crossing(m, p, s0, target_x, t_max):
    def rhs(t, y):
        return np.concatenate([y[3:], acceleration(m, p, 0.0, t, y[None])[0]])

    ev = lambda t, y: y[0] - target_x  # noqa: E731
    ev.terminal = True
    sol = solve_ivp(rhs, (0, t_max), s0, method="DOP853", rtol=1e-10, atol=1e-12, events=ev)
    return sol.t_events[0][0], sol.y_events[0][0]


def test_agrees_with_solve_ivp_at_the_plate():
    # Source: scipy.integrate.solve_ivp (DOP853, rtol 1e-10); plate 60 ft 6 in = 18.44 m (OBR)
    ball, air = get_ball("baseball"), air_conditions()
    m = FlightModel.for_ball(ball, air)
    s0 = launch_state([0, 0, 1.8], 42.0, math.radians(-1.5), math.radians(1.0))
    p = FlightParameters.make(1, spin=2300 * RPM * np.array([0.3, -0.9, 0.3]) / np.linalg.norm([0.3, -0.9, 0.3]))
    tr = fly(m, 0.0, s0, p, stop_x=18.44, ground_z=None)
    tc, sc = tr.first_crossing(0, 18.44)
    t_ref, y_ref = _solve_ivp_crossing(m, p, s0, 18.44, 2.0)
    assert np.abs(sc[0, :3] - y_ref[:3]).max() < 1e-4
    assert tc[0] == pytest.approx(t_ref, abs=1e-6)


def test_agrees_with_solve_ivp_over_a_golf_drive():
    # Source: scipy solve_ivp (DOP853, rtol 1e-10); 150 m drive at 70 m/s, 11 deg, 2800 rpm backspin
    ball, air = get_ball("golf"), air_conditions()
    m = FlightModel.for_ball(ball, air)
    s0 = launch_state([0, 0, 0], 62.0, math.radians(10), 0.0)
    p = FlightParameters.make(1, spin=[0, -2800 * RPM, 0])
    tr = fly(m, 0.0, s0, p, stop_x=150.0, ground_z=None)
    _, sc = tr.first_crossing(0, 150.0)
    _, y_ref = _solve_ivp_crossing(m, p, s0, 150.0, 20.0)
    assert np.abs(sc[0, :3] - y_ref[:3]).max() < 1e-3


def test_soccer_drag_crisis_agrees_with_solve_ivp():
    ball, air = get_ball("soccer"), air_conditions()
    m = FlightModel.for_ball(ball, air)
    s0 = launch_state([0, 0, 0.11], 27.0, math.radians(16), math.radians(-6))
    p = FlightParameters.make(1, spin=[0, 0, 60.0])
    tr = fly(m, 0.0, s0, p, stop_x=25.0, ground_z=None)
    _, sc = tr.first_crossing(0, 25.0)
    _, y_ref = _solve_ivp_crossing(m, p, s0, 25.0, 10.0)
    assert np.abs(sc[0, :3] - y_ref[:3]).max() < 1e-4


def test_energy_conserved_without_drag_and_lost_with_drag():
    # Source: conservation of mechanical energy (Magnus force does no work: it is perpendicular to v)
    m0 = FlightModel(mass_kg=0.145, diameter_m=0.074, air_density=1.2, air_viscosity=1.8e-5,
                     drag_model="constant", drag_params={"value": 0.0}, lift_model="sawicki2003")
    p = FlightParameters.make(1, spin=[50.0, -200.0, 30.0])
    s0 = launch_state([0, 0, 2], 40, math.radians(20), 0.3)
    tr = integrate(m0, 0.0, s0[None], p, (0, 3.0), max_step=0.005)
    e = 0.5 * np.sum(tr.state[0, :, 3:] ** 2, axis=1) + G * tr.state[0, :, 2]
    assert np.ptp(e) / e[0] < 1e-9
    m1 = replace(m0, drag_params={"value": 0.35})
    tr = integrate(m1, 0.0, s0[None], p, (0, 3.0), max_step=0.005)
    e = 0.5 * np.sum(tr.state[0, :, 3:] ** 2, axis=1) + G * tr.state[0, :, 2]
    assert np.all(np.diff(e) < 0)


def test_backward_integration_round_trip():
    m = FlightModel.for_ball(get_ball("baseball"), air_conditions())
    s0 = launch_state([0, 0, 1.8], 40, 0.0, 0.0)
    p = FlightParameters.make(1, spin=[0, -230, 0])
    fwd = integrate(m, 0.0, s0[None], p, (0, 0.4))
    end = fwd.state[0, -1]
    back = integrate(m, 0.4, end[None], p, (0.0, 0.4), spin_t0=0.0)
    assert back.sample([0.0])[0, 0] == pytest.approx(s0, abs=1e-8)


def test_batched_equals_one_by_one():
    m = FlightModel.for_ball(get_ball("tennis"), air_conditions())
    rng = np.random.default_rng(1)
    n = 7
    s0 = np.column_stack([np.zeros((n, 3)), rng.uniform(20, 50, n), rng.uniform(-3, 3, n), rng.uniform(0, 8, n)])
    spin = rng.normal(0, 200, (n, 3))
    tb = integrate(m, 0.0, s0, FlightParameters.make(n, spin=spin), (0, 0.8))
    for i in range(n):
        ti = integrate(m, 0.0, s0[i:i + 1], FlightParameters.make(1, spin=spin[i]), (0, 0.8))
        assert np.abs(ti.state[0] - tb.state[i]).max() < 1e-12


def test_deflection_of_section_8_3_pitch():
    # Source: docs/references.md 8.3 (Sawicki lift, C_D 0.35, K = 0.018062 1/m, 40 m/s, 2200 rpm backspin):
    # upward deflection against the no-spin path 0.566 m at x = 16.8 m, flight time 0.4429 s
    m = FlightModel(mass_kg=0.145, diameter_m=0.07378, air_density=0.0, air_viscosity=1.8e-5,
                    drag_model="constant", drag_params={"value": 0.35}, lift_model="sawicki2003")
    rho = 0.018062 * 2 * 0.145 / (math.pi * 0.03689**2)
    m = replace(m, air_density=rho)
    s0 = np.array([0, 0, 1.8, 40.0, 0, 0])
    p = FlightParameters.make(1, spin=[0, -2200 * RPM, 0])
    d = plane_deflection(m, 0.0, s0, p, 16.8)
    assert d.time_s == pytest.approx(0.4429, abs=2e-4)
    assert d.reference_time_s == pytest.approx(0.4431, abs=2e-4)
    # docs/references.md compares at the same time; at the plane the difference is within a few mm of it
    assert d.vertical_m == pytest.approx(0.566, abs=0.01)
    assert d.speed_at_plane_mps == pytest.approx(36.06, abs=0.02)
    assert abs(d.horizontal_m) < 1e-12


@given(speed=st.floats(15, 60), elev=st.floats(-5, 30), az=st.floats(-10, 10),
       wy=st.floats(-300, 300), wz=st.floats(-300, 300))
def test_mirrored_spin_gives_mirrored_deflection(speed, elev, az, wy, wz):
    m = FlightModel.for_ball(get_ball("baseball"), air_conditions())
    s0 = launch_state([0, 0, 1.5], speed, math.radians(elev), math.radians(az))
    s0m = s0.copy()
    s0m[[1, 4]] *= -1  # mirror in the x-z plane
    spin = np.array([20.0, wy, wz])
    # a mirror (y -> -y) maps the axial vector omega to (-wx, wy, -wz)
    spin_m = np.array([-20.0, wy, -wz])
    d = batch_deflections(m, 0.0, np.stack([s0, s0m]), FlightParameters.make(2, spin=np.stack([spin, spin_m])), 10.0)
    assert np.all(np.isfinite(d))
    assert d[0, 0] == pytest.approx(-d[1, 0], abs=1e-9)
    assert d[0, 1] == pytest.approx(d[1, 1], abs=1e-9)


@given(x=st.floats(-5, 5), z=st.floats(0, 3), speed=st.floats(1, 80), elev=st.floats(-80, 80),
       spin=st.floats(0, 1000))
def test_random_launch_states_stay_finite(x, z, speed, elev, spin):
    m = FlightModel.for_ball(get_ball("soccer"), air_conditions())
    s0 = launch_state([x, 0, z], speed, math.radians(elev), 0.2)
    tr = integrate(m, 0.0, s0[None], FlightParameters.make(1, spin=[0, 0, spin]), (0, 1.0))
    assert np.all(np.isfinite(tr.state))
    # speed never exceeds what gravity alone could add
    assert np.linalg.norm(tr.state[0, :, 3:], axis=1).max() <= speed + G * 1.0 + 1e-9
