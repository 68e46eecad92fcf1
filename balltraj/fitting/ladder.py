"""The ladder of aerodynamic models a flight fit climbs, and how the data choose a rung.

Real balls are not the catalogue's ball (seams, wear, panels; coefficients that change with speed
and spin), so the fit starts from the ball's catalogue laws and adds, one rung at a time, the
freedoms published trajectory studies use. Every rung keeps the unknowns of the rungs below it
(nested models), so each continues from the simpler rung's solution; the last five are siblings,
each one freedom on top of drag_speed (see RUNG_PARENT).

=============  ======================  ==========================================================
rung           adds unknown(s)         form (source)
=============  ======================  ==========================================================
catalogue      -                       the ball's catalogue C_D and C_L laws
drag_scale     log_drag_scale          C_D = k C_D,cat: one fitted drag coefficient, as in pitch
                                       fits (Nathan 2008; Kagan & Nathan 2014)
drag_speed     drag_re_exponent        C_D = k C_D,cat (Re/Re_0)^a: a local power law in Re, the
                                       usual description of speed-dependent drag (common practice;
                                       cf. the speed-dependent baseball drag of Giordano & Nakanishi)
drag_crisis    log_re_shift            C_D,cat(e^c Re): the catalogue curve slid along Re, as
                                       roughness moves a drag crisis (Achenbach 1974, from memory)
drag_spin      drag_spin_slope         + b S: drag rising with spin (Stepanek 1988; the linear spin
                                       term of baseball trajectory models, from memory)
lift_shape     lift_exponent           C_L = C_L,cat(S_0) (S/S_0)^p: a free-shape lift curve with two
                                       parameters (its value at launch, carried by the spin rate,
                                       and its log-slope p): linear (p = 1), saturating (p < 1),
                                       power law
spin_decay     spin_decay_rate         omega(t) = omega_0 exp(-t/tau), rate 1/tau (Smits & Smith
                                       1994 decay; Nathan 2008 spin-down note)
wind           wind_x, wind_y          a constant horizontal wind (common practice)
=============  ======================  ==========================================================

The rung is chosen by an information criterion on the Gaussian likelihood with the noise level
profiled out: AICc = n ln(RSS / n) + 2k + 2k(k + 1)/(n - k - 1) by default (Hurvich & Tsai 1989),
which suits a set of models none of which is exactly true (Burnham & Anderson 2002), or
BIC = n ln(RSS / n) + k ln n (Schwarz 1978). Pure computation.
"""

from __future__ import annotations

import math
from dataclasses import replace

import numpy as np

from ..errors import InputError
from ..physics.flight import FlightModel

RUNGS = ("catalogue", "drag_scale", "drag_speed", "drag_crisis", "drag_spin", "lift_shape", "spin_decay", "wind")
RUNG_ADDS = {
    "catalogue": (),
    "drag_scale": ("log_drag_scale",),
    "drag_speed": ("drag_re_exponent",),
    "drag_crisis": ("log_re_shift",),
    "drag_spin": ("drag_spin_slope",),
    "lift_shape": ("lift_exponent",),
    "spin_decay": ("spin_decay_rate",),
    "wind": ("wind_x", "wind_y"),
}
TYPICAL = {"log_re_shift": 0.1, "log_drag_scale": 0.1, "drag_re_exponent": 0.1, "drag_spin_slope": 0.1, "lift_exponent": 0.3,
           "spin_decay_rate": 0.05, "wind_x": 1.0, "wind_y": 1.0,
           "drag_spin_split": 0.1, "log_lift_scale": 0.1, "lift_tilt": 0.1}
# (the last three are no rung's: the spin-drag and lift-law nuisances, fitting/nuisance.py)
RUNG_SOURCES = {
    "catalogue": "the ball's catalogue laws",
    "drag_scale": "fitted drag scale (Nathan 2008; Kagan & Nathan 2014)",
    "drag_speed": "drag as a power law in Re (common practice; Giordano & Nakanishi 2006 speed-dependent drag)",
    "drag_crisis": "the catalogue drag curve slid along Re (roughness moves the crisis; Achenbach 1974)",
    "drag_spin": "drag rising linearly with the spin parameter (Stepanek 1988; baseball trajectory models)",
    "lift_shape": "free-shape lift C_L(S0)(S/S0)^p: linear, saturating or power law (Nathan 2008; Stepanek 1988)",
    "spin_decay": "exponential spin decay (Smits & Smith 1994; Nathan 2008 spin-down note)",
    "wind": "constant horizontal wind (common practice)",
}


def check_rung(name: str) -> str:
    """The rung name, or "auto"; raises InputError naming the valid ones."""
    if name == "auto" or name in RUNGS:
        return name
    raise InputError(f"unknown aerodynamic model {name!r}", hint=f"choose auto or one of: {', '.join(RUNGS)}",
                     about="aero_model")


# Each rung continues from its parent. The first three form a chain; the last five each add one
# freedom to "drag_speed" (siblings): added on top of each other they are nearly degenerate along
# one flight (spin-dependent drag, lift shape and spin decay all change the force as the ball slows),
# which makes the fits slow and the choice arbitrary.
RUNG_PARENT = {"catalogue": None, "drag_scale": "catalogue", "drag_speed": "drag_scale", "drag_crisis": "drag_speed",
               "drag_spin": "drag_speed",
               "lift_shape": "drag_speed", "spin_decay": "drag_speed", "wind": "drag_speed"}


def rung_chain(rung: str) -> tuple[str, ...]:
    """The rungs from the catalogue up to ``rung``, parent first."""
    out = [rung]
    while RUNG_PARENT[out[-1]] is not None:
        out.append(RUNG_PARENT[out[-1]])
    return tuple(reversed(out))


def rung_names(rung: str) -> tuple[str, ...]:
    """Unknowns added by ``rung`` and by the rungs it continues from, in ladder order."""
    out: list[str] = []
    for r in rung_chain(rung):
        out += RUNG_ADDS[r]
    return tuple(out)


def batch_model(base: FlightModel, names, values, launch_speed, spin_magnitude) -> FlightModel:
    """The flight model of a batch of parameter sets of a rung.

    Parameters
    ----------
    base : the catalogue model (with any user-given wind)
    names : the rung's unknowns (see :func:`rung_names`)
    values : ndarray, shape (B, len(names)), their values
    launch_speed : ndarray, shape (B,) [m/s], air-relative launch speed of each set (anchors Re_0, S_0)
    spin_magnitude : ndarray, shape (B,) [rad/s], transverse launch spin of each set

    The drag scale itself is applied through ``FlightParameters.drag_scale`` (see
    :func:`decay_and_scale`), so that a plain catalogue model with a scale stays cheap.
    """
    col = {n: np.asarray(values)[:, i] for i, n in enumerate(names)}
    if not col:
        return base
    changes = {}
    s0 = base.radius_m * np.asarray(spin_magnitude, float) / np.maximum(np.asarray(launch_speed, float), 1e-6)
    drag_names = {"drag_re_exponent", "drag_spin_slope", "log_re_shift"}
    if "drag_spin_split" in col and np.any(col["drag_spin_split"] != 0):
        drag_names.add("drag_spin_split")  # a zero split leaves the law as it is (and its name in the record)
    if drag_names & set(col):
        re0 = base.air_density * base.diameter_m / base.air_viscosity * np.asarray(launch_speed, float)
        split = col.get("drag_spin_split", 0.0)  # a share split * S0 of the launch drag moved to the spin
        changes["drag_model"] = "modified"
        changes["drag_params"] = {"base": base.drag_model, "base_params": dict(base.drag_params), "scale": 1.0,
                                  "re_exponent": col.get("drag_re_exponent", 0.0), "reference_re": re0,
                                  "spin_slope": col.get("drag_spin_slope", 0.0) + split,
                                  "re_shift": np.exp(col["log_re_shift"]) if "log_re_shift" in col else 1.0,
                                  "offset": -split * s0}
    # the lift law's nuisances (fitting/nuisance.py), where not all zero (a zero level and tilt leave the law
    # as it is, and its name in the record)
    level, tilt = col.get("log_lift_scale", 0.0), col.get("lift_tilt", 0.0)
    if "lift_exponent" in col:
        changes["lift_model"] = "power_about"
        changes["lift_params"] = {"base": base.lift_model, "base_params": dict(base.lift_params),
                                  "reference_s": s0, "exponent": col["lift_exponent"], "log_scale": level}
    elif np.any(level != 0) or np.any(tilt != 0):
        changes["lift_model"] = "tilted"
        changes["lift_params"] = {"base": base.lift_model, "base_params": dict(base.lift_params), "reference_s": s0,
                                  "log_scale": level, "tilt": tilt}
    if "wind_x" in col:
        w = base.wind_mps
        changes["wind_mps"] = (w[0] + col["wind_x"], w[1] + col["wind_y"], w[2] + 0.0 * col["wind_x"])
    return replace(base, **changes) if changes else base


def decay_and_scale(names, values) -> tuple[np.ndarray | None, np.ndarray | None]:
    """(spin_decay_s (B,), drag_scale (B,)) of a batch, None where the rung has no such unknown."""
    col = {n: np.asarray(values)[:, i] for i, n in enumerate(names)}
    tau = None
    if "spin_decay_rate" in col:
        rate = col["spin_decay_rate"]
        with np.errstate(divide="ignore"):
            tau = np.where(rate == 0, np.inf, 1.0 / np.where(rate == 0, 1.0, rate))
    scale = np.exp(col["log_drag_scale"]) if "log_drag_scale" in col else None
    return tau, scale


def scalar_model(model: FlightModel) -> FlightModel:
    """A batch-of-one model turned into plain floats (for records and re-flying)."""
    def one(v):
        if isinstance(v, np.ndarray):
            return float(v.reshape(-1)[0])
        if isinstance(v, dict):
            return {k: one(x) for k, x in v.items()}
        return v

    return replace(model, wind_mps=tuple(float(one(w)) for w in model.wind_mps),
                   drag_params=one(dict(model.drag_params)), lift_params=one(dict(model.lift_params)))


def information_criteria(rss: float, n: int, k: int) -> dict:
    """BIC and AICc of a least-squares fit with the noise level profiled out.

    rss : residual sum of squares (in units of the assumed per-point sigma)
    n : number of residuals; k : number of unknowns
    """
    ll = n * math.log(max(rss, 1e-300) / n)
    aicc = ll + 2 * k + (2 * k * (k + 1) / (n - k - 1) if n - k - 1 > 0 else math.inf)
    return {"bic": ll + k * math.log(n), "aicc": aicc}
