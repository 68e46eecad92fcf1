"""The published laws added for the model ladder, the ladder's choice, the noise estimate, the
misfit test, the plausibility guards and the wind option."""
import math

import numpy as np
import pytest

from balltraj.fitting.flight_fit import FitOptions, fit_flight
from balltraj.fitting.misfit import hac_covariance, noise_estimate, runs_test
from balltraj.fitting.quality import fit_quality_record, flight_plausibility, has_impossible
from balltraj.fitting.results import TrackFit
from balltraj.physics.aero import drag_coefficient, lift_coefficient
from balltraj.physics.air import air_conditions
from balltraj.physics.balls import get_ball
from balltraj.physics.flight import FlightModel, FlightParameters, fly, launch_state
from balltraj.physics.reference import plane_deflection

from synth import make_track

RPM = 2 * math.pi / 60
NU = 1.5054e-5  # docs/references.md 2.4


# ------------------------------------------------------------------------------------ laws
def test_stepanek_laws_against_the_published_formulas():
    # Source: Stepanek 1988, Am. J. Phys. 56:138, C_L = 1/(2.022 + 0.981/S),
    # C_D = 0.508 + (22.053 + 4.196 S^-2.5)^-0.4 (coefficients from memory); limits read off the formulas
    for S in (0.05, 0.1, 0.2, 0.4):
        assert lift_coefficient(S, model="stepanek1988") == pytest.approx(1 / (2.022 + 0.981 / S), rel=1e-12)
    assert lift_coefficient(50.0, model="stepanek1988") == pytest.approx(1 / 2.022, abs=0.01)
    assert drag_coefficient(2e5, 1e-4, model="stepanek1988") == pytest.approx(0.508, abs=1e-3)
    assert drag_coefficient(2e5, 100.0, model="stepanek1988") == pytest.approx(0.508 + 22.053**-0.4, abs=1e-3)
    # the rational law with its defaults is Stepanek's lift (same formula, other spelling)
    S = np.linspace(0.01, 1, 50)
    assert np.allclose(lift_coefficient(S, model="rational"), lift_coefficient(S, model="stepanek1988"))


def test_giordano_drag_against_printed_b2m():
    # Source: Giordano & Nakanishi 2006, eq. 2.26 (from memory): B2/m = 0.0039 + 0.0058/(1+exp((v-35)/5)) 1/m;
    # limits 0.0097 (slow) and 0.0039 (fast), 0.0068 at v = 35 m/s
    d, m, rho = 0.0737, 0.1453, 1.2041
    area = math.pi * d * d / 4
    for v, b2m in ((1.0, 0.0097), (35.0, 0.0068), (90.0, 0.0039)):
        cd = drag_coefficient(v * d / NU, 0.0, model="giordano_baseball")
        assert cd * rho * area / (2 * m) == pytest.approx(b2m, abs=2e-5)


def test_modified_and_power_laws_reduce_to_their_base():
    # invariants: neutral modifications give back the base law; the power law is its base at S_ref
    Re = np.geomspace(5e4, 4e5, 9)
    base = drag_coefficient(Re, 0.1, model="crisis", subcritical=0.47, supercritical=0.2, critical_re=2.6e5,
                            width_re=2e4)
    mod = drag_coefficient(Re, 0.1, model="modified", base="crisis",
                           base_params={"subcritical": 0.47, "supercritical": 0.2, "critical_re": 2.6e5,
                                        "width_re": 2e4})
    assert np.allclose(mod, base, rtol=1e-12)
    assert drag_coefficient(1e5, 0.2, model="spin_linear", value=0.3, spin_slope=0.5) == pytest.approx(0.4)
    for s_ref in (0.05, 0.15, 0.3):
        assert lift_coefficient(s_ref, model="power_about", reference_s=s_ref, exponent=0.4) == pytest.approx(
            lift_coefficient(s_ref, model="sawicki2003"))
    S = np.linspace(0.01, 0.5, 20)
    assert np.allclose(lift_coefficient(S, model="power_about", base="proportional", reference_s=0.2, exponent=1.0),
                       S, rtol=1e-12)


# ------------------------------------------------------------------------------------ noise, runs, HAC
def test_noise_estimate_recovers_known_noise_on_uneven_times():
    rng = np.random.default_rng(4)
    t = np.sort(rng.uniform(0, 0.8, 300))
    path = np.stack([30 * t, 2 * np.sin(3 * t), 1.5 + 4 * t - 4.9 * t * t], axis=1)
    for sigma in (0.002, 0.005, 0.02):
        est = noise_estimate(t, path + rng.normal(0, sigma, path.shape))
        assert est == pytest.approx(sigma, rel=0.1)


def test_runs_test_tells_white_from_structured():
    rng = np.random.default_rng(5)
    assert abs(runs_test(rng.normal(size=(200, 3)))) < 3
    x = np.linspace(0, 3 * np.pi, 200)
    assert runs_test(np.sin(x)[:, None] + 0.1 * rng.normal(size=(200, 1))) < -8


def test_hac_equals_plain_covariance_for_white_residuals():
    # invariant: with lag 0 the sandwich of white, unit-variance residuals is close to (J'J)^-1
    rng = np.random.default_rng(6)
    J = rng.normal(size=(400, 3, 2))
    r = rng.normal(size=(400, 3))
    cov, _ = hac_covariance(J, r, bandwidth=0)
    plain = np.linalg.inv(np.einsum("nck,ncj->kj", J, J))
    assert np.allclose(np.diag(cov), np.diag(plain), rtol=0.2)


# ------------------------------------------------------------------------------------ the ladder
def _track_with(ball_name, drag_model, drag_params, lift_model, speed, el_deg, rpm, axis, rate, noise, t_end, seed=0,
                wind=(0.0, 0.0, 0.0)):
    ball = get_ball(ball_name)
    air = air_conditions()
    truth = FlightModel(mass_kg=ball.mass_kg, diameter_m=ball.diameter_m, air_density=air.density,
                        air_viscosity=air.viscosity, drag_model=drag_model, drag_params=drag_params,
                        lift_model=lift_model, wind_mps=wind)
    s0 = launch_state([0, 0, 1.0], speed, math.radians(el_deg), 0.0)
    ax = np.asarray(axis, float)
    spin = rpm * RPM * ax / np.linalg.norm(ax)
    tr = fly(truth, 0.0, s0, FlightParameters.make(1, spin=spin), ground_z=None, t_max=t_end + 0.1, max_step=0.002)
    t = np.arange(0, t_end, 1 / rate)
    rng = np.random.default_rng(seed)
    return t, tr.positions(t)[0] + rng.normal(0, noise, (len(t), 3)), s0, FlightModel.for_ball(ball, air)


def test_ladder_keeps_the_simple_rung_when_the_catalogue_law_is_true():
    t, xyz, truth = make_track("baseball", noise_m=0.005, seed=21)
    fit = fit_flight(truth["model"], t, xyz)
    assert isinstance(fit, TrackFit) and fit.residuals.shape == (len(t), 3) and fit.residual_unit == "m"
    rows = {r["rung"]: r for r in fit.model_choice["rungs"]}
    assert fit.rung in ("catalogue", "drag_scale", "drag_speed")
    # the catalogue rung is within the criterion's noise of the best (no real improvement above it)
    assert rows["catalogue"]["aicc"] - min(r["aicc"] for r in rows.values()) < 6
    assert fit.misfit["fits"] and not fit.warnings


def test_ladder_climbs_when_the_data_need_it():
    # a topspin tennis stroke made with Stepanek's spin-dependent drag and saturating lift
    t, xyz, s0, cat = _track_with("tennis", "stepanek1988", {}, "stepanek1988", 33.0, 6.0, 2500, [0, 1, 0],
                                  240, 0.008, 0.75, seed=3)
    pinned = fit_flight(cat, t, xyz, options=FitOptions(aero_model="catalogue"))
    auto = fit_flight(cat, t, xyz)
    assert pinned.rung == "catalogue" and pinned.model_choice["pinned"]
    assert not pinned.misfit["fits"] and pinned.warnings  # the catalogue law cannot fit this stroke
    assert auto.rung not in ("catalogue", "drag_scale")
    assert auto.misfit["fits"]
    err = abs(np.linalg.norm(auto.state0[3:]) / np.linalg.norm(s0[3:]) - 1)
    assert err < 0.003
    # the record of the choice names every rung tried, with scores
    assert {r["rung"] for r in auto.model_choice["rungs"]} >= {"catalogue", "drag_scale", "drag_speed"}
    q = fit_quality_record(auto, get_ball("tennis"))
    assert q["aero_model"]["chosen"] == auto.rung and "reason" in q["aero_model"]


def test_unknown_rung_is_refused():
    from balltraj.errors import InputError

    t, xyz, truth = make_track("baseball", seed=1)
    with pytest.raises(InputError, match="lift_shape"):
        fit_flight(truth["model"], t, xyz, options=FitOptions(aero_model="magic"))


def test_wind_option_is_used_by_the_fit_and_the_reference():
    wind = (-3.0, 4.0, 0.0)
    t, xyz, s0, cat = _track_with("golf", "constant", {"value": 0.25}, "proportional", 60.0, 12.0, 2800,
                                  [0, -1, 0], 120, 0.01, 1.5, wind=wind)
    still = fit_flight(cat, t, xyz, options=FitOptions(aero_model="catalogue"))
    windy = fit_flight(cat, t, xyz, options=FitOptions(aero_model="catalogue", wind_mps=wind))
    assert windy.model.wind_mps == wind
    assert windy.misfit["misfit_ratio"] < still.misfit["misfit_ratio"]
    assert np.linalg.norm(windy.state0[3:]) == pytest.approx(np.linalg.norm(s0[3:]), rel=2e-3)
    # invariant: a ball without spin is not deflected, whatever the wind (the reference flies in it too)
    d = plane_deflection(windy.model, 0.0, s0, FlightParameters.make(1), 80.0, ground_z=None)
    assert abs(d.horizontal_m) < 1e-9 and abs(d.vertical_m) < 1e-9


# ------------------------------------------------------------------------------------ plausibility
def test_a_track_in_feet_is_impossible_and_says_feet():
    t, xyz, truth = make_track("baseball", noise_m=0.005, seed=2)
    fit = fit_flight(truth["model"], t, xyz / 0.3048)  # Source: 1 ft = 0.3048 m exactly (1959 agreement)
    issues = flight_plausibility(fit, truth["ball"])
    assert has_impossible(issues)
    assert any("feet" in m for _, m in issues)


def test_a_soccer_kick_fitted_as_a_baseball_names_the_wrong_ball():
    t, xyz, truth = make_track("soccer", rate_hz=120, noise_m=0.01, seed=4)
    baseball = FlightModel.for_ball(get_ball("baseball"), truth["air"])
    fit = fit_flight(baseball, t, xyz)
    issues = flight_plausibility(fit, get_ball("baseball"))
    assert issues and any("wrong ball" in m for _, m in issues)
    right = flight_plausibility(fit_flight(truth["model"], t, xyz), truth["ball"])
    assert not any(s in ("impossible", "warning") for s, _ in right)


def test_a_wrong_camera_file_is_named():
    from balltraj.camera.model import look_at_camera
    from balltraj.fitting.image_fit import fit_flight_image
    from balltraj.fitting.results import ImageFit

    side = look_at_camera("side", [9, -12, 1.5], [9, 0, 1.4], 1400, (1280, 720))
    behind = look_at_camera("behind", [-3, 0.8, 2.6], [18, 0, 1.0], 1400, (1280, 720))
    # the behind camera's file says it stands 1.5 m further left and has a longer lens than it does
    wrong = look_at_camera("behind", [-3, 2.3, 2.6], [18, 0, 1.0], 1700, (1280, 720))
    t, xyz, truth = make_track("baseball", noise_m=0.0, seed=2)
    rng = np.random.default_rng(2)
    uv = np.concatenate([cam.project(xyz) + rng.normal(0, 0.5, (len(t), 2)) for cam in (side, behind)])
    names = ["side"] * len(t) + ["behind"] * len(t)
    tt = np.concatenate([t, t])
    good = fit_flight_image(truth["model"], tt, names, uv, [side, behind], fit_offsets=False)
    bad = fit_flight_image(truth["model"], tt, names, uv, [side, wrong], fit_offsets=False)
    assert isinstance(bad, ImageFit) and bad.residuals.shape == (2 * len(t), 2) and bad.residual_unit == "px"
    assert good.misfit["fits"]
    issues = flight_plausibility(bad, truth["ball"])
    assert not bad.misfit["fits"] and any("camera file" in m for _, m in issues)
