"""Aerodynamic coefficient models: one function per published model, a registry, dispatchers.

Drag models take the Reynolds number and the spin parameter, lift models the spin parameter of
the transverse spin (S = r |omega_perp| / |v|) and the Reynolds number; all work on numpy arrays.
``available_models()`` lists them; an unknown name raises listing the valid ones.

Which parts are read in a source and which are recalled is said in each entry's ``source``.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Callable, Mapping

import numpy as np

from ..errors import InputError
from .aero_published import (drag_giordano_baseball, drag_modified, drag_spin_linear, drag_stepanek1988,
                             lift_power_about, lift_rational, lift_stepanek1988, lift_tilted)


@dataclass(frozen=True)
class AeroModel:
    name: str
    kind: str  # "drag" or "lift"
    function: Callable
    valid_re: tuple[float, float]
    valid_s: tuple[float, float]
    params: tuple[str, ...]
    source: str


# ---------------------------------------------------------------------------------------- drag
def drag_constant(reynolds, spin_parameter=0.0, *, value=0.35):
    """Constant drag coefficient C_D = value [-] (common practice for short flights)."""
    return np.full(np.broadcast(np.asarray(reynolds), np.asarray(spin_parameter)).shape, float(value))


def drag_morrison2013(reynolds, spin_parameter=0.0):
    """Smooth-sphere drag with the drag crisis, Morrison (2013).

    C_D = 24/Re + 2.6 (Re/5) / (1 + (Re/5)^1.52) + 0.411 (Re/263000)^-7.94 / (1 + (Re/263000)^-8)
    + Re^0.8 / 461000, valid 0 < Re < 1e6.

    References
    ----------
    F. A. Morrison, *An Introduction to Fluid Mechanics*, Cambridge University Press 2013,
    data correlation for flow past a sphere (as given in the fluids library docstring).

    >>> round(float(drag_morrison2013(1e5)), 5)
    0.42468
    """
    Re = np.maximum(np.asarray(reynolds, dtype=float), 1e-12)
    x = Re / 263000.0
    return (24.0 / Re + 2.6 * (Re / 5.0) / (1 + (Re / 5.0) ** 1.52)
            + 0.411 * x**-7.94 / (1 + x**-8.0) + Re**0.8 / 461000.0) + 0.0 * np.asarray(spin_parameter)


def drag_crisis(reynolds, spin_parameter=0.0, *, subcritical=0.47, supercritical=0.20,
                critical_re=2.6e5, width_re=2.0e4):
    """A smooth drag crisis: C_D falls from ``subcritical`` to ``supercritical`` around ``critical_re``.

    C_D = sup + (sub - sup) / (1 + exp((Re - Re_c) / w)).

    This logistic step is our own interpolation of reported ranges, not a published curve; the
    ball entries that use it say where their numbers come from (e.g. soccer: Re_c in 2.2-3.0e5,
    Asai et al. 2007, Sports Eng. 10:101, abstract).
    """
    Re = np.asarray(reynolds, dtype=float)
    z = np.clip((Re - critical_re) / width_re, -60.0, 60.0)
    return supercritical + (subcritical - supercritical) / (1.0 + np.exp(z)) + 0.0 * np.asarray(spin_parameter)


# ---------------------------------------------------------------------------------------- lift
def lift_sawicki2003(spin_parameter, reynolds=None):
    """Baseball lift, bilinear in the spin parameter (Sawicki, Hubbard & Stronge 2003).

    C_L = 1.5 S for S < 0.1; C_L = 0.09 + 0.6 S for S >= 0.1 (continuous at S = 0.1).

    References
    ----------
    Sawicki, Hubbard & Stronge 2003, Am. J. Phys. 71(11):1152-1162, doi:10.1119/1.1604384
    (formula from memory, matching several secondary citations).

    >>> float(lift_sawicki2003(0.2))
    0.21
    """
    S = np.asarray(spin_parameter, dtype=float)
    return np.where(S < 0.1, 1.5 * S, 0.09 + 0.6 * S)


def lift_proportional(spin_parameter, reynolds=None, *, slope=1.0):
    """Lift proportional to the spin parameter, C_L = slope * S.

    With slope 1 this is the C_L ~ S heuristic used in Nathan's 2008 spin-down note (attributed to
    Adair, *The Physics of Baseball*); used here as a default for balls without a confirmed model.
    """
    return float(slope) * np.asarray(spin_parameter, dtype=float)


def lift_constant(spin_parameter, reynolds=None, *, value=0.2):
    """Constant lift coefficient whenever the ball spins (common practice for fitted flights)."""
    S = np.asarray(spin_parameter, dtype=float)
    return np.where(S > 0, float(value), 0.0)


def lift_ideal_cylinder(spin_parameter, reynolds=None):
    """Ideal-flow bound: sectional lift of a rotating cylinder, C_l = 2 pi S, capped at 4 pi.

    A plausibility bound for fitted lift, not a model of a ball; see
    :mod:`balltraj.physics.potential_flow`.
    """
    S = np.abs(np.asarray(spin_parameter, dtype=float))
    return np.minimum(2 * np.pi * S, 4 * np.pi)


_DRAG: dict[str, AeroModel] = {
    m.name: m
    for m in [
        AeroModel("constant", "drag", drag_constant, (0, np.inf), (0, np.inf), ("value",),
                  "constant coefficient (common practice)"),
        AeroModel("morrison2013", "drag", drag_morrison2013, (0, 1e6), (0, 0), (),
                  "Morrison 2013, smooth sphere with drag crisis (formula as in the fluids library)"),
        AeroModel("crisis", "drag", drag_crisis, (1e3, 1e6), (0, np.inf),
                  ("subcritical", "supercritical", "critical_re", "width_re"),
                  "logistic drag crisis between stated coefficients (own interpolation of ranges)"),
        AeroModel("giordano_baseball", "drag", drag_giordano_baseball, (1e4, 4e5), (0, np.inf),
                  ("diameter_m", "mass_kg", "kinematic_viscosity", "air_density"),
                  "Giordano & Nakanishi 2006 eq. 2.26 after Adair: speed-dependent baseball drag (from memory)"),
        AeroModel("stepanek1988", "drag", drag_stepanek1988, (8e4, 3e5), (0, 1.0), (),
                  "Stepanek 1988, Am. J. Phys. 56:138: tennis drag vs spin parameter (coefficients from memory)"),
        AeroModel("spin_linear", "drag", drag_spin_linear, (0, np.inf), (0, 1.0), ("value", "spin_slope"),
                  "C_D = C_D0 + slope*S, the linear spin term of baseball trajectory models (from memory)"),
        AeroModel("modified", "drag", drag_modified, (0, np.inf), (0, np.inf),
                  ("base", "base_params", "scale", "re_exponent", "reference_re", "spin_slope", "re_shift", "offset"),
                  "a base law times a scale and a power of Re, plus a linear spin term (the fit's ladder)"),
    ]
}
_LIFT: dict[str, AeroModel] = {
    m.name: m
    for m in [
        AeroModel("sawicki2003", "lift", lift_sawicki2003, (1.1e5, 2.4e5), (0, 0.6), (),
                  "Sawicki, Hubbard & Stronge 2003, Am. J. Phys. 71:1152 (from memory, verify)"),
        AeroModel("proportional", "lift", lift_proportional, (0, np.inf), (0, 0.4), ("slope",),
                  "C_L = slope*S; slope 1 is the C_L~S heuristic of Nathan 2008 (spin-down note)"),
        AeroModel("constant", "lift", lift_constant, (0, np.inf), (0, np.inf), ("value",),
                  "constant coefficient (common practice)"),
        AeroModel("ideal_cylinder", "lift", lift_ideal_cylinder, (0, np.inf), (0, 2.0), (),
                  "Kutta-Joukowski rotating cylinder, C_l = 2 pi S up to 4 pi (bound only)"),
        AeroModel("stepanek1988", "lift", lift_stepanek1988, (8e4, 3e5), (0, 1.0), (),
                  "Stepanek 1988, Am. J. Phys. 56:138: tennis lift, saturating (coefficients from memory)"),
        AeroModel("rational", "lift", lift_rational, (0, np.inf), (0, np.inf), ("a", "b"),
                  "C_L = S/(a + b S), the saturating form of Stepanek 1988"),
        AeroModel("power_about", "lift", lift_power_about, (0, np.inf), (0, np.inf),
                  ("base", "base_params", "reference_s", "exponent", "log_scale"),
                  "a base law's C_L at S_ref times (S/S_ref)^exponent (the fit's ladder)"),
        AeroModel("tilted", "lift", lift_tilted, (0, np.inf), (0, np.inf),
                  ("base", "base_params", "reference_s", "log_scale", "tilt"),
                  "a base law times e^log_scale (S/S_ref)^tilt (the lift law's uncertainties in a fit)"),
    ]
}


def available_models(kind: str | None = None) -> dict[str, list[str]]:
    """Names of the registered models, by kind."""
    out = {"drag": sorted(_DRAG), "lift": sorted(_LIFT)}
    return out if kind is None else {kind: out[kind]}


def model_info(kind: str, name: str) -> AeroModel:
    table = _DRAG if kind == "drag" else _LIFT
    if name not in table:
        raise InputError(f"unknown {kind} model {name!r}", hint=f"choose one of: {', '.join(sorted(table))}")
    return table[name]


def _check(kind: str, name: str, params: Mapping[str, float]) -> AeroModel:
    info = model_info(kind, name)
    unknown = set(params) - set(info.params)
    if unknown:
        raise InputError(f"{kind} model {name!r} has no parameter(s) {', '.join(sorted(unknown))}",
                         hint=f"its parameters are: {', '.join(info.params) or 'none'}")
    for k, v in params.items():
        if k in ("base", "base_params"):
            continue
        if isinstance(v, bool) or not isinstance(v, (int, float)) or not np.isfinite(v):
            raise InputError(f"{kind} model parameter {k!r} must be a finite number")
    return info


def check_drag_model(name: str, params: Mapping[str, float]) -> AeroModel:
    return _check("drag", name, params)


def check_lift_model(name: str, params: Mapping[str, float]) -> AeroModel:
    return _check("lift", name, params)


def drag_coefficient(reynolds, spin_parameter=0.0, model: str = "constant", **params):
    """C_D from the named drag model (see :func:`available_models`)."""
    return model_info("drag", model).function(reynolds, spin_parameter, **params)


def lift_coefficient(spin_parameter, reynolds=None, model: str = "sawicki2003", **params):
    """C_L from the named lift model, evaluated with the transverse spin parameter."""
    return model_info("lift", model).function(spin_parameter, reynolds, **params)


def invert_lift(lift_coefficient_value, model: str, reynolds=None, s_max: float = 3.0, **params):
    """Spin parameter S giving the lift coefficient under a monotone lift model (NaN if none).

    Used to turn a fitted lift into a transverse spin rate (which then depends on the model).
    """
    cl = np.atleast_1d(np.asarray(lift_coefficient_value, dtype=float))
    grid = np.linspace(0.0, s_max, 3001)
    curve = lift_coefficient(grid, reynolds, model=model, **params)
    if not np.all(np.diff(curve) >= 0) or curve[-1] <= curve[0]:
        return np.full(cl.shape, np.nan)
    # drop flat parts so interpolation is well defined
    keep = np.concatenate([[True], np.diff(curve) > 0])
    s = np.interp(np.abs(cl), curve[keep], grid[keep], left=0.0, right=np.nan)
    return s
