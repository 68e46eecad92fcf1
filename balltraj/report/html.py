"""The HTML report: one self-contained page (inline SVG plots, no network), readable on a phone.

Everything a user supplied (athlete, session, notes, file names) is escaped.
"""

from __future__ import annotations

import html
import math
from collections import defaultdict
from datetime import datetime, timezone

import numpy as np

from .. import __version__
from ..units import RPM, length_text, speed_text, spin_text
from . import plots
from ..record.refly import record_paths, what_if

CAUTIONS = [
    "Keep people and cameras out of the ball's path: use netting or a safe angle when filming.",
    "These figures are estimates with the uncertainty shown; they are not officiating decisions.",
    "Questions of training load or injury belong to qualified staff and the rules that apply locally.",
]

CSS = """
:root{--ink:#1e293b;--muted:#64748b;--line:#e2e8f0;--accent:#0f766e;--warn:#b45309;--card:#f8fafc}
*{box-sizing:border-box}body{font:15px/1.45 system-ui,-apple-system,Segoe UI,Roboto,sans-serif;color:var(--ink);
margin:0 auto;max-width:980px;padding:16px}h1{font-size:1.45em;margin:.2em 0}h2{font-size:1.15em;margin:1.4em 0 .5em;
border-bottom:2px solid var(--line);padding-bottom:.2em}.sub{color:var(--muted)}
.cards{display:grid;grid-template-columns:repeat(auto-fit,minmax(min(200px,100%),1fr));gap:10px;margin:12px 0}
.card{background:var(--card);border:1px solid var(--line);border-radius:10px;padding:10px 12px}
.card .k{font-size:.8em;color:var(--muted);text-transform:uppercase;letter-spacing:.04em}
.card .v{font-size:1.3em;font-weight:650;color:var(--accent)}.card .n{font-size:.85em;color:var(--muted)}
.plots{display:grid;grid-template-columns:repeat(auto-fit,minmax(min(420px,100%),1fr));gap:10px}
.plots svg,.wide svg{width:100%;height:auto;max-width:760px}table{border-collapse:collapse;width:100%;font-size:.9em}
td,th{border-bottom:1px solid var(--line);padding:4px 6px;text-align:left}th{background:var(--card)}
.warn{border-left:4px solid var(--warn);background:#fffbeb;padding:6px 10px;margin:6px 0}
.caution{border-left:4px solid #475569;background:#f1f5f9;padding:8px 12px;font-size:.9em}
.flight{break-after:page}footer{color:var(--muted);font-size:.8em;margin-top:2em}
@media print{body{max-width:none}.plots{grid-template-columns:1fr 1fr}}
"""


def esc(x) -> str:
    return html.escape(str(x), quote=True)


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
    return length_text(x, units, s, small=abs(x) < 2.0)


def headline(rec: dict, units: str) -> list[tuple[str, str, str]]:
    L, S, D = rec["launch"], rec["spin"], rec["deflection"]
    words = (S.get("axis_in_words") or {}).get("text", "")
    gyro = "" if S["gyro_observed"] else "gyro spin (along the flight) cannot be seen from the path"
    cards = [
        ("Launch speed", speed_text(L["speed_mps"], units, _sig(rec, "launch", "speed_mps")), ""),
        ("Launch angles", f"{L['elevation_deg']:+.1f}° up, {L['azimuth_deg']:+.1f}° left",
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


def _cards(cards) -> str:
    return '<div class="cards">' + "".join(
        f'<div class="card"><div class="k">{esc(k)}</div><div class="v">{esc(v)}</div><div class="n">{esc(n)}</div></div>'
        for k, v, n in cards) + "</div>"


def _what_if_rows(rec, options) -> list[dict]:
    rows = [what_if(rec)]
    rows.append(what_if(rec, no_spin=True))
    for alt in options.get("altitudes", []):
        rows.append(what_if(rec, altitude_m=alt))
    for tc in options.get("temperatures", []):
        rows.append(what_if(rec, temperature_c=tc))
    return rows


def flight_section(rec: dict, units: str, title: str, what_if_options: dict) -> str:
    paths = record_paths(rec)
    pts = rec.get("fit", {}).get("points") or {}
    obs = np.asarray(pts["observed"]) if pts.get("observed") else None
    outl = np.asarray(pts["outlier"], bool) if pts.get("outlier") else None
    views = plots.three_views(paths, rec, units, obs, outl)
    parts = [f'<section class="flight"><h1>{esc(title)}</h1>']
    who = " · ".join(esc(rec[k]) for k in ("athlete", "session") if rec.get(k))
    parts.append(f'<div class="sub">{esc(rec["ball_properties"]["title"])}'
                 f'{" · " + who if who else ""} · source {esc(rec.get("source", ""))}</div>')
    if rec.get("notes"):
        parts.append(f"<p>{esc(rec['notes'])}</p>")
    parts.append(_cards(headline(rec, units)))
    for w in rec.get("warnings", []):
        parts.append(f'<div class="warn">⚠ {esc(w)}</div>')
    parts.append("<h2>The path, and the path without spin</h2>")
    parts.append('<div class="plots">' + "".join(f"<div>{v}</div>" for v in views) + "</div>")
    B = rec.get("drop") or {}
    if B:
        parts.append(
            f"<p>At the target plane the ball had dropped {esc(_len(B['total_drop_m'], units))} below the line it was "
            f"launched along; without spin it would have dropped {esc(_len(B['drop_without_spin_m'], units))}. "
            f"Spin {'held it up by' if B['drop_from_spin_m'] < 0 else 'pulled it down by'} "
            f"{esc(_len(abs(B['drop_from_spin_m']), units))} and moved it {esc(_len(abs(B['sideways_from_spin_m']), units))} "
            f"{'left' if B['sideways_from_spin_m'] >= 0 else 'right'}.</p>")
    res = plots.residuals_plot(rec, units)
    if res:
        F = rec["fit"]
        parts.append("<h2>How well the model fits the tracked points</h2>")
        parts.append(f'<div class="wide">{res}</div>')
        typical = (f"{F['rms_residual']:.2f} px in the image" if F.get("residual_unit") == "px"
                   else _len(F["rms_residual"], units))
        parts.append(f"<p>{F['n_points']} tracked points, {F['n_outliers']} ignored as outliers; typical distance "
                     f"from the fitted path {esc(typical)} (rms). {esc(F.get('message', ''))}.</p>")
    parts.append("<h2>Coefficients</h2>")
    parts.append(f'<div class="wide">{plots.coefficient_plots(rec)}</div>')
    A = rec["aero"]
    parts.append(f"<p>Drag coefficient {A['drag_coefficient']:.3f}, lift coefficient {A['lift_coefficient']:.3f} at "
                 f"spin parameter {A['spin_parameter']:.3f} and Reynolds number {A['reynolds_number']:.3g} "
                 f"(at launch; drag from {esc(A.get('drag_source', rec['model']['drag_model']))}, lift from "
                 f"{esc(A.get('lift_source', rec['model']['lift_model']))}).</p>")
    bl = rec.get("baseline")
    if bl:
        bd = bl.get("deflection") or {}
        parts.append("<h2>Check: constant-acceleration estimate</h2><table><tr><th></th><th>full model</th>"
                     "<th>constant acceleration</th></tr>")
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
        parts += [f"<tr><td>{esc(a)}</td><td>{esc(b)}</td><td>{esc(c)}</td></tr>" for a, b, c in rows]
        parts.append("</table>")
    parts.append("<h2>What if</h2><table><tr><th>same launch</th><th>air density</th><th>crosses the plane at "
                 "(left, height)</th><th>spin moved it (left, up)</th></tr>")
    for w in _what_if_rows(rec, what_if_options):
        c = w["crossing_m"]
        parts.append(f"<tr><td>{esc(w['label'])}</td><td>{w['air_density_kg_m3']:.3f} kg/m³</td>"
                     f"<td>{esc(_len(c[1], units))}, {esc(_len(c[2], units))}</td>"
                     f"<td>{esc(_len(w['deflection_horizontal_m'], units))}, "
                     f"{esc(_len(w['deflection_vertical_m'], units))}</td></tr>")
    parts.append("</table>")
    parts.append(f'<p class="sub">Air: {esc(rec.get("air", {}).get("source", ""))}.</p>')
    parts.append("</section>")
    return "\n".join(parts)


def summary_section(recs: list[dict], titles: list[str], units: str) -> str:
    parts = ["<section><h1>Flights side by side</h1><table><tr><th>flight</th><th>athlete</th><th>session</th>"
             "<th>speed</th><th>transverse spin</th><th>moved by spin (left, up)</th></tr>"]
    for rec, title in zip(recs, titles):
        D = rec["deflection"]
        parts.append(f"<tr><td>{esc(title)}</td><td>{esc(rec.get('athlete', ''))}</td><td>{esc(rec.get('session', ''))}</td>"
                     f"<td>{esc(speed_text(rec['launch']['speed_mps'], units).split(' (')[0])}</td>"
                     f"<td>{rec['spin']['transverse_rate_rpm']:.0f} rpm</td>"
                     f"<td>{esc(_len(D['horizontal_m'], units))}, {esc(_len(D['vertical_m'], units))}</td></tr>")
    parts.append("</table>")
    groups = defaultdict(list)
    for rec in recs:
        groups[(rec.get("athlete") or "", rec.get("session") or "")].append(rec)
    if len(groups) > 1 or any(k != ("", "") for k in groups):
        parts.append("<h2>By athlete and session</h2><table><tr><th>athlete</th><th>session</th><th>flights</th>"
                     "<th>mean speed</th><th>mean transverse spin</th></tr>")
        for (ath, ses), rs in sorted(groups.items()):
            sp = np.mean([r["launch"]["speed_mps"] for r in rs])
            sr = np.mean([r["spin"]["transverse_rate_rpm"] for r in rs])
            parts.append(f"<tr><td>{esc(ath or '—')}</td><td>{esc(ses or '—')}</td><td>{len(rs)}</td>"
                         f"<td>{esc(speed_text(sp, units).split(' (')[0])}</td><td>{sr:.0f} rpm</td></tr>")
        parts.append("</table>")
    paths = [record_paths(r) for r in recs]
    parts.append(f'<div class="wide">{plots.overlay_plot(paths, titles, units)}</div></section>')
    return "\n".join(parts)


def build_report(recs: list[dict], titles: list[str], units: str = "metric",
                 what_if_options: dict | None = None) -> str:
    """The whole HTML page for one or more flight records."""
    what_if_options = what_if_options or {}
    body = []
    if len(recs) > 1:
        body.append(summary_section(recs, titles, units))
    for rec, title in zip(recs, titles):
        body.append(flight_section(rec, units, title, what_if_options))
    body.append('<h2>Please note</h2><div class="caution"><ul>' +
                "".join(f"<li>{esc(c)}</li>" for c in CAUTIONS) + "</ul></div>")
    stamp = datetime.now(timezone.utc).strftime("%Y-%m-%d %H:%M UTC")
    body.append(f"<footer>balltraj {esc(__version__)} · {esc(stamp)} · units: {esc(units)} · spin is "
                "reported as transverse spin (the part that bends the path)</footer>")
    return ("<!DOCTYPE html><html lang=\"en\"><head><meta charset=\"utf-8\">"
            "<meta name=\"viewport\" content=\"width=device-width, initial-scale=1\">"
            f"<title>{esc(titles[0] if len(titles) == 1 else 'balltraj flights')}</title><style>{CSS}</style>"
            "</head><body>" + "\n".join(body) + "</body></html>\n")
