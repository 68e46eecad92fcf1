"""The session history the workbench shows: the flight library's flights per athlete and per
session, and two athletes or sessions compared (:func:`balltraj.library.store.compare`)."""

from __future__ import annotations

from pathlib import Path

from ..errors import InputError
from ..library.store import compare, open_library

COLUMNS = [("launch_speed_mps", "launch speed [m/s]", "{:.1f}"), ("transverse_rate_rpm", "transverse spin [rpm]", "{:.0f}"),
           ("deflection_horizontal_m", "spin moved it sideways [m]", "{:+.2f}"),
           ("deflection_vertical_m", "spin moved it up [m]", "{:+.2f}")]


def _fmt(v, spec):
    return "—" if v is None else spec.format(v)


def view(library: Path, by: str = "athlete", a: str | None = None, b: str | None = None) -> dict:
    """What the history page shows: groups of flights, the names to compare, and the comparison."""
    if by not in ("athlete", "session"):
        raise InputError("group the history by athlete or by session")
    out = {"by": by, "groups": [], "names": [], "comparison": None, "a": a or "", "b": b or "",
           "columns": [c[1] for c in COLUMNS], "library": library.name, "exists": library.is_file()}
    if not library.is_file():
        return out
    with open_library(library, create=False) as lib:
        rows = [r for r in lib.flights() if r["status"] == "ok"]
        groups: dict[str, list] = {}
        for r in rows:
            groups.setdefault(r[by] or "(no name)", []).append(
                {"id": r["id"], "clip": r["path"], "flight": r["flight_index"], "other": (r["session"] if by == "athlete" else
                                                                             r["athlete"]) or "",
                 "values": [_fmt(r[k], s) for k, _, s in COLUMNS]})
        out["groups"] = sorted(groups.items())
        out["names"] = sorted({r[by] for r in rows if r[by]})
        if a and b:
            res = compare(lib, by, a, b)
            out["comparison"] = [{"name": d["name"], "n": d["n"],
                                  "values": [f"{spec.format(d[k][0])} ± {d[k][1]:.2g}" for k, _, spec in COLUMNS]}
                                 for d in res]
    return out


def flight_records(library: Path, ids) -> tuple[list[dict], list[str]]:
    """The flight records of the given library flight ids (in that order) and a title for each."""
    import json

    if not library.is_file():
        raise InputError("there is no history yet", hint="save an analysis to the history first")
    ids = [int(i) for i in ids]
    with open_library(library, create=False) as lib:
        by_id = {r["id"]: r for r in lib.flights()}
    missing = [i for i in ids if i not in by_id]
    if missing:
        raise InputError(f"no flight {missing[0]} in the history")
    rows = [by_id[i] for i in ids]
    titles = [" · ".join(x for x in (r["athlete"], r["session"], f"{r['path']} flight {r['flight_index']}",
                                     f"entry {r['clip_id']}") if x) for r in rows]
    return [json.loads(r["record_json"]) for r in rows], titles
