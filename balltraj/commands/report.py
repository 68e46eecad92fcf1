"""The ``report`` command: a report a coach reads, from flight files."""

from __future__ import annotations

from pathlib import Path
from typing import Sequence

from ..errors import InputError
from ..formats import atomic_write_bytes, check_output_path, read_flight_file
from ..report.html import build_report
from ..report.page import one_page

UNIT_SYSTEMS = ("metric", "imperial")
FORMATS = ("html", "png", "pdf")


def flight_title(path, rec: dict) -> str:
    """A flight's title in reports: the file's stem, and the athlete when known."""
    name = Path(str(path)).stem
    who = rec.get("athlete")
    return f"{name} — {who}" if who else name


def run_report(*, flights: Sequence[Path], units: str, out: Path, fmt: str = "html",
               altitudes: Sequence[float] = (), temperatures: Sequence[float] = ()) -> str:
    """Write an HTML report of any number of flights, or a one-page PNG/PDF of one flight.

    ``altitudes`` [m] and ``temperatures`` [deg C] add what-ifs (the same launch in other air).
    """
    units = str(units).lower()
    if units not in UNIT_SYSTEMS:
        raise InputError(f"--units must be metric or imperial, got {units!r}")
    if fmt not in FORMATS:
        raise InputError(f"--format must be html, png or pdf, got {fmt!r}")
    out_p = check_output_path(out, flights)
    recs = [read_flight_file(f) for f in flights]
    titles = [flight_title(f, r) for f, r in zip(flights, recs)]
    if fmt == "html":
        page = build_report(recs, titles, units, {"altitudes": list(altitudes), "temperatures": list(temperatures)})
        atomic_write_bytes(out_p, page.encode("utf-8"))
    else:
        if len(recs) != 1:
            raise InputError(f"--format {fmt} makes a page for one flight; give one flight file or use html")
        atomic_write_bytes(out_p, one_page(recs[0], titles[0], units, fmt))
    warnings = [f"warning: {t}: {w}" for t, r in zip(titles, recs) for w in r.get("warnings", [])]
    return "\n".join(warnings + [f"wrote {out_p} ({len(recs)} flight{'s' if len(recs) > 1 else ''}, {units})"])
