"""Ball catalogue: mass and size from each game's rules, default aerodynamic models.

Every entry names the rule that fixes its mass and size. Ranges are converted to SI from the
rulebook units (1 oz = 28.349523125 g, 1 in = 25.4 mm); diameters of balls specified by
circumference are d = C/pi. The default mass and diameter are the middle of the rule range.
Default aerodynamic models name registry entries in :mod:`balltraj.physics.aero`; the
coefficients behind them say whether they were read in a paper or recalled (``from memory``).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Any, Mapping

from ..errors import InputError

OUNCE_KG = 0.028349523125
INCH_M = 0.0254


@dataclass(frozen=True)
class Ball:
    """A ball type.

    Attributes
    ----------
    name : catalogue key (lower case, no spaces)
    title : human-readable name
    mass_kg : default mass [kg]
    diameter_m : default diameter [m]
    mass_range_kg, diameter_range_m : (min, max) allowed by the rule [kg], [m]
    rule : the rule that fixes the size and mass
    drag_model, drag_params : name in the drag registry and its parameters
    lift_model, lift_params : name in the lift registry and its parameters
    lift_envelope : (min, max) lift coefficient seen in published data for this ball; a fitted
        value far outside is flagged as a likely tracking error
    notes : provenance of the aerodynamic defaults
    """

    name: str
    title: str
    mass_kg: float
    diameter_m: float
    mass_range_kg: tuple[float, float]
    diameter_range_m: tuple[float, float]
    rule: str
    drag_model: str = "constant"
    drag_params: Mapping[str, float] = field(default_factory=dict)
    lift_model: str = "proportional"
    lift_params: Mapping[str, float] = field(default_factory=dict)
    lift_envelope: tuple[float, float] = (0.0, 0.6)
    notes: str = ""

    @property
    def radius_m(self) -> float:
        return 0.5 * self.diameter_m

    @property
    def area_m2(self) -> float:
        """Cross-sectional area pi r^2 [m^2]."""
        return math.pi * self.radius_m**2

    def to_dict(self) -> dict[str, Any]:
        return {
            "name": self.name,
            "title": self.title,
            "mass_kg": self.mass_kg,
            "diameter_m": self.diameter_m,
            "mass_range_kg": list(self.mass_range_kg),
            "diameter_range_m": list(self.diameter_range_m),
            "rule": self.rule,
            "drag_model": self.drag_model,
            "drag_params": dict(self.drag_params),
            "lift_model": self.lift_model,
            "lift_params": dict(self.lift_params),
            "lift_envelope": list(self.lift_envelope),
            "notes": self.notes,
        }


def _oz(lo: float, hi: float) -> tuple[float, float]:
    return (lo * OUNCE_KG, hi * OUNCE_KG)


def _circ_in(lo: float, hi: float) -> tuple[float, float]:
    return (lo * INCH_M / math.pi, hi * INCH_M / math.pi)


def _circ_m(lo: float, hi: float) -> tuple[float, float]:
    return (lo / math.pi, hi / math.pi)


def _mid(r: tuple[float, float]) -> float:
    return 0.5 * (r[0] + r[1])


def _ball(name, title, mass_range, diameter_range, rule, **kw) -> Ball:
    return Ball(
        name=name,
        title=title,
        mass_kg=kw.pop("mass_kg", _mid(mass_range)),
        diameter_m=kw.pop("diameter_m", _mid(diameter_range)),
        mass_range_kg=mass_range,
        diameter_range_m=diameter_range,
        rule=rule,
        **kw,
    )


_CATALOGUE: dict[str, Ball] = {
    b.name: b
    for b in [
        _ball(
            "baseball", "Baseball",
            _oz(5.0, 5.25), _circ_in(9.0, 9.25),
            "Official Baseball Rules 3.01 (Rule 1.09 to 2014): 5 to 5 1/4 oz, 9 to 9 1/4 in around",
            drag_model="constant", drag_params={"value": 0.35},
            lift_model="sawicki2003",
            lift_envelope=(0.0, 0.45),
            notes="C_D 0.35 typical of pitched balls (from memory, Kagan & Nathan 2014); "
            "lift Sawicki, Hubbard & Stronge 2003 (Am. J. Phys. 71:1152).",
        ),
        _ball(
            "softball", "Softball (fastpitch, 12 in)",
            _oz(6.25, 7.0), _circ_in(11.875, 12.125),
            "WBSC Official Rules of Softball, Rule 3 (section from memory): 6 1/4 to 7 oz, "
            "11 7/8 to 12 1/8 in around",
            drag_model="constant", drag_params={"value": 0.45},
            lift_model="sawicki2003",
            lift_envelope=(0.0, 0.5),
            notes="C_D 0.4-0.5 (from memory); no softball lift model confirmed, the baseball "
            "model of Sawicki et al. 2003 is borrowed.",
        ),
        _ball(
            "soccer", "Soccer ball (size 5)",
            (0.410, 0.450), _circ_m(0.68, 0.70),
            "IFAB Laws of the Game, Law 2.1: 410-450 g, 68-70 cm around",
            drag_model="crisis",
            drag_params={"subcritical": 0.47, "supercritical": 0.20, "critical_re": 2.6e5,
                         "width_re": 2.0e4},
            lift_model="proportional", lift_params={"slope": 1.0},
            lift_envelope=(0.0, 0.5),
            notes="Drag crisis at Re 2.2-3.0e5 (Asai et al. 2007, abstract); sub/supercritical "
            "C_D 0.47/0.20 (from memory); lift C_L = S (from memory; Goff & Carre 2009 report "
            "C_L 0.2-0.3 at S 0.1-0.3).",
        ),
        _ball(
            "golf", "Golf ball",
            (0.040, 1.620 * OUNCE_KG), (1.680 * INCH_M, 0.04300),
            "R&A/USGA Equipment Rules, Appendix III 'The Ball': at most 1.620 oz, at least 1.680 in "
            "across (no minimum mass, no maximum size; the catalogue range is a practical one)",
            mass_kg=0.0459, diameter_m=1.680 * INCH_M,
            drag_model="constant", drag_params={"value": 0.25},
            lift_model="proportional", lift_params={"slope": 1.0},
            lift_envelope=(0.0, 0.45),
            notes="C_D 0.25-0.30 and C_L about S up to S 0.3 (Bearman & Harvey 1976; from memory).",
        ),
        _ball(
            "tennis", "Tennis ball (type 2)",
            (0.0560, 0.0594), (0.0654, 0.0686),
            "ITF Rules of Tennis, Appendix I: 56.0-59.4 g, 6.54-6.86 cm across (types 1 and 2)",
            drag_model="constant", drag_params={"value": 0.507},
            lift_model="proportional", lift_params={"slope": 1.0},
            lift_envelope=(0.0, 0.5),
            notes="Free-flight C_D 0.507 +/- 0.024 (Cross & Lindsey 2014); lift C_L = S (from memory).",
        ),
        _ball(
            "cricket", "Cricket ball (men's)",
            _oz(5.5, 5.75), _circ_in(8.8125, 9.0),
            "MCC Laws of Cricket (2017 Code), Law 4.1: 5 1/2 to 5 3/4 oz, 8 13/16 to 9 in around",
            drag_model="constant", drag_params={"value": 0.45},
            lift_model="proportional", lift_params={"slope": 1.0},
            lift_envelope=(0.0, 0.5),
            notes="C_D 0.4-0.5 (from memory). Seam swing is not Magnus lift: a trajectory fit "
            "will report it as transverse spin.",
        ),
        _ball(
            "volleyball", "Volleyball (indoor)",
            (0.260, 0.280), _circ_m(0.65, 0.67),
            "FIVB Official Volleyball Rules, Rule 3.1: 260-280 g, 65-67 cm around",
            drag_model="crisis",
            drag_params={"subcritical": 0.50, "supercritical": 0.20, "critical_re": 2.75e5,
                         "width_re": 2.0e4},
            lift_model="proportional", lift_params={"slope": 1.0},
            lift_envelope=(0.0, 0.5),
            notes="Subcritical C_D 0.5, crisis near Re 2.5-3e5 (from memory).",
        ),
        _ball(
            "basketball", "Basketball (size 7)",
            (0.567, 0.650), _circ_m(0.749, 0.780),
            "FIBA Official Basketball Rules, Basketball Equipment: 567-650 g, 749-780 mm around",
            drag_model="constant", drag_params={"value": 0.50},
            lift_model="proportional", lift_params={"slope": 1.0},
            lift_envelope=(0.0, 0.5),
            notes="Subcritical C_D about 0.5 (from memory).",
        ),
        _ball(
            "table-tennis", "Table-tennis ball",
            (0.0027, 0.0027), (0.040, 0.040),
            "ITTF Laws 2.3.1-2.3.2: 2.7 g, 40 mm across",
            drag_model="constant", drag_params={"value": 0.47},
            lift_model="proportional", lift_params={"slope": 1.0},
            lift_envelope=(0.0, 0.6),
            notes="Smooth-sphere subcritical C_D 0.45-0.5 (from memory; fluids Barati(5e4) 0.459).",
        ),
    ]
}

_ALIASES = {"football": "soccer", "pingpong": "table-tennis", "table_tennis": "table-tennis",
            "tabletennis": "table-tennis"}


def ball_names() -> list[str]:
    return list(_CATALOGUE)


def get_ball(name: str, extra: Mapping[str, Ball] | None = None) -> Ball:
    """Look up a ball by name (case-insensitive); ``extra`` holds user balls from ``--ball-file``."""
    key = str(name).strip().lower()
    pool = dict(_CATALOGUE)
    if extra:
        pool.update({k.lower(): v for k, v in extra.items()})
    key = _ALIASES.get(key, key)
    if key not in pool:
        raise InputError(f"unknown ball {name!r}",
                         hint=f"choose one of: {', '.join(sorted(pool))}, or define one in a ball file", about="ball_file")
    return pool[key]


def ball_from_dict(d: Mapping[str, Any]) -> Ball:
    """Build a user ball from a mapping (the ``--ball-file`` JSON). Raises InputError."""
    from .aero import check_drag_model, check_lift_model

    if not isinstance(d, Mapping):
        raise InputError("a ball file must hold a JSON object")
    for key in ("name", "mass_kg", "diameter_m"):
        if key not in d:
            raise InputError(f"missing key {key!r}", hint="a ball needs name, mass_kg and diameter_m")
    name = d["name"]
    if not isinstance(name, str) or not name.strip() or len(name) > 60:
        raise InputError("'name' must be a non-empty string of at most 60 characters")
    vals = {}
    for key, lo, hi in (("mass_kg", 1e-4, 10.0), ("diameter_m", 1e-3, 1.0)):
        v = d[key]
        if isinstance(v, bool) or not isinstance(v, (int, float)) or not math.isfinite(v):
            raise InputError(f"{key!r} must be a finite number")
        if not lo <= v <= hi:
            raise InputError(f"{key!r} = {v} is outside {lo}..{hi}")
        vals[key] = float(v)
    drag_model = str(d.get("drag_model", "constant"))
    drag_params = dict(d.get("drag_params", {"value": 0.45} if drag_model == "constant" else {}))
    lift_model = str(d.get("lift_model", "proportional"))
    lift_params = dict(d.get("lift_params", {}))
    check_drag_model(drag_model, drag_params)
    check_lift_model(lift_model, lift_params)
    m, dia = vals["mass_kg"], vals["diameter_m"]
    return Ball(
        name=name.strip().lower(), title=str(d.get("title", name)), mass_kg=m, diameter_m=dia,
        mass_range_kg=(m, m), diameter_range_m=(dia, dia), rule=str(d.get("rule", "user ball file")),
        drag_model=drag_model, drag_params=drag_params, lift_model=lift_model,
        lift_params=lift_params, notes=str(d.get("notes", "user-defined")),
    )
