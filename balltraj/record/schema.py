"""The flight-file contract (docs/formats.md): schema id, required keys, and the headline
columns shared by ``summary.csv``, the SQLite library and its exports, declared once here.

>>> HEADLINE_COLUMNS[:3]
('launch_speed_mps', 'elevation_deg', 'azimuth_deg')
>>> headline_values({"launch": {"speed_mps": 30.0}})["launch_speed_mps"]
30.0
"""

from __future__ import annotations

from typing import Any, Mapping

SCHEMA = "balltraj.flight/1"

#: keys every flight file holds, by section (outside checks rely on them)
REQUIRED_KEYS: dict[str, tuple[str, ...]] = {
    "launch": ("t_s", "position_m", "velocity_mps", "speed_mps", "elevation_deg", "azimuth_deg"),
    "spin": ("rate_rpm", "transverse_rate_rpm", "transverse_axis", "axis", "gyro_observed"),
    "aero": ("drag_coefficient", "lift_coefficient", "spin_parameter", "reynolds_number"),
    "deflection": ("target_x_m", "horizontal_m", "vertical_m"),
    "fit": ("n_points", "n_outliers", "rms_residual", "residual_unit"),
}

#: headline column name -> (section, key) of the record; the uncertainty section for ``*_sigma_*``
_HEADLINE: dict[str, tuple[str, ...]] = {
    "launch_speed_mps": ("launch", "speed_mps"),
    "elevation_deg": ("launch", "elevation_deg"),
    "azimuth_deg": ("launch", "azimuth_deg"),
    "transverse_rate_rpm": ("spin", "transverse_rate_rpm"),
    "transverse_rate_sigma_rpm": ("uncertainty", "spin", "transverse_rate_rpm"),
    "drag_coefficient": ("aero", "drag_coefficient"),
    "lift_coefficient": ("aero", "lift_coefficient"),
    "target_x_m": ("deflection", "target_x_m"),
    "deflection_horizontal_m": ("deflection", "horizontal_m"),
    "deflection_vertical_m": ("deflection", "vertical_m"),
    "deflection_horizontal_sigma_m": ("uncertainty", "deflection", "horizontal_m"),
    "deflection_vertical_sigma_m": ("uncertainty", "deflection", "vertical_m"),
}
HEADLINE_COLUMNS: tuple[str, ...] = tuple(_HEADLINE)

#: the fit-quality columns of summary.csv (after the headline columns)
FIT_COLUMNS: tuple[str, ...] = ("n_points", "n_outliers", "rms_residual")


def _get(rec: Mapping[str, Any], path: tuple[str, ...]) -> Any:
    node: Any = rec
    for k in path:
        if not isinstance(node, Mapping):
            return None
        node = node.get(k)
    return node


def headline_values(rec: Mapping[str, Any]) -> dict[str, Any]:
    """The headline numbers of a record, by column name (None where the record has no value)."""
    return {name: _get(rec, path) for name, path in _HEADLINE.items()}


def missing_keys(rec: Mapping[str, Any]) -> list[str]:
    """``section.key`` names of the contract that the record lacks (empty when it is complete)."""
    out = []
    for sec, keys in REQUIRED_KEYS.items():
        if not isinstance(rec.get(sec), Mapping):
            out.append(sec)
            continue
        out += [f"{sec}.{k}" for k in keys if k not in rec[sec]]
    return out


#: columns of ``summary.csv`` (``fit`` with several inputs, ``demo``)
SUMMARY_HEADER: tuple[str, ...] = ("source", "status", "ball", *HEADLINE_COLUMNS,
                                   "n_points", "n_outliers", "rms_residual_m", "message")


def summary_row(source: str, rec: Mapping[str, Any] | None, error: str | None = None) -> list:
    """One row of ``summary.csv``: a fitted record, or a failure with its message."""
    if rec is None:
        return [source, "failed"] + [""] * (len(SUMMARY_HEADER) - 3) + [error or ""]
    head = headline_values(rec)
    f = rec["fit"]
    return ([source, "ok", rec["ball"]] + ["" if head[c] is None else head[c] for c in HEADLINE_COLUMNS]
            + [f["n_points"], f["n_outliers"], f["rms_residual"], "; ".join(rec.get("warnings", []))])
