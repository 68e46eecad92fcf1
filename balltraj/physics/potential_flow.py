"""Ideal (potential) flow past a rotating circular cylinder: the Kutta-Joukowski results.

Used as plausibility bounds on fitted lift: a real ball's lift coefficient stays far below the
ideal-flow sectional value 2 pi S, and no steady lift exceeds the 4 pi limit (Prandtl).

Convention: uniform stream U along +x, cylinder radius a, circulation Gamma > 0 counter-clockwise
(the flow a cylinder spinning counter-clockwise drags round with it). The complex potential is
w(z) = U (z + a^2/z) - i Gamma/(2 pi) ln z.

References
----------
Kutta 1902, Joukowski 1906; e.g. Anderson, *Fundamentals of Aerodynamics*, sections 3.15-3.16
(from memory); Prandtl 1925 for the 4 pi limit (from memory).
"""

from __future__ import annotations

import numpy as np

MAX_IDEAL_LIFT_COEFFICIENT = 4 * np.pi  # C_l at S = 2, where the stagnation points merge


def circulation_from_spin(radius_m, spin_rate_rad_s):
    """Circulation of a flow moving with the wall, Gamma = 2 pi a^2 omega [m^2/s]."""
    return 2 * np.pi * np.asarray(radius_m) ** 2 * np.asarray(spin_rate_rad_s)


def surface_tangential_velocity(theta, stream_speed, radius_m, circulation):
    """Tangential surface velocity u_theta = -2 U sin(theta) + Gamma / (2 pi a) [m/s]."""
    return -2 * stream_speed * np.sin(theta) + circulation / (2 * np.pi * radius_m)


def surface_pressure_coefficient(theta, stream_speed, radius_m, circulation):
    """C_p = 1 - (u_theta / U)^2 on the surface (Bernoulli)."""
    u = surface_tangential_velocity(theta, stream_speed, radius_m, circulation)
    return 1 - (u / stream_speed) ** 2


def kutta_joukowski_lift_per_span(air_density, stream_speed, circulation):
    """Force per unit span, L' = rho U Gamma [N/m]; perpendicular to the stream, drag is zero.

    For counter-clockwise Gamma and a stream along +x the force points along -y.
    """
    return air_density * stream_speed * circulation


def stagnation_angles(stream_speed, radius_m, circulation):
    """Polar angles [rad] of the surface stagnation points, sin(theta) = Gamma/(4 pi U a).

    Two points for Gamma < 4 pi U a, one (theta = pi/2 or -pi/2) at equality, none on the surface
    beyond (the stagnation point leaves the body).
    """
    s = circulation / (4 * np.pi * stream_speed * radius_m)
    if abs(s) > 1 + 1e-12:
        return np.array([])
    s = float(np.clip(s, -1, 1))
    th = np.arcsin(s)
    if abs(abs(s) - 1) < 1e-12:
        return np.array([th])
    return np.array([th, np.pi - th])


def sectional_lift_coefficient(spin_parameter):
    """C_l = L' / (0.5 rho U^2 2a) = 2 pi S with S = a omega / U (wall-following circulation)."""
    return 2 * np.pi * np.asarray(spin_parameter, dtype=float)


def ideal_lift_bound(spin_parameter):
    """Upper bound on a plausible lift coefficient: min(2 pi S, 4 pi)."""
    return np.minimum(sectional_lift_coefficient(np.abs(spin_parameter)), MAX_IDEAL_LIFT_COEFFICIENT)
