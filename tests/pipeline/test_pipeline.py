"""The pipeline API: typed inputs -> flight records, the same records whichever way in.

Round trips: a flight predicted by :func:`pipeline.simulate` and sampled with an independent
integrator (scipy solve_ivp) is recovered by :func:`pipeline.fit_track`; the CLI's ``fit`` writes
the record the API returns; the headline columns are the same in summary.csv and the library.
"""
import json
import math
import sqlite3

import numpy as np
import pytest
from scipy.integrate import solve_ivp

from balltraj import pipeline
from balltraj.formats import Track, read_fit_input, write_csv
from balltraj.library.store import open_library
from balltraj.physics.air import air_conditions
from balltraj.physics.balls import get_ball
from balltraj.record.schema import HEADLINE_COLUMNS, SUMMARY_HEADER, headline_values, missing_keys, summary_row

RPM = 2 * math.pi / 60


def _independent_track(rec, rate_hz=240.0, t_end=0.40, noise=0.003, seed=1):
    """Positions of the record's flight from solve_ivp (DOP853) with the record's own constant
    coefficients: m dv/dt = m g - 1/2 rho A C_D |v| v + 1/2 rho A C_L |v|^2 (w_hat x v_hat)."""
    m = rec["model"]
    mass, d, rho = m["mass_kg"], m["diameter_m"], m["air_density_kg_m3"]
    k = 0.5 * rho * math.pi * (d / 2) ** 2 / mass
    cd, cl = rec["aero"]["drag_coefficient"], rec["aero"]["lift_coefficient"]
    w = np.asarray(m["spin_vector_radps"], float)
    what = w / np.linalg.norm(w)

    def rhs(_, s):
        v = s[3:]
        sp = np.linalg.norm(v)
        return np.concatenate([v, [0, 0, -m["gravity_mps2"]] - k * cd * sp * v + k * cl * sp * np.cross(what, v)])

    t = np.arange(0.0, t_end, 1 / rate_hz)
    L = rec["launch"]
    sol = solve_ivp(rhs, (0, t_end), L["position_m"] + L["velocity_mps"], method="DOP853", t_eval=t,
                    rtol=1e-11, atol=1e-12)
    rng = np.random.default_rng(seed)
    return t, sol.y[:3].T + rng.normal(0, noise, (len(t), 3))


@pytest.fixture(scope="module")
def predicted():
    launch = pipeline.Launch((0.0, 0.0, 1.8), 38.0, math.radians(-1.0), 0.0, 2000 * RPM, (0.0, -1.0, 0.0))
    # constant coefficients, so the independent integrator flies exactly the same law
    return pipeline.simulate(launch, get_ball("baseball"), air_conditions(), drag_coefficient=0.35,
                             lift_coefficient=0.2, target_x_m=17.0)


def test_simulate_makes_a_complete_record(predicted):
    assert missing_keys(predicted.record) == []
    assert predicted.record["launch"]["speed_mps"] == pytest.approx(38.0, rel=1e-12)


def test_fit_track_recovers_an_independently_integrated_flight(predicted):
    t, xyz = _independent_track(predicted.record)
    settings = pipeline.FitSettings(ball=get_ball("baseball"), air=air_conditions(), target_x_m=15.0,
                                    fit_drag=True, free_lift=True)
    res = pipeline.fit_track(Track("independent", t, xyz, None), settings)
    rec = res.record
    assert rec["launch"]["speed_mps"] == pytest.approx(38.0, abs=4 * rec["uncertainty"]["launch"]["speed_mps"] + 0.02)
    assert rec["aero"]["lift_coefficient"] == pytest.approx(0.2, abs=0.03)
    assert rec["fit"]["residual_unit"] == "m"
    assert rec["deflection"]["target_x_m"] == 15.0


def test_cli_fit_writes_the_record_the_api_returns(predicted, tmp_path):
    from typer.testing import CliRunner

    from balltraj.cli import app

    t, xyz = _independent_track(predicted.record, seed=2)
    path = tmp_path / "track.csv"
    write_csv(path, ["t", "x", "y", "z"], ([a, *b] for a, b in zip(t, xyz)))
    out = tmp_path / "flight.json"
    r = CliRunner().invoke(app, ["fit", str(path), "--ball", "baseball", "--target-x", "50ft", "-o", str(out)])
    assert r.exit_code == 0, r.output
    cli_rec = json.loads(out.read_text())
    api = pipeline.fit_input(read_fit_input(path), pipeline.FitSettings(get_ball("baseball"), air_conditions(),
                                                                        target_x_m=50 * 0.3048))
    for k in HEADLINE_COLUMNS:
        assert headline_values(cli_rec)[k] == pytest.approx(headline_values(api.record)[k], rel=1e-9, abs=1e-12), k


def test_headline_columns_are_the_same_in_summary_and_library(predicted, tmp_path):
    row = summary_row("x", predicted.record)
    assert len(row) == len(SUMMARY_HEADER)
    lib = open_library(tmp_path / "lib.db")
    with lib:
        lib.record(path="clip.mp4", content_hash="c", opt_hash="o", options={}, camera_hash=None, ball="baseball",
                   records=[predicted.record], error=None)
    con = sqlite3.connect(tmp_path / "lib.db")
    con.row_factory = sqlite3.Row
    stored = dict(con.execute("SELECT * FROM flights").fetchone())
    con.close()
    for k in HEADLINE_COLUMNS:
        expected = row[SUMMARY_HEADER.index(k)]
        if expected == "":  # a prediction has no uncertainty: empty in the CSV, NULL in the library
            assert stored[k] is None, k
        else:
            assert stored[k] == pytest.approx(expected), k


def test_settings_reject_a_non_positive_start_uncertainty():
    from balltraj.errors import InputError

    with pytest.raises(InputError, match="positive number of metres"):
        pipeline.FitSettings(get_ball("soccer"), air_conditions(), start_sigma_m=0.0)


def test_low_layer_errors_name_the_option_only_at_the_cli():
    from balltraj.cli.app import error_line
    from balltraj.errors import PhysicsError

    e = PhysicsError("the flight does not come down ahead of the launch point", hint="give a target plane",
                     about="target_x")
    assert "--" not in e.one_line()  # the low layer speaks in domain words
    assert error_line(e).endswith("(see --target-x)")
