import json
import math

import pytest

from balltraj.errors import InputError
from balltraj.formats import read_ball_file
from balltraj.physics.balls import ball_names, get_ball

IN = 0.0254
OZ = 0.028349523125

# Source: each game's rules, as collected in docs/references.md section 1 (mass, circumference
# or diameter); diameters from circumference by d = C / pi.
RULES = {
    "baseball": ((5 * OZ, 5.25 * OZ), (9 * IN / math.pi, 9.25 * IN / math.pi)),  # OBR 3.01
    "softball": ((6.25 * OZ, 7 * OZ), (11.875 * IN / math.pi, 12.125 * IN / math.pi)),  # WBSC Rule 3
    "soccer": ((0.410, 0.450), (0.68 / math.pi, 0.70 / math.pi)),  # IFAB Law 2.1
    "golf": ((0.0, 1.620 * OZ), (1.680 * IN, 1.0)),  # R&A/USGA Equipment Rules App. III
    "tennis": ((0.0560, 0.0594), (0.0654, 0.0686)),  # ITF Rules of Tennis App. I
    "cricket": ((5.5 * OZ, 5.75 * OZ), (8.8125 * IN / math.pi, 9 * IN / math.pi)),  # MCC Law 4.1
    "volleyball": ((0.260, 0.280), (0.65 / math.pi, 0.67 / math.pi)),  # FIVB Rule 3.1
    "basketball": ((0.567, 0.650), (0.749 / math.pi, 0.780 / math.pi)),  # FIBA equipment
    "table-tennis": ((0.0027, 0.0027), (0.040, 0.040)),  # ITTF Laws 2.3.1-2.3.2
}


@pytest.mark.parametrize("name", sorted(RULES))
def test_default_mass_and_size_within_rule(name):
    b = get_ball(name)
    (m_lo, m_hi), (d_lo, d_hi) = RULES[name]
    assert m_lo - 1e-9 <= b.mass_kg <= m_hi + 1e-9
    assert d_lo - 1e-9 <= b.diameter_m <= d_hi + 1e-9
    assert b.rule  # every ball names its rule


def test_baseball_diameter_range_matches_rulebook_numbers():
    # Source: OBR 3.01, 9 to 9 1/4 in circumference -> 72.77-74.79 mm (docs/references.md section 1)
    b = get_ball("baseball")
    assert b.diameter_range_m[0] * 1000 == pytest.approx(72.77, abs=0.01)
    assert b.diameter_range_m[1] * 1000 == pytest.approx(74.79, abs=0.01)
    assert b.mass_range_kg[0] * 1000 == pytest.approx(141.75, abs=0.01)


def test_catalogue_is_complete():
    assert set(ball_names()) == set(RULES)


def test_unknown_ball_lists_valid_names():
    with pytest.raises(InputError) as e:
        get_ball("rugby")
    assert "baseball" in str(e.value) and "table-tennis" in str(e.value)


def test_ball_file_round_trip(tmp_path):
    p = tmp_path / "foam.json"
    p.write_text(json.dumps({"name": "foam", "mass_kg": 0.02, "diameter_m": 0.09,
                             "drag_model": "constant", "drag_params": {"value": 0.5}}))
    b = read_ball_file(p)
    assert get_ball("foam", {b.name: b}).mass_kg == 0.02


@pytest.mark.parametrize("content", ["[]", "{}", '{"name": "x", "mass_kg": -1, "diameter_m": 0.1}',
                                     '{"name": "x", "mass_kg": 0.1, "diameter_m": 0.1, "drag_model": "nope"}',
                                     "not json"])
def test_bad_ball_file(tmp_path, content):
    p = tmp_path / "b.json"
    p.write_text(content)
    with pytest.raises(InputError) as e:
        read_ball_file(p)
    assert str(p) in str(e.value)
