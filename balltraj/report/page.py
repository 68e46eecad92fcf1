"""A one-page PNG or PDF of a single flight (headline numbers and the three views)."""

from __future__ import annotations

import io

import matplotlib

matplotlib.use("Agg")
import matplotlib.pyplot as plt  # noqa: E402

from . import plots  # noqa: E402
from .html import CAUTIONS, headline  # noqa: E402
from ..record.refly import record_paths  # noqa: E402


def one_page(rec: dict, title: str, units: str = "metric", fmt: str = "png") -> bytes:
    paths = record_paths(rec)
    big, bu, small, su = plots.length_scale(units)
    fig = plt.figure(figsize=(8.27, 11.69))  # A4 portrait
    fig.text(0.06, 0.96, title, fontsize=16, weight="bold")
    y = 0.92
    for k, v, n in headline(rec, units):
        fig.text(0.06, y, f"{k}: ", fontsize=10, color="#64748b")
        fig.text(0.36, y, v, fontsize=11, weight="bold", color=plots.MEASURED)
        if n:
            fig.text(0.36, y - 0.015, n, fontsize=8, color="#64748b")
        y -= 0.04
    for w in rec.get("warnings", [])[:3]:
        fig.text(0.06, y, "warning: " + w[:110], fontsize=8, color="#b45309")
        y -= 0.02
    ax1 = fig.add_axes([0.08, 0.52, 0.86, 0.17])
    ax2 = fig.add_axes([0.08, 0.29, 0.86, 0.17])
    ax3 = fig.add_axes([0.30, 0.06, 0.40, 0.18])
    for ax, j, lab in ((ax1, 1, "left of the line"), (ax2, 2, "height")):
        ax.plot(paths.ref_xyz[:, 0] * big, paths.ref_xyz[:, j] * big, "--", color=plots.REFERENCE, label="no spin")
        ax.plot(paths.spin_xyz[:, 0] * big, paths.spin_xyz[:, j] * big, color=plots.MEASURED, lw=2, label="measured")
        ax.set_ylabel(f"{lab} ({bu})")
        ax.legend(frameon=False, fontsize=8)
    ax2.set_xlabel(f"distance toward target ({bu})")
    ax1.set_title("From above", loc="left", fontsize=10)
    ax2.set_title("From the side", loc="left", fontsize=10)
    c, r = paths.crossing, paths.ref_crossing
    ax3.plot(-r[1] * small, r[2] * small, "o", color=plots.REFERENCE, ms=9)
    ax3.plot(-c[1] * small, c[2] * small, "o", color=plots.MEASURED, ms=9)
    ax3.annotate("", xy=(-c[1] * small, c[2] * small), xytext=(-r[1] * small, r[2] * small),
                 arrowprops=dict(arrowstyle="-|>", color=plots.ARROW, lw=2))
    ax3.set_aspect("equal", adjustable="datalim")
    ax3.margins(0.4)
    ax3.set_title("At the target plane (looking along the flight)", fontsize=9)
    ax3.set_xlabel(f"← left   right → ({su})")
    fig.text(0.06, 0.015, " ".join(CAUTIONS), fontsize=6, color="#475569", wrap=True)
    buf = io.BytesIO()
    fig.savefig(buf, format=fmt, dpi=110, metadata={"CreationDate": None} if fmt == "pdf" else None)
    plt.close(fig)
    return buf.getvalue()
