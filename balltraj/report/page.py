"""A one-page PNG or PDF of a single flight (headline numbers, warnings and the three views), laid
out on A4 portrait with every text wrapped inside the page and above the footer."""

from __future__ import annotations

import io
import textwrap

import matplotlib

matplotlib.use("Agg")
import matplotlib.pyplot as plt  # noqa: E402

from . import plots  # noqa: E402
from .html import CAUTIONS, headline, measured  # noqa: E402
from ..record.refly import record_paths  # noqa: E402
from ..record.words import air_text  # noqa: E402

PAGE_IN = (8.27, 11.69)  # A4 portrait
WRAP = 105  # characters a line at 8 pt across the page's text width


FOOTER_TOP = 0.045  # figure fraction: the cautions sit below this line, everything else above it


def one_page(rec: dict, title: str, units: str = "metric", fmt: str = "png") -> bytes:
    """The page as PNG or PDF bytes."""
    fig = page_figure(rec, title, units)
    buf = io.BytesIO()
    fig.savefig(buf, format=fmt, dpi=110, metadata={"CreationDate": None} if fmt == "pdf" else None)
    plt.close(fig)
    return buf.getvalue()


def page_figure(rec: dict, title: str, units: str = "metric"):
    """The page as a matplotlib figure (A4 portrait)."""
    paths = record_paths(rec)
    big, bu, small, su = plots.length_scale(units)
    fig = plt.figure(figsize=PAGE_IN)
    fig.text(0.06, 0.965, textwrap.shorten(title, 70), fontsize=15, weight="bold")
    fig.text(0.06, 0.945, ("measured flight" if measured(rec) else "predicted flight (simulated, not measured)")
             + f" · {rec['ball_properties']['title']} · air {air_text(rec.get('air') or {}, units)}",
             fontsize=8, color="#64748b")
    y = 0.915
    for k, v, n in headline(rec, units):
        fig.text(0.06, y, k, fontsize=9, color="#64748b")
        fig.text(0.40, y, v, fontsize=10.5, weight="bold", color=plots.MEASURED)
        if n:
            fig.text(0.40, y - 0.014, textwrap.shorten(n, 80), fontsize=7.5, color="#64748b")
        y -= 0.036
    warnings = rec.get("warnings", [])
    shown = 0
    for w in warnings:
        lines = textwrap.wrap("warning: " + w, WRAP)
        if y - 0.013 * len(lines) < 0.715 or shown == 4:
            fig.text(0.06, y, f"… {len(warnings) - shown} more warning(s): see the HTML report or the flight file",
                     fontsize=7.5, color="#b45309")
            y -= 0.013
            break
        for ln in lines:
            fig.text(0.06, y, ln, fontsize=7.5, color="#b45309")
            y -= 0.013
        shown += 1
    ax1 = fig.add_axes([0.10, 0.515, 0.84, 0.16])
    ax2 = fig.add_axes([0.10, 0.305, 0.84, 0.16])
    ax3 = fig.add_axes([0.32, 0.095, 0.38, 0.135])
    lab = "measured (fitted)" if measured(rec) else "predicted"
    for ax, j, ylab in ((ax1, 1, "left (+) of the line"), (ax2, 2, "height")):
        ax.plot(paths.ref_xyz[:, 0] * big, paths.ref_xyz[:, j] * big, "--", color=plots.REFERENCE, label="no spin")
        ax.plot(paths.spin_xyz[:, 0] * big, paths.spin_xyz[:, j] * big, color=plots.MEASURED, lw=2, label=lab)
        ax.set_ylabel(f"{ylab} ({bu})", fontsize=9)
        ax.legend(frameon=False, fontsize=8, loc="best")
    ax2.set_xlabel(f"distance toward target ({bu})", fontsize=9)
    ax1.set_title("From above", loc="left", fontsize=10)
    ax2.set_title("From the side", loc="left", fontsize=10)
    c, r = paths.crossing, paths.ref_crossing
    ax3.plot(r[1] * small, r[2] * small, "o", color=plots.REFERENCE, ms=9)
    ax3.plot(c[1] * small, c[2] * small, "o", color=plots.MEASURED, ms=9)
    ax3.annotate("", xy=(c[1] * small, c[2] * small), xytext=(r[1] * small, r[2] * small),
                 arrowprops=dict(arrowstyle="-|>", color=plots.ARROW, lw=2))
    ax3.set_aspect("equal", adjustable="datalim")
    ax3.margins(0.4)
    ax3.invert_xaxis()  # looking along the flight: left (+) on the left
    ax3.set_title("At the target plane (looking along the flight)", fontsize=9)
    ax3.set_xlabel(f"← left (+)   right (−) → ({su})", fontsize=8)
    foot = textwrap.wrap(" ".join(CAUTIONS), 150)
    for i, ln in enumerate(foot):
        fig.text(0.06, 0.010 + 0.010 * (len(foot) - 1 - i), ln, fontsize=6, color="#475569", gid="footer")
    return fig
