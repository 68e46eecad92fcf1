import numpy as np
import pytest
from scipy.optimize import brentq

from balltraj.physics.potential_flow import (MAX_IDEAL_LIFT_COEFFICIENT, circulation_from_spin, ideal_lift_bound,
                                             kutta_joukowski_lift_per_span, sectional_lift_coefficient,
                                             stagnation_angles)

# Check values: docs/references.md section 7 (U = 10 m/s, a = 0.1 m, omega = 50 rad/s, rho = 1.225)
U, A, OMEGA, RHO = 10.0, 0.1, 50.0, 1.225


def _surface_velocity_from_complex_potential(theta, gamma):
    """Velocity on the surface from dw/dz of w = U(z + a^2/z) - i Gamma/(2 pi) ln z, independent of
    the module's closed forms."""
    z = A * np.exp(1j * theta)
    dwdz = U * (1 - A**2 / z**2) - 1j * gamma / (2 * np.pi * z)
    vel = np.conj(dwdz)  # u + i v
    return vel


def _forces_by_pressure_integral(gamma, n=200_000):
    theta = np.linspace(0, 2 * np.pi, n, endpoint=False)
    vel = _surface_velocity_from_complex_potential(theta, gamma)
    p = 0.5 * RHO * (U**2 - np.abs(vel) ** 2)  # Bernoulli, p_inf = 0
    dtheta = 2 * np.pi / n
    fx = -np.sum(p * np.cos(theta)) * A * dtheta
    fy = -np.sum(p * np.sin(theta)) * A * dtheta
    return fx, fy


def test_kutta_joukowski_by_surface_pressure_integration():
    # Source: Kutta-Joukowski theorem; docs/references.md 7: L' = 38.4845 N/m, zero drag
    gamma = circulation_from_spin(A, OMEGA)
    assert gamma == pytest.approx(np.pi)
    fx, fy = _forces_by_pressure_integral(gamma)
    assert abs(fx) < 1e-9  # d'Alembert: no drag
    assert -fy == pytest.approx(kutta_joukowski_lift_per_span(RHO, U, gamma), rel=1e-9)
    assert -fy == pytest.approx(38.4845, abs=1e-4)


@pytest.mark.parametrize("spin_parameter", [0.1, 0.5, 1.0, 1.7])
def test_sectional_lift_is_two_pi_s_by_integration(spin_parameter):
    omega = spin_parameter * U / A
    gamma = circulation_from_spin(A, omega)
    _, fy = _forces_by_pressure_integral(gamma)
    cl = -fy / (0.5 * RHO * U**2 * 2 * A)
    assert cl == pytest.approx(sectional_lift_coefficient(spin_parameter), rel=1e-9)


def test_stagnation_points_by_root_finding():
    # Source: sin(theta_s) = Gamma/(4 pi U a); docs/references.md 7: 14.4775 and 165.5225 degrees
    gamma = circulation_from_spin(A, OMEGA)

    def speed(th):
        v = _surface_velocity_from_complex_potential(np.array([th]), gamma)[0]
        # signed tangential component (counter-clockwise positive)
        return (v * np.conj(1j * np.exp(1j * th))).real

    roots = [brentq(speed, 0.0, np.pi / 2), brentq(speed, np.pi / 2, np.pi)]
    assert np.degrees(roots) == pytest.approx([14.4775, 165.5225], abs=1e-4)
    assert np.sort(stagnation_angles(U, A, gamma)) == pytest.approx(roots, abs=1e-9)


def test_single_stagnation_point_and_four_pi_limit():
    gamma = 4 * np.pi * U * A
    th = stagnation_angles(U, A, gamma)
    assert len(th) == 1 and th[0] == pytest.approx(np.pi / 2)
    # the surface speed has a double zero there: minimum of |v| is zero at pi/2 only
    theta = np.linspace(0, 2 * np.pi, 100001)
    sp = np.abs(_surface_velocity_from_complex_potential(theta, gamma))
    assert theta[np.argmin(sp)] == pytest.approx(np.pi / 2, abs=1e-4)
    assert len(stagnation_angles(U, A, 1.01 * gamma)) == 0
    # S = 2 at Gamma = 4 pi U a, and C_l = 4 pi there (Prandtl limit)
    assert sectional_lift_coefficient(2.0) == pytest.approx(MAX_IDEAL_LIFT_COEFFICIENT)
    assert ideal_lift_bound(5.0) == pytest.approx(4 * np.pi)
