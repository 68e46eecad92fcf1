"""The HTML report: one self-contained page (inline SVG plots, no network), readable on a phone.

The page is rendered from Jinja2 templates (``templates/base.html``: the layout, header, cautions
and footer any other page can extend; ``templates/report.html``: the flights; ``templates/style.css``)
with autoescaping on, so everything a user supplied (athlete, session, notes, file names) is
escaped; only the SVG plots made here are inserted as markup.
"""

from __future__ import annotations

import math
import re
from collections import defaultdict
from datetime import datetime, timezone
from functools import lru_cache
from pathlib import Path

import numpy as np

from .. import __version__
from ..record.refly import record_paths, what_if
from ..record.words import air_text, density_text, source_words, temperature_text
from ..units import FOOT, RPM, length_text, speed_text, spin_text
from . import plots

CAUTIONS = [
    "Keep people and cameras out of the ball's path: use netting or a safe angle when filming.",
    "These figures are estimates with the uncertainty shown; they are not officiating decisions.",
    "Questions of training load or injury belong to qualified staff and the rules that apply locally.",
]

TEMPLATES = Path(__file__).with_name("templates")


@lru_cache(maxsize=1)
def environment():
    """The Jinja2 environment of the report templates (autoescaping on)."""
    from jinja2 import Environment, FileSystemLoader, StrictUndefined

    return Environment(loader=FileSystemLoader(str(TEMPLATES)), autoescape=True, undefined=StrictUndefined,
                       trim_blocks=True, lstrip_blocks=True)


def css() -> str:
    return (TEMPLATES / "style.css").read_text(encoding="utf-8")


def _sig(rec, sec, key):
    v = (rec.get("uncertainty", {}).get(sec) or {}).get(key)
    return v if isinstance(v, (int, float)) and math.isfinite(v) else None


def _num(x, spec: str, unit: str = "") -> str:
    """A number or a dash when it is missing (null in the file, NaN in memory)."""
    if not isinstance(x, (int, float)) or isinstance(x, bool) or not math.isfinite(x):
        return "—"
    return f"{x:{spec}}{unit}"


def _deg(s):
    if s is None:
        return "—"
    return f"{s:.2f}°" if s < 0.1 else f"{s:.1f}°"


def _len(x, units, s=None):
    if not isinstance(x, (int, float)) or not math.isfinite(x):
        return "—"
    return length_text(x, units, s, small=abs(x) < 2.0)


def measured(rec: dict) -> bool:
    """A record of a fitted (measured) flight, not a prediction."""
    return bool((rec.get("fit") or {}).get("n_points"))


def headline(rec: dict, units: str) -> list[tuple[str, str, str]]:
    L, S, D = rec["launch"], rec["spin"], rec["deflection"]
    words = (S.get("axis_in_words") or {}).get("text", "")
    gyro = "" if S["gyro_observed"] else "gyro spin (along the flight) cannot be seen from the path"
    if S.get("agreement"):  # the whole spin read from the ball's surface
        gyro = (f"whole spin {S['rate_rpm']:.0f} rpm, {S['gyro_rate_rpm']:+.0f} rpm of it along the flight, read from "
                f"the ball's surface; {'agrees with' if S['agreement']['agrees'] else 'disagrees with'} the curve")
    az = L["azimuth_deg"]
    cards = [
        ("Launch speed", speed_text(L["speed_mps"], units, _sig(rec, "launch", "speed_mps")), ""),
        ("Launch angles", f"{L['elevation_deg']:+.1f}° up, {abs(az):.1f}° {'left' if az >= 0 else 'right'}",
         f"± {_deg(_sig(rec, 'launch', 'elevation_deg'))} / ± {_deg(_sig(rec, 'launch', 'azimuth_deg'))}"),
        ("Transverse spin", spin_text(S["transverse_rate_rpm"] * RPM,
                                      (_sig(rec, "spin", "transverse_rate_rpm") or 0) * RPM or None),
         words + (f"; {gyro}" if gyro else "")),
        (f"Spin moved it (at {_len(D['target_x_m'], units)})",
         f"{_len(abs(D['horizontal_m']), units, _sig(rec, 'deflection', 'horizontal_m'))} "
         f"{'left' if D['horizontal_m'] >= 0 else 'right'}",
         f"{_len(abs(D['vertical_m']), units, _sig(rec, 'deflection', 'vertical_m'))} "
         f"{'up' if D['vertical_m'] >= 0 else 'down'} compared with no spin"),
    ]
    return cards


def _what_if_rows(rec, options, units) -> list[dict]:
    base = "as measured" if measured(rec) else "as predicted"
    items = [(base, what_if(rec)), ("with no spin", what_if(rec, no_spin=True))]
    for alt in options.get("altitudes", []):
        shown = f"{alt / FOOT:.0f} ft" if units == "imperial" else f"{alt:.0f} m"
        items.append((f"at {shown} altitude", what_if(rec, altitude_m=alt)))
    for tc in options.get("temperatures", []):
        items.append((f"at {temperature_text(tc, units)}", what_if(rec, temperature_c=tc)))
    rows = []
    for label, w in items:
        c = w["crossing_m"]
        rows.append({"label": label, "air": density_text(w["air_density_kg_m3"], units),
                     "crossing": f"{_len(c[1], units)}, {_len(c[2], units)}",
                     "moved": f"{_len(w['deflection_horizontal_m'], units)}, {_len(w['deflection_vertical_m'], units)}"})
    return rows


def _baseline(rec: dict, units: str) -> tuple[list[tuple[str, str, str]], list[str]]:
    bl = rec.get("baseline")
    if not bl:
        return [], []
    A = rec["aero"]
    bd = bl.get("deflection") or {}
    bspeed = bl.get("speed_mps")
    rows = [("launch speed", speed_text(rec["launch"]["speed_mps"], units),
             speed_text(bspeed, units) if _num(bspeed, "g") != "—" else "—"),
            ("transverse spin", _num(rec["spin"]["transverse_rate_rpm"], ".0f", " rpm"),
             _num(bl.get("transverse_rate_rpm"), ".0f", " rpm")),
            ("drag / lift coefficient", f"{_num(A['drag_coefficient'], '.3f')} / {_num(A['lift_coefficient'], '.3f')}",
             f"{_num(bl.get('drag_coefficient'), '.3f')} / {_num(bl.get('lift_coefficient'), '.3f')}")]
    if bd and _num(bd.get("horizontal_m"), "g") != "—":
        rows.append(("deflection (left, up)",
                     f"{_len(rec['deflection']['horizontal_m'], units)}, {_len(rec['deflection']['vertical_m'], units)}",
                     f"{_len(bd['horizontal_m'], units)}, {_len(bd['vertical_m'], units)}"))
    notes = []
    cd = bl.get("drag_coefficient")
    if isinstance(cd, (int, float)) and math.isfinite(cd) and cd < 0:
        notes.append(f"The constant-acceleration check gives a negative drag coefficient ({cd:.3f}), which no ball "
                     "has: on this track that simple model cannot separate drag from noise and gravity, so its "
                     "coefficients are not meaningful here. The full model's values above are the ones to use.")
    return rows, notes


def _anchor(i: int, title: str) -> str:
    slug = re.sub(r"[^a-z0-9]+", "-", str(title).lower()).strip("-")[:40]
    return f"flight-{i + 1}" + (f"-{slug}" if slug else "")


def flight_context(rec: dict, units: str, title: str, what_if_options: dict, anchor: str) -> dict:
    """Everything one flight's section shows (text values; the plots as SVG)."""
    paths = record_paths(rec)
    pts = rec.get("fit", {}).get("points") or {}
    tracked = pts.get("observed") or pts.get("tracked_m")
    obs = np.asarray(tracked, float) if tracked else None
    outl = np.asarray(pts["outlier"], bool) if pts.get("outlier") and obs is not None else None
    views = plots.three_views(paths, rec, units, obs, outl)
    who = " · ".join(str(rec[k]) for k in ("athlete", "session") if rec.get(k))
    kind = "measured flight" if measured(rec) else "predicted flight (simulated, not measured)"
    subtitle = " · ".join(x for x in (rec["ball_properties"]["title"], kind, who, f"source {rec.get('source', '')}") if x)
    B = rec.get("drop") or {}
    drop = ""
    if B:
        drop = (f"At the target plane the ball had dropped {_len(B['total_drop_m'], units)} below the line it was "
                f"launched along; without spin it would have dropped {_len(B['drop_without_spin_m'], units)}. "
                f"Spin {'held it up by' if B['drop_from_spin_m'] < 0 else 'pulled it down by'} "
                f"{_len(abs(B['drop_from_spin_m']), units)} and moved it {_len(abs(B['sideways_from_spin_m']), units)} "
                f"{'left' if B['sideways_from_spin_m'] >= 0 else 'right'}.")
    res = plots.residuals_plot(rec, units)
    fit_text = ""
    if res:
        F = rec["fit"]
        typical = (f"{F['rms_residual']:.2f} px in the image" if F.get("residual_unit") == "px"
                   else _len(F["rms_residual"], units))
        fit_text = (f"{F['n_points']} tracked points, {F['n_outliers']} ignored as outliers; typical distance from "
                    f"the fitted path {typical} (rms). {F.get('message', '')}.")
    A = rec["aero"]
    aero_text = (f"Drag coefficient {_num(A['drag_coefficient'], '.3f')}, lift coefficient "
                 f"{_num(A['lift_coefficient'], '.3f')} at spin parameter {_num(A['spin_parameter'], '.3f')} and "
                 f"Reynolds number {_num(A['reynolds_number'], '.3g')} (at launch; drag from "
                 f"{source_words(A.get('drag_source') or rec['model']['drag_model'])}, lift from "
                 f"{source_words(A.get('lift_source') or rec['model']['lift_model'])}).")
    baseline, notes = _baseline(rec, units)
    D = rec["deflection"]
    plane = D.get("target_plane") or f"x = {_len(D['target_x_m'], units)}"
    air = air_text(rec.get("air") or {"density_kg_m3": rec["model"]["air_density_kg_m3"]}, units)
    return {"anchor": anchor, "title": title, "subtitle": subtitle, "notes": rec.get("notes") or "",
            "cards": headline(rec, units), "warnings": list(rec.get("warnings", [])), "views": views,
            "drop": drop, "residuals": res or "", "fit_text": fit_text,
            "coefficients": plots.coefficient_plots(rec), "aero_text": aero_text, "baseline": baseline,
            "baseline_notes": notes, "what_ifs": _what_if_rows(rec, what_if_options, units), "plane": plane,
            "air": air}


def summary_context(recs: list[dict], titles: list[str], anchors: list[str], units: str) -> dict:
    rows = []
    for rec, title, anchor in zip(recs, titles, anchors):
        D = rec["deflection"]
        rows.append({"anchor": anchor, "title": title, "ball": rec["ball_properties"]["title"],
                     "athlete": rec.get("athlete", ""), "session": rec.get("session", ""),
                     "speed": speed_text(rec["launch"]["speed_mps"], units).split(" (")[0],
                     "spin": f"{rec['spin']['transverse_rate_rpm']:.0f} rpm",
                     "moved": f"{_len(D['horizontal_m'], units)}, {_len(D['vertical_m'], units)}"})
    groups = defaultdict(list)
    for rec in recs:  # one group per athlete, session and ball: different balls are never averaged
        groups[(rec.get("athlete") or "", rec.get("session") or "", rec["ball_properties"]["title"])].append(rec)
    gl = []
    if len(groups) > 1 or any(k[:2] != ("", "") for k in groups):
        for (ath, ses, ball), rs in sorted(groups.items()):
            gl.append({"athlete": ath or "—", "session": ses or "—", "ball": ball, "n": len(rs),
                       "speed": speed_text(float(np.mean([r["launch"]["speed_mps"] for r in rs])), units).split(" (")[0],
                       "spin": f"{np.mean([r['spin']['transverse_rate_rpm'] for r in rs]):.0f} rpm"})
    paths = [record_paths(r) for r in recs]
    return {"rows": rows, "groups": gl, "overlay": plots.overlay_plot(paths, titles, units)}


def build_report(recs: list[dict], titles: list[str], units: str = "metric",
                 what_if_options: dict | None = None) -> str:
    """The whole HTML page for one or more flight records."""
    what_if_options = what_if_options or {}
    anchors = [_anchor(i, t) for i, t in enumerate(titles)]
    flights = [flight_context(r, units, t, what_if_options, a) for r, t, a in zip(recs, titles, anchors)]
    summary = summary_context(recs, titles, anchors, units) if len(recs) > 1 else None
    stamp = datetime.now(timezone.utc).strftime("%Y-%m-%d %H:%M UTC")
    page_title = titles[0] if len(titles) == 1 else f"balltraj flights ({len(titles)})"
    return environment().get_template("report.html").render(
        css=css(), cautions=CAUTIONS, version=__version__, stamp=stamp, units=units, page_title=page_title,
        flights=flights, summary=summary) + "\n"
