"""What one flight cannot tell (the spin's share of the drag, an unknown wind): the nuisance priors
and their marginalisation into the deflection's uncertainty."""
import math
from types import SimpleNamespace

import numpy as np
import pytest
from scipy.integrate import solve_ivp

from balltraj.fitting.analysis import derived_uncertainties
from balltraj.fitting.flight_fit import FitOptions, fit_flight
from balltraj.fitting.nuisance import SPIN_DRAG_SLOPE_SIGMA, marginalise
from balltraj.physics.aero import drag_coefficient
from balltraj.physics.air import air_conditions
from balltraj.physics.balls import get_ball
from balltraj.physics.flight import FlightModel
from balltraj.record.build import fit_record

from synth import make_track

RPM = 2 * math.pi / 60
G = 9.80665  # Source: CGPM 1901 standard gravity


def test_the_split_keeps_the_launch_drag_and_lowers_the_reference():
    # invariant of C_D + b (S - S0): the spinning ball's drag at S0 is unchanged, the no-spin drag is b S0 lower
    base = {"base": "constant", "base_params": {"value": 0.5}}
    for b, s0 in ((0.25, 0.2), (0.5, 0.05)):
        kw = dict(base, spin_slope=b, offset=-b * s0)
        assert drag_coefficient(1e5, s0, model="modified", **kw) == pytest.approx(0.5, abs=1e-12)
        assert drag_coefficient(1e5, 0.0, model="modified", **kw) == pytest.approx(0.5 - b * s0, abs=1e-12)


class _Linear:
    """Residuals linear in the unknowns: r(p) = r0 + J (p - p_hat); the nuisance columns follow the k
    rung columns (n_phys = k, no extra unknowns)."""

    def __init__(self, J, r0, p_hat, k):
        self.J, self.r0, self.p_hat = J, r0, p_hat
        self.rung, self.n_phys = ("drag_re_exponent",), k  # a rung whose drag varies with speed
        self.sigma, self.mask, self.back_s = np.ones(3), np.ones(3, bool), 0.0

    def residuals(self, P):
        return self.r0[None] + (np.atleast_2d(P) - self.p_hat[None]) @ self.J.T


def test_marginal_posterior_is_the_joint_gaussian_one():
    # invariant (linear Gaussian model): the marginal posterior of b equals the b block of the joint
    # posterior with a flat prior on theta and N(0, sigma0^2) on b; its mean is the joint MAP's b
    rng = np.random.default_rng(0)
    M, k, m = 40, 4, 2
    J = rng.normal(size=(M, k + m))
    Jt = J[:, :k]
    H = Jt @ np.linalg.pinv(Jt)
    r0 = (np.eye(M) - H) @ rng.normal(size=M)  # at the optimum the residuals are orthogonal to J_theta
    s2, sig0 = 0.7, np.array([0.25, 2.0])
    p_hat = rng.normal(size=k)
    lin = _Linear(J, r0, np.concatenate([p_hat, np.zeros(m)]), k)
    res = SimpleNamespace(p=p_hat, jacobian=Jt, residuals=r0, s2=s2, covariance=np.eye(k))
    nu = marginalise(lambda rung: lin, lin, res, {"a": sig0[0], "b": sig0[1]})
    prec = J.T @ J / s2
    prec[k:, k:] += np.diag(1 / sig0**2)
    joint = np.linalg.inv(prec)
    assert np.allclose(nu["covariance"], joint[k:, k:], rtol=1e-6)
    assert np.allclose(nu["mean"], (-joint @ J.T @ r0 / s2)[k:], rtol=1e-6, atol=1e-12)
    assert np.allclose(nu["compensation"], -np.linalg.lstsq(Jt, J[:, k:], rcond=None)[0])
    # on a rung whose drag cannot vary with speed the track's hold on the spin-drag split is not trusted:
    # its prior stays and it is held (A = 0); a stated wind is still marginalised with the data (a held
    # crosswind would move the spinning path and its no-spin reference alike and hide what it can do)
    lin.rung = ()
    nu = marginalise(lambda rung: lin, lin, res, {"drag_spin_split": sig0[0], "wind_y": sig0[1]})
    assert nu["covariance"][0, 0] == pytest.approx(sig0[0] ** 2) and nu["used_mean"][0] == 0.0
    assert not np.any(nu["compensation"][:, 0]) and nu["covariance"][0, 1] == 0.0
    Jw = J[:, [0, 1, 2, 3, k + 1]]  # theta and the wind's column alone
    prec_w = Jw.T @ Jw / s2
    prec_w[k, k] += 1 / sig0[1] ** 2
    assert nu["covariance"][1, 1] == pytest.approx(np.linalg.inv(prec_w)[k, k], rel=1e-6)
    assert np.allclose(nu["compensation"][:, 1], -np.linalg.lstsq(Jt, J[:, k + 1], rcond=None)[0])


def test_drag_law_nuisances_are_marginalised_on_the_catalogue_rung():
    # invariant (linear Gaussian model): on a rung whose drag cannot vary with speed, a drag-law nuisance
    # (the image fit's, nuisance.DRAG_LAW_SIGMAS) gets the marginal posterior of the joint Gaussian of theta and
    # itself alone, while the spin-drag split keeps its prior and is held (A = 0), as before
    from balltraj.fitting.nuisance import DRAG_LAW_SIGMAS, nuisance_priors

    rng = np.random.default_rng(1)
    M, k = 40, 4
    J = rng.normal(size=(M, k + 2))
    Jt = J[:, :k]
    r0 = (np.eye(M) - Jt @ np.linalg.pinv(Jt)) @ rng.normal(size=M)
    s2, s_split, s_drag = 0.7, 0.25, DRAG_LAW_SIGMAS["log_drag_scale"]
    p_hat = rng.normal(size=k)
    lin = _Linear(J, r0, np.concatenate([p_hat, np.zeros(2)]), k)
    lin.rung = ()
    res = SimpleNamespace(p=p_hat, jacobian=Jt, residuals=r0, s2=s2, covariance=np.eye(k))
    nu = marginalise(lambda rung: lin, lin, res, {"drag_spin_split": s_split, "log_drag_scale": s_drag})
    Jd = J[:, [0, 1, 2, 3, k + 1]]  # theta and the drag-law column alone
    prec = Jd.T @ Jd / s2
    prec[k, k] += 1 / s_drag**2
    joint = np.linalg.inv(prec)
    assert nu["covariance"][1, 1] == pytest.approx(joint[k, k], rel=1e-6)
    assert nu["mean"][1] == pytest.approx((-joint @ Jd.T @ r0 / s2)[k], rel=1e-6, abs=1e-12)
    assert np.allclose(nu["compensation"][:, 1], -np.linalg.lstsq(Jt, J[:, k + 1], rcond=None)[0])
    assert nu["covariance"][0, 0] == pytest.approx(s_split**2) and not np.any(nu["compensation"][:, 0])
    assert nu["covariance"][0, 1] == 0.0 and nu["mean"][0] == 0.0
    # the drag law keeps the catalogue's value (its prior mean) whatever the track's pull: only its spread counts
    assert nu["used_mean"][1] == 0.0
    # the drag-law priors (and the lift law's slope) join only when asked (the image fit held on the catalogue
    # rung), never in 3-D fits; the lift law's level in every fit (the spin rate's own law uncertainty)
    assert set(nuisance_priors((), FitOptions())) == {"drag_spin_split", "log_lift_scale"}
    asked = nuisance_priors(("log_drag_scale",), FitOptions(drag_law_priors=True))
    assert set(asked) == {"drag_spin_split", "log_lift_scale", "lift_tilt"} | (set(DRAG_LAW_SIGMAS) - {"log_drag_scale"})
    assert "lift_tilt" not in nuisance_priors(("lift_exponent",), FitOptions(drag_law_priors=True))


# ---- flights made outside the code under test (solve_ivp, laws written here) -----------------------
def _truth(ball, rho, cd, cl, s0, spin, wind=(0, 0, 0), t_eval=None, x_stop=None, spin_on=True):
    r = ball.radius_m
    K = rho * math.pi * r * r / (2 * ball.mass_kg)
    w = np.asarray(wind, float)
    om = np.asarray(spin, float) if spin_on else np.zeros(3)

    def rhs(t, y):
        v = y[3:] - w
        sp = math.sqrt(v @ v)
        vh = v / sp
        wp = om - (om @ vh) * vh
        n = math.sqrt(wp @ wp)
        S = r * n / sp
        a = -K * cd(S) * sp * v + (K * cl(S) * sp * sp * np.cross(wp / n, vh) if n > 0 else 0.0)
        return np.concatenate([y[3:], a + np.array([0, 0, -G])])

    ev = None
    if x_stop is not None:
        ev = lambda t, y: y[0] - x_stop  # noqa: E731
        ev.terminal = True
    return solve_ivp(rhs, (0, 10), s0, method="DOP853", rtol=1e-10, atol=1e-10, t_eval=t_eval, events=ev)


def _fit_and_truth(ball_name, cd, cl, speed, el, rpm, axis, rate, noise, t_end, wind=(0, 0, 0), seed=0,
                   options=FitOptions()):
    ball = get_ball(ball_name)
    air = air_conditions()
    el = math.radians(el)
    s0 = np.array([0, 0, 1.0, speed * math.cos(el), 0, speed * math.sin(el)])
    spin = rpm * RPM * np.asarray(axis, float) / np.linalg.norm(axis)
    t = np.arange(0, t_end, 1 / rate)
    path = _truth(ball, air.density, cd, cl, s0, spin, wind, t_eval=t)
    xyz = path.y[:3].T + np.random.default_rng(seed).normal(0, noise, (len(t), 3))
    X = float(path.y[0, -1]) - 0.01
    a = _truth(ball, air.density, cd, cl, s0, spin, wind, x_stop=X)
    b = _truth(ball, air.density, cd, cl, s0, spin, wind, x_stop=X, spin_on=False)
    d_true = a.y_events[0][0][1:3] - b.y_events[0][0][1:3]
    model = FlightModel.for_ball(ball, air)
    fit = fit_flight(model, t, xyz, options=options)
    sig, dcov = derived_uncertainties(fit, model, X)
    return fit, sig, d_true, X, model


def test_a_spin_dependent_drag_is_covered_by_the_prior():
    # Source: Stepanek 1988, Am. J. Phys. 56:138 (coefficients from memory): tennis drag rising with S,
    # C_D = 0.508 + (22.053 + 4.196 S^-2.5)^-0.4, and lift C_L = 1/(2.022 + 0.981/S)
    def cd(S):
        return 0.508 + (22.053 + 4.196 * max(S, 1e-9) ** -2.5) ** -0.4 if S > 0 else 0.508

    def cl(S):
        return 1 / (2.022 + 0.981 / S) if S > 0 else 0.0

    fit, sig, d_true, X, model = _fit_and_truth("tennis", cd, cl, 33.0, 6.0, 2500, [0, 1, 0], 240, 0.008, 0.6)
    from balltraj.fitting.deflection import fit_deflection

    d, _ = fit_deflection(fit, model, X)
    err = d[1] - d_true[1]
    total = sig["deflection_vertical_m"]
    prior = sig["deflection_from_priors_m"]["drag_spin_split"][1]
    without = math.sqrt(max(total**2 - prior**2, 0.0))
    assert abs(err) < 3 * total  # honest with the prior
    assert abs(err) > 1.2 * without  # not without it
    # the prior's part is what sigma0 * S0 less drag does to a no-spin path (solve_ivp, constant C_D)
    ball, rho = get_ball("tennis"), air_conditions().density
    s0 = np.array([0, 0, 1.0, 33 * math.cos(0.1047), 0, 33 * math.sin(0.1047)])
    S0 = ball.radius_m * 2500 * RPM / 33.0
    z = [_truth(ball, rho, lambda S, c=c: c, lambda S: 0.0, s0, np.zeros(3), x_stop=X, spin_on=False).y_events[0][0][2]
         for c in (cd(S0), cd(S0) - SPIN_DRAG_SLOPE_SIGMA * S0)]
    assert 0.5 < prior / abs(z[1] - z[0]) < 2.0
    assert fit.nuisance["prior_sigma"][0] == SPIN_DRAG_SLOPE_SIGMA
    assert fit.nuisance["data_sigma"][0] > 2 * SPIN_DRAG_SLOPE_SIGMA  # the track barely sees it


def test_a_stated_wind_uncertainty_covers_an_unknown_crosswind():
    # a golf drive in a 4 m/s crosswind the fit is not told; constant C_D 0.25, C_L = S (invented demo values)
    kw = dict(cd=lambda S: 0.25, cl=lambda S: S, speed=66.0, el=11.0, rpm=2800, axis=[0, -1, 0], rate=60,
              noise=0.02, t_end=2.4, wind=(0.0, 4.0, 0.0))
    still, sig0, d_true, X, model = _fit_and_truth("golf", options=FitOptions(aero_model="drag_speed"), **kw)
    told, sig1, _, _, _ = _fit_and_truth("golf", options=FitOptions(aero_model="drag_speed", wind_sigma_mps=2.5),
                                         **kw)
    from balltraj.fitting.deflection import fit_deflection

    e0 = fit_deflection(still, model, X)[0][0] - d_true[0]
    e1 = fit_deflection(told, model, X)[0][0] - d_true[0]
    assert abs(e0) > 5 * sig0["deflection_horizontal_m"]  # still air assumed: the wind looks like sidespin
    assert abs(e1) < 3 * sig1["deflection_horizontal_m"]  # the stated uncertainty makes the sigma honest
    share = sig1["deflection_from_priors_m"]
    assert share["wind_y"][0] > share["drag_spin_split"][0]


def test_the_record_names_the_priors_and_their_part_of_the_sigma():
    t, xyz, truth = make_track("soccer", rate_hz=120, noise_m=0.015, seed=7)
    fit = fit_flight(truth["model"], t, xyz)
    rec, _ = fit_record(fit, truth["ball"], truth["air"], truth["model"])
    assert rec["priors"]["drag_spin_split"]["prior_sigma"] == SPIN_DRAG_SLOPE_SIGMA
    u = rec["uncertainty"]["deflection"]
    part = u["from_priors_m"]["drag_spin_split"]
    # invariants: the parts add in quadrature to no more than the total; a warning iff a prior carries most of it
    for i, key in enumerate(("horizontal_m", "vertical_m")):
        assert u["same_drag_sigma_m"][i] ** 2 + part[i] ** 2 == pytest.approx(u[key] ** 2, rel=1e-9, abs=1e-12)
    dominated = any(part[i] ** 2 > 0.5 * u[k] ** 2 for i, k in enumerate(("horizontal_m", "vertical_m")))
    assert dominated == any("cannot tell" in w for w in rec["warnings"])


def test_every_prior_is_named_for_what_it_is():
    # Source: invariant - the warning names the unknown whose prior carries the variance; a drag-law prior
    # is never blamed on the wind, and the crosswind is said for the sideways part
    from balltraj.fitting.nuisance import DRAG_LAW_SIGMAS
    from balltraj.record.build import _PRIOR_REASONS, _prior_warnings

    assert set(DRAG_LAW_SIGMAS) | {"drag_spin_split", "wind_x", "wind_y", "log_lift_scale", "lift_tilt"} <= set(_PRIOR_REASONS)
    sig = {"deflection_horizontal_m": 0.10, "deflection_vertical_m": 0.02,
           "deflection_from_priors_m": {"log_re_shift": [0.09, 0.0], "wind_y": [0.0, 0.001]}}
    (w,) = _prior_warnings(sig)
    assert w.startswith("the sideways") and "drag crisis" in w and "wind" not in w
    sig["deflection_from_priors_m"] = {"wind_y": [0.09, 0.0]}
    assert "crosswind" in _prior_warnings(sig)[0]


def test_a_spin_rate_read_through_another_lift_law_is_covered_by_the_lift_level_prior(monkeypatch):
    # Source: Stepanek 1988, Am. J. Phys. 56:138 (coefficients from memory): a saturating lift
    # C_L = 1/(2.022 + 0.981/S), 0.68 of the catalogue's linear C_L = S at S = 0.24; drag the tennis
    # catalogue's constant 0.507 (Cross & Lindsey 2014, docs/references.md 2.3). Truth by solve_ivp.
    # A spin rate read from a flight is a quantity of the lift law assumed: the fit reads the Magnus force,
    # and its sigma must carry the law's level, not only the track's noise.
    from balltraj.fitting import nuisance

    kw = dict(cd=lambda S: 0.507, cl=lambda S: 1 / (2.022 + 0.981 / S) if S > 0 else 0.0, speed=30.0, el=8.0,
              rpm=2600, axis=[0, 1, 0], rate=240, noise=0.005, t_end=0.6)
    fit, sig, _, _, _ = _fit_and_truth("tennis", **kw)
    rate = float(np.linalg.norm(fit.spin)) / RPM
    err = rate - 2600
    assert err < -0.15 * 2600  # the catalogue's linear lift needs less spin for the same force
    assert abs(err) < 2.5 * sig["transverse_rate_rpm"]  # honest with the level prior
    assert "log_lift_scale" in fit.nuisance["names"]
    monkeypatch.setattr(nuisance, "LIFT_LEVEL_SIGMA", 1e-6)  # the code before: the law's level taken as exact
    fit0, sig0, _, _, _ = _fit_and_truth("tennis", **kw)
    assert abs(float(np.linalg.norm(fit0.spin)) / RPM - 2600) > 3 * sig0["transverse_rate_rpm"]
