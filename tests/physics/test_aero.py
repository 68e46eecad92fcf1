import numpy as np
import pytest

from balltraj.errors import InputError
from balltraj.physics.aero import (available_models, drag_coefficient, drag_morrison2013, invert_lift,
                                   lift_coefficient)


def test_morrison_against_fluids():
    # Source: Morrison 2013 correlation as implemented in fluids.drag.drag_sphere(Method="Morrison")
    from fluids.drag import drag_sphere

    for Re in np.geomspace(1e2, 1e6, 40):
        assert drag_morrison2013(Re) == pytest.approx(drag_sphere(Re, Method="Morrison"), rel=1e-10)


def test_morrison_check_values_and_crisis():
    # Source: docs/references.md 2.2 (fluids 1.3.1): Morrison(1e5) = 0.42468, minimum 0.0848 at Re 4.40e5
    assert drag_morrison2013(1e5) == pytest.approx(0.42468, abs=5e-6)
    Re = np.geomspace(1e5, 1e6, 20001)
    cd = drag_morrison2013(Re)
    assert cd.min() == pytest.approx(0.0848, abs=1e-4)
    assert Re[np.argmin(cd)] == pytest.approx(4.40e5, rel=0.01)


def test_subcritical_ball_drag_in_smooth_sphere_envelope():
    # Source: fluids drag_sphere correlations, subcritical 1e4-2e5 (docs/references.md 2.2): smooth-sphere
    # C_D 0.39-0.50; sports-ball subcritical defaults must sit in a band around that envelope
    from fluids.drag import drag_sphere

    env = [drag_sphere(Re, Method=m) for Re in (3e4, 1e5) for m in ("Barati", "Morrison", "Clift")]
    cd = drag_coefficient(1e5, 0.0, model="crisis", subcritical=0.47, supercritical=0.2, critical_re=2.6e5,
                          width_re=2e4)
    assert min(env) - 0.05 < cd < max(env) + 0.05


def test_sawicki_check_values():
    # Source: Sawicki, Hubbard & Stronge 2003, Am. J. Phys. 71:1152 (docs/references.md 10.5)
    assert lift_coefficient(0.05, model="sawicki2003") == pytest.approx(0.075)
    assert lift_coefficient(0.1 - 1e-12, model="sawicki2003") == pytest.approx(0.15)
    assert lift_coefficient(0.1, model="sawicki2003") == pytest.approx(0.15)
    assert lift_coefficient(0.2, model="sawicki2003") == pytest.approx(0.21)
    assert lift_coefficient(0.3, model="sawicki2003") == pytest.approx(0.27)
    # docs/references.md 2.4: baseball 40 m/s, 2200 rpm, S = 0.2125 -> C_L = 0.2175
    assert lift_coefficient(0.2125, model="sawicki2003") == pytest.approx(0.2175)


def test_unknown_model_names_valid_choices():
    with pytest.raises(InputError) as e:
        lift_coefficient(0.1, model="magic")
    assert "sawicki2003" in str(e.value)
    with pytest.raises(InputError) as e:
        drag_coefficient(1e5, model="magic")
    assert "morrison2013" in str(e.value)
    assert "sawicki2003" in available_models()["lift"]


@pytest.mark.parametrize("model", ["sawicki2003", "proportional"])
def test_invert_lift_round_trip(model):
    S = np.array([0.02, 0.08, 0.1, 0.15, 0.3])
    cl = lift_coefficient(S, model=model)
    assert invert_lift(cl, model) == pytest.approx(S, abs=2e-3)


def test_crisis_drag_is_monotone_and_bounded():
    Re = np.geomspace(1e4, 1e6, 200)
    cd = drag_coefficient(Re, model="crisis", subcritical=0.5, supercritical=0.2, critical_re=2.5e5, width_re=2e4)
    assert np.all(np.diff(cd) <= 1e-15) and cd.max() <= 0.5 and cd.min() >= 0.2


def test_the_tilted_lift_law_is_its_base_at_zero_and_moves_level_and_slope_as_named():
    # invariants of C_L = e^c C_L,base(S) (S/S_ref)^b (the lift law's nuisances in a fit)
    from balltraj.physics.aero import lift_coefficient

    S = np.array([0.05, 0.1, 0.2, 0.4])
    base = {"base": "rational", "base_params": {"a": 0.981, "b": 2.022}, "reference_s": 0.2}
    plain = lift_coefficient(S, None, model="rational", a=0.981, b=2.022)
    assert np.allclose(lift_coefficient(S, None, model="tilted", **base), plain, rtol=1e-12)
    lev = lift_coefficient(S, None, model="tilted", log_scale=0.3, **base)
    assert np.allclose(lev / plain, np.exp(0.3), rtol=1e-12)
    tilt = lift_coefficient(S, None, model="tilted", tilt=-0.4, **base)
    assert tilt[2] == pytest.approx(plain[2], rel=1e-12)  # unchanged at S_ref
    # the log-slope drops by 0.4 everywhere
    slope = np.diff(np.log(tilt)) / np.diff(np.log(S)) - np.diff(np.log(plain)) / np.diff(np.log(S))
    assert np.allclose(slope, -0.4, atol=1e-12)
    assert lift_coefficient(np.array([0.0]), None, model="tilted", tilt=-0.4, **base)[0] == 0.0
