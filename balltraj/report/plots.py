"""Plots for the report, as inline SVG text (matplotlib, no display needed)."""

from __future__ import annotations

import io
import math
import re

import matplotlib

matplotlib.use("Agg")
import matplotlib.pyplot as plt  # noqa: E402
import numpy as np  # noqa: E402
from matplotlib.patches import Ellipse  # noqa: E402

from ..physics.aero import drag_coefficient, lift_coefficient  # noqa: E402
from ..physics.potential_flow import ideal_lift_bound  # noqa: E402
from ..units import FOOT, INCH  # noqa: E402

MEASURED = "#0f766e"  # deep teal
REFERENCE = "#8a8f98"  # grey
ARROW = "#c2410c"  # burnt orange
OBS = "#1e293b"
OUTLIER = "#dc2626"
PALETTE = ["#0f766e", "#7c3aed", "#c2410c", "#2563eb", "#be185d", "#4d7c0f", "#b45309", "#0e7490"]

# Figures are about 5 in wide (480 CSS px) with 11 pt text: on a 390 px phone the page scales them to
# about 0.75, so the smallest text (9.5 pt legends) stays about 9-10 px high.
plt.rcParams.update({"svg.fonttype": "none", "svg.hashsalt": "balltraj", "font.size": 11,
                     "legend.fontsize": 9.5, "axes.titlesize": 11.5, "axes.labelsize": 10.5,
                     "xtick.labelsize": 9.5, "ytick.labelsize": 9.5,
                     "axes.spines.top": False, "axes.spines.right": False, "figure.dpi": 100})
WIDE = 5.2  # in


def _legend_below(ax, ncol: int = 2, handles=None) -> None:
    """The legend under the axes (off the data)."""
    kw = {"handles": handles} if handles is not None else {}
    ax.legend(frameon=False, loc="upper center", bbox_to_anchor=(0.5, -0.28), ncol=ncol, borderaxespad=0.0,
              handlelength=1.6, columnspacing=1.2, **kw)


def _path_label(rec: dict) -> str:
    return "measured (fitted) path" if (rec.get("fit") or {}).get("n_points") else "predicted path (simulated)"



def _svg(fig) -> str:
    buf = io.StringIO()
    fig.savefig(buf, format="svg", bbox_inches="tight", metadata={"Date": None})
    plt.close(fig)
    text = buf.getvalue()
    text = text[text.index("<svg"):]
    return re.sub(r"<metadata>.*?</metadata>", "", text, flags=re.S)


def length_scale(units: str) -> tuple[float, str, float, str]:
    """(big factor, big unit, small factor, small unit) to convert metres for plot axes."""
    if units == "imperial":
        return 1 / FOOT, "ft", 1 / INCH, "in"
    return 1.0, "m", 100.0, "cm"


def three_views(paths, rec: dict, units: str = "metric", observed=None, outliers=None) -> list[str]:
    """From above (x-y), from the side (x-z), and down the line at the target plane (y-z)."""
    big, bu, small, su = length_scale(units)
    out = []
    for name, (i, j), ylab in (("From above", (0, 1), "left of the line"), ("From the side", (0, 2), "height")):
        fig, ax = plt.subplots(figsize=(WIDE, 2.9))
        ax.plot(paths.ref_xyz[:, i] * big, paths.ref_xyz[:, j] * big, "--", color=REFERENCE, lw=1.6,
                label="no-spin reference")
        ax.plot(paths.spin_xyz[:, i] * big, paths.spin_xyz[:, j] * big, color=MEASURED, lw=2.2,
                label=_path_label(rec))
        if observed is not None:
            ok = ~outliers if outliers is not None else np.ones(len(observed), bool)
            ax.plot(observed[ok, i] * big, observed[ok, j] * big, ".", ms=3.5, color=OBS, alpha=0.6,
                    label="tracked points")
            if outliers is not None and outliers.any():
                ax.plot(observed[~ok, i] * big, observed[~ok, j] * big, "x", ms=5, color=OUTLIER,
                        label="ignored (outlier)")
        ax.axvline(paths.target_x * big, color=ARROW, lw=0.8, alpha=0.6)
        ax.set_xlabel(f"distance toward target ({bu})")
        ax.set_ylabel(f"{ylab} ({bu})")
        ax.set_title(name + (" (+ = left)" if j == 1 else ""), loc="left")
        _legend_below(ax)
        if j == 1:
            span = max(np.ptp(np.r_[paths.spin_xyz[:, 1], paths.ref_xyz[:, 1]]) * big, 0.5 * big)
            mid = 0.5 * (np.max(np.r_[paths.spin_xyz[:, 1], paths.ref_xyz[:, 1]]) +
                         np.min(np.r_[paths.spin_xyz[:, 1], paths.ref_xyz[:, 1]])) * big
            ax.set_ylim(mid - 0.75 * span, mid + 0.75 * span)
            # seen from above with the flight going right, +y (left of the flight) is up the page
        out.append(_svg(fig))
    out.append(target_plane(paths, rec, units))
    return out


def target_plane(paths, rec: dict, units: str = "metric") -> str:
    """Looking down the line of flight at the target plane: where each path crosses it, the
    deflection arrow and its one-sigma ellipse. Left (+y) is drawn on the left and counted
    positive, as in the tables (the horizontal axis runs from + on the left to - on the right)."""
    big, bu, small, su = length_scale(units)
    fig, ax = plt.subplots(figsize=(4.4, 4.2))
    c, r = paths.crossing, paths.ref_crossing
    ax.plot(r[1] * small, r[2] * small, "o", color=REFERENCE, ms=9, label="no-spin reference")
    ax.plot(c[1] * small, c[2] * small, "o", color=MEASURED, ms=9,
            label="measured" if (rec.get("fit") or {}).get("n_points") else "predicted")
    ax.annotate("", xy=(c[1] * small, c[2] * small), xytext=(r[1] * small, r[2] * small),
                arrowprops=dict(arrowstyle="-|>", color=ARROW, lw=2))
    u = rec.get("uncertainty", {}).get("deflection", {})
    cov = u.get("covariance_m2")
    if cov:
        cov = np.asarray(cov) * small**2
        vals, vecs = np.linalg.eigh(cov)
        vals = np.clip(vals, 0, None)
        ang = math.degrees(math.atan2(vecs[1, 1], vecs[0, 1]))
        ax.add_patch(Ellipse((c[1] * small, c[2] * small), 2 * math.sqrt(vals[1]), 2 * math.sqrt(vals[0]),
                             angle=ang, fill=False, color=MEASURED, lw=1.2, ls=":", label="1-sigma uncertainty"))
    ax.set_aspect("equal", adjustable="datalim")
    ax.margins(0.35)
    ax.invert_xaxis()  # looking along the flight: left (+) on the left
    ax.set_xlabel(f"← left (+)   right (−) → ({su})")
    ax.set_ylabel(f"height ({su})")
    ax.set_title(f"At the target plane, {paths.target_x * big:.1f} {bu}", loc="left")
    _legend_below(ax, ncol=2)
    return _svg(fig)


def residuals_plot(rec: dict, units: str = "metric") -> str | None:
    pts = rec.get("fit", {}).get("points")
    if not pts or not pts.get("t"):
        return None
    big, bu, small, su = length_scale(units)
    t = np.asarray(pts["t"])
    pixels = rec["fit"].get("residual_unit") == "px"
    res = np.asarray(pts["residual"])
    if pixels:
        unit, names = "px", ("u", "v")
    else:
        res = res * (1000 if units == "metric" else small)
        unit, names = ("mm" if units == "metric" else "in"), ("x", "y", "z")
    out = np.asarray(pts["outlier"], bool)
    fig, ax = plt.subplots(figsize=(WIDE, 2.8))
    for k, (name, col) in enumerate(zip(names, ["#0f766e", "#7c3aed", "#b45309"])):
        ax.plot(t[~out], res[~out, k], ".", ms=3, color=col, label=f"{name}")
    if out.any():
        lim = np.abs(res[~out]).max() * 1.5 if (~out).any() else 1
        ax.plot(t[out], np.clip(res[out, 0], -lim, lim), "x", color=OUTLIER, label="outliers (clipped)")
    ax.axhline(0, color="#555", lw=0.6)
    ax.set_xlabel("time (s)")
    ax.set_ylabel(f"tracked − fitted ({unit})")
    ax.set_title("Residuals over time", loc="left")
    _legend_below(ax, ncol=4)
    return _svg(fig)


def coefficient_plots(rec: dict) -> str:
    """Fitted lift and drag coefficients against the published model curves."""
    m = rec["model"]
    a = rec["aero"]
    ua = rec.get("uncertainty", {}).get("aero", {})
    fig, (ax1, ax2) = plt.subplots(1, 2, figsize=(WIDE + 0.6, 3.2))
    S = np.linspace(0, max(0.5, 1.3 * (a.get("spin_parameter") or 0)), 200)
    ax1.plot(S, lift_coefficient(S, model=m["lift_model"], **m["lift_params"]), color=REFERENCE,
             label="published model")
    ax1.plot(S, np.minimum(ideal_lift_bound(S), 0.8), ":", color="#94a3b8", label="ideal-flow bound (2πS)")
    ax1.errorbar([a["spin_parameter"]], [a["lift_coefficient"]], xerr=[ua.get("spin_parameter") or 0],
                 yerr=[ua.get("lift_coefficient") or 0], fmt="o", color=MEASURED, label="this flight")
    ax1.set_ylim(0, 0.8)
    ax1.set_xlabel("spin parameter S")
    ax1.set_ylabel("lift coefficient")
    ax1.set_title("Lift", loc="left")
    ax1.legend(frameon=False, loc="upper center", bbox_to_anchor=(0.5, -0.3), ncol=1)
    Re = np.geomspace(5e4, 6e5, 200)
    ax2.plot(Re, drag_coefficient(Re, 0.0, model=m["drag_model"], **m["drag_params"]) * (m.get("drag_scale") or 1),
             color=REFERENCE, label="published model" + (" (fitted scale)" if m.get("drag_scale", 1) != 1 else ""))
    ax2.errorbar([a["reynolds_number"]], [a["drag_coefficient"]], yerr=[ua.get("drag_coefficient") or 0], fmt="o",
                 color=MEASURED, label="this flight")
    ax2.set_xscale("log")
    from matplotlib.ticker import FixedLocator, FuncFormatter, NullFormatter

    ax2.xaxis.set_major_locator(FixedLocator([5e4, 1e5, 2e5, 5e5]))  # four ticks that never overlap
    ax2.xaxis.set_major_formatter(FuncFormatter(lambda v, _: f"{v / 1e3:.0f}k"))
    ax2.xaxis.set_minor_formatter(NullFormatter())
    ax2.set_xlim(5e4, 6e5)
    ax2.set_ylim(0, 0.8)
    ax2.set_xlabel("Reynolds number")
    ax2.set_ylabel("drag coefficient")
    ax2.set_title("Drag", loc="left")
    ax2.legend(frameon=False, loc="upper center", bbox_to_anchor=(0.5, -0.3), ncol=1)
    fig.subplots_adjust(wspace=0.45)
    return _svg(fig)


def overlay_plot(all_paths, labels, units: str = "metric") -> str:
    big, bu, _, _ = length_scale(units)
    fig, (ax1, ax2) = plt.subplots(2, 1, figsize=(WIDE, 5.0), sharex=True)
    for k, (p, lab) in enumerate(zip(all_paths, labels)):
        col = PALETTE[k % len(PALETTE)]
        ax1.plot(p.spin_xyz[:, 0] * big, p.spin_xyz[:, 1] * big, color=col, lw=1.8, label=lab)
        ax2.plot(p.spin_xyz[:, 0] * big, p.spin_xyz[:, 2] * big, color=col, lw=1.8)
    ax1.set_ylabel(f"left of the line ({bu})")
    ax2.set_ylabel(f"height ({bu})")
    ax2.set_xlabel(f"distance toward target ({bu})")
    ax1.set_title("All flights: from above (+ = left) and from the side", loc="left")
    handles = ax1.get_lines()
    ax2.legend(handles=handles, frameon=False, loc="upper center", bbox_to_anchor=(0.5, -0.3), ncol=2)
    return _svg(fig)
