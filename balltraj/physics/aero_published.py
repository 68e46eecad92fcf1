"""More published aerodynamic laws, and the two modified forms the fit's model ladder uses.

Each function takes (reynolds, spin_parameter) for drag, (spin_parameter, reynolds) for lift, works
on numpy arrays (parameters may be arrays too: they broadcast, which is how a fit evaluates many
parameter sets in one batched integration) and names its source. The registry in
:mod:`balltraj.physics.aero` lists them.
"""

from __future__ import annotations

import math

import numpy as np

# dry air at 20 degC, 101325 Pa (docs/references.md 2.4): used only to turn the speed-based laws into
# functions of the Reynolds number
KINEMATIC_VISCOSITY_20C = 1.5054e-5  # [m^2/s]
STANDARD_AIR_DENSITY = 1.2041  # [kg/m^3] (docs/references.md: dry air, 20 degC, 101325 Pa)


def drag_giordano_baseball(reynolds, spin_parameter=0.0, *, diameter_m=0.0737, mass_kg=0.1453,
                           kinematic_viscosity=KINEMATIC_VISCOSITY_20C, air_density=STANDARD_AIR_DENSITY):
    """Speed-dependent drag of a baseball (Giordano & Nakanishi, after Adair).

    B2/m = 0.0039 + 0.0058 / (1 + exp((v - 35) / 5))  [1/m], v in m/s, so that the drag
    acceleration is (B2/m) v^2; turned into C_D = 2 m (B2/m) / (rho A) with A = pi d^2 / 4.
    The speed is v = Re nu / d. C_D falls from about 0.55 at low speed to about 0.22 at high speed
    (a drag crisis spread by the seams).

    References
    ----------
    N. J. Giordano & H. Nakanishi, *Computational Physics*, 2nd ed., Pearson 2006, eq. 2.26 and
    Fig. 2.6 (from memory), fitted to the drag curve of R. K. Adair, *The Physics of Baseball*.

    >>> round(float(drag_giordano_baseball(1.0)), 3)   # v -> 0: B2/m = 0.0097 /m
    0.548
    """
    Re = np.asarray(reynolds, dtype=float)
    v = Re * kinematic_viscosity / diameter_m
    b2m = 0.0039 + 0.0058 / (1.0 + np.exp(np.clip((v - 35.0) / 5.0, -60, 60)))
    area = math.pi * diameter_m**2 / 4.0
    return 2.0 * mass_kg * b2m / (air_density * area) + 0.0 * np.asarray(spin_parameter)


def drag_stepanek1988(reynolds, spin_parameter=0.0):
    """Tennis-ball drag rising with the spin parameter (Stepanek 1988).

    C_D = 0.508 + [22.053 + 4.196 (1/S)^(5/2)]^(-2/5); 0.508 at S -> 0, about 0.80 at large S.

    References
    ----------
    A. Stepanek, "The aerodynamics of tennis balls - the topspin lob", Am. J. Phys. 56(2):138-142
    (1988), doi:10.1119/1.15692, eq. for C_D (coefficients from memory, as quoted in later
    trajectory studies).

    >>> round(float(drag_stepanek1988(1e5, 0.2)), 4)
    0.6167
    """
    S = np.maximum(np.asarray(spin_parameter, dtype=float), 1e-9)
    return 0.508 + (22.053 + 4.196 * S**-2.5) ** -0.4 + 0.0 * np.asarray(reynolds, dtype=float)


def lift_stepanek1988(spin_parameter, reynolds=None):
    """Tennis-ball lift, saturating in the spin parameter (Stepanek 1988).

    C_L = 1 / (2.022 + 0.981 / S); C_L -> 1/2.022 = 0.495 at large S.

    References
    ----------
    A. Stepanek, Am. J. Phys. 56(2):138-142 (1988), eq. for C_L (coefficients from memory).

    >>> round(float(lift_stepanek1988(0.2)), 4)
    0.1444
    """
    S = np.maximum(np.abs(np.asarray(spin_parameter, dtype=float)), 1e-12)
    return np.where(np.asarray(spin_parameter) == 0, 0.0, 1.0 / (2.022 + 0.981 / S))


def lift_rational(spin_parameter, reynolds=None, *, a=0.981, b=2.022):
    """Saturating lift of the rational form C_L = S / (a + b S) (the form of Stepanek 1988).

    Linear, C_L = S / a, at small S; saturates at 1 / b. With the defaults it is Stepanek's tennis
    law; other (a, b) describe other balls with the same saturating shape.
    """
    S = np.abs(np.asarray(spin_parameter, dtype=float))
    return S / (a + b * S)


def drag_spin_linear(reynolds, spin_parameter=0.0, *, value=0.30, spin_slope=0.3):
    """Drag rising linearly with the spin parameter: C_D = value + spin_slope * S.

    The linear spin term of baseball trajectory models (A. M. Nathan's trajectory calculator uses
    C_D = C_D0 + C_Dspin * spin; from memory); spin raises drag on tennis balls too (Goodwill,
    Chin & Haake 2004, from memory).
    """
    return value + spin_slope * np.abs(np.asarray(spin_parameter, dtype=float)) + 0.0 * np.asarray(reynolds)


def drag_modified(reynolds, spin_parameter=0.0, *, base="constant", base_params=None, scale=1.0,
                  re_exponent=0.0, reference_re=1.5e5, spin_slope=0.0, re_shift=1.0, offset=0.0):
    """A base drag law modified the way the fit's ladder does (common modelling forms):

    C_D = scale * C_D,base(re_shift Re, S) * (Re / Re_ref)^re_exponent + spin_slope * S + offset,
    never below zero. (``offset`` = -b S_0 with ``spin_slope`` = b moves a share b S_0 of the drag at
    launch to the spin without changing it: the spin-drag nuisance of balltraj.fitting.nuisance.)

    with Re / Re_ref held within 0.5-2 (a local law; beyond it the factor stays constant).

    ``re_shift`` slides the base curve along Re: surface roughness moves the drag crisis to other
    Reynolds numbers without changing its shape much (Achenbach 1974, J. Fluid Mech. 65:113; from
    memory).

    A power law in Re is the usual local description of drag that varies with speed; the linear
    spin term is that of :func:`drag_spin_linear`. ``scale``, ``re_exponent`` and ``spin_slope``
    may be arrays (one value per flight of a batch).
    """
    from .aero import drag_coefficient

    Re = np.asarray(reynolds, dtype=float)
    cd = drag_coefficient(Re * re_shift, spin_parameter, model=base, **dict(base_params or {}))
    # the power law is a local description: held constant beyond a factor 2 from Re_ref, so that a fitted
    # exponent cannot make the drag blow up on a slower (e.g. no-spin reference) path
    ratio = np.clip(np.maximum(Re, 1.0) / reference_re, 0.5, 2.0)
    out = scale * cd * ratio**re_exponent + spin_slope * np.abs(np.asarray(spin_parameter, dtype=float)) + offset
    return np.maximum(out, 0.0)


def lift_tilted(spin_parameter, reynolds=None, *, base="sawicki2003", base_params=None, reference_s=0.1,
                log_scale=0.0, tilt=0.0):
    """A base law moved in level and slope about a reference spin parameter:

    C_L = e^log_scale * C_L,base(S) * (S / S_ref)^tilt.

    With log_scale = tilt = 0 it is the base law itself, exactly; the two are the lift law's own
    uncertainties, which a fit that keeps the base law marginalises (fitting/nuisance.py): the level
    (a spin rate read from a flight is a quantity of the lift law assumed) and the log-slope
    d ln C_L / d ln S (linear lift, Nathan 2008, against saturating curves, Stepanek 1988).
    """
    from .aero import lift_coefficient

    S = np.abs(np.asarray(spin_parameter, dtype=float))
    s_ref = np.maximum(np.asarray(reference_s, dtype=float), 1e-9)
    c = lift_coefficient(S, reynolds, model=base, **dict(base_params or {}))
    with np.errstate(divide="ignore", invalid="ignore"):
        return np.where(S > 0, np.exp(log_scale) * c * (S / s_ref) ** np.asarray(tilt, dtype=float), 0.0)


def lift_power_about(spin_parameter, reynolds=None, *, base="sawicki2003", base_params=None, reference_s=0.1,
                     exponent=1.0, log_scale=0.0):
    """Lift as a power law about a reference spin parameter, anchored on a base law:

    C_L = e^log_scale * C_L,base(S_ref) * (S / S_ref)^exponent

    (log_scale: the lift level's nuisance of a fit, fitting/nuisance.py; 0 ties the curve to the base law).

    exponent 1 is linear lift, 0 < exponent < 1 a saturating curve, any other value a power law
    (the local form of the published curves: C_L ~ S for small S, Nathan 2008; saturation at large
    S, Stepanek 1988). The anchor C_L,base(S_ref) ties the fitted curve to the ball's catalogue law
    at launch, so the spin rate stays a quantity of that law.
    """
    from .aero import lift_coefficient

    S = np.abs(np.asarray(spin_parameter, dtype=float))
    s_ref = np.maximum(np.asarray(reference_s, dtype=float), 1e-9)
    c_ref = lift_coefficient(s_ref, reynolds, model=base, **dict(base_params or {}))
    with np.errstate(divide="ignore", invalid="ignore"):
        return np.where(S > 0, np.exp(log_scale) * c_ref * (S / s_ref) ** exponent, 0.0)
