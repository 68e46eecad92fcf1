"""Default target planes: where each game naturally compares flights, when ``--target-x`` is not
given. Each plane is an x in the world frame of that game's field template
(``balltraj calibrate scene --template``), whose origin is where the ball is usually released.

A plane is used only when the flight is known to start before it (the first tracked x of a 3D
track, or the x of ``--start-near`` for a clip); otherwise the deflection is taken at the last
tracked x, and the record says which was used (``deflection.target_plane``).

>>> round(default_plane("baseball").x_m, 3)
18.009
>>> default_plane("soccer") is None
True
"""

from __future__ import annotations

from dataclasses import dataclass

FOOT = 0.3048  # m, exact
INCH = 0.0254  # m, exact
YARD = 0.9144  # m, exact


@dataclass(frozen=True)
class TargetPlane:
    """A natural target plane of a game.

    Attributes
    ----------
    x_m : float
        The plane x = X in the template's world frame [m].
    name : str
        What the plane is, in words.
    frame : str
        Where x = 0 is.
    source : str
        Where the distance comes from.
    """

    x_m: float
    name: str
    frame: str
    source: str


# home plate is 17 in from its front edge to its rear point (a 17 in front edge, 8.5 in sides, 12 in back edges)
_PLATE_DEPTH = 8.5 * INCH + (12.0**2 - 8.5**2) ** 0.5 * INCH  # 16.97 in ~ 17 in

TARGET_PLANES: dict[str, TargetPlane] = {
    "baseball": TargetPlane(
        60.5 * FOOT - _PLATE_DEPTH, "the front edge of home plate", "the front edge of the pitcher's plate",
        "Official Baseball Rules 2.01-2.02 (from memory): 60 ft 6 in from the pitcher's plate to the rear point "
        "of home plate, plate 17 in deep"),
    "softball": TargetPlane(
        43.0 * FOOT - _PLATE_DEPTH, "the front edge of home plate", "the front edge of the pitcher's plate",
        "WBSC fastpitch pitching distance 43 ft to the rear point of home plate (from memory), plate 17 in deep"),
    "cricket": TargetPlane(
        22 * YARD - 4 * FOOT, "the batter's popping crease", "the middle of the bowler's-end bowling crease",
        "MCC Laws of Cricket, Law 6.1 and 7.2 (from memory): 22 yd between the bowling creases, popping crease "
        "4 ft in front of the bowling crease"),
    "tennis": TargetPlane(
        23.77, "the far baseline", "the centre mark of the near baseline",
        "ITF Rules of Tennis, Rule 1: the court is 23.77 m long"),
    "table-tennis": TargetPlane(
        2.74, "the far end line of the table", "the near end line of the table",
        "ITTF Laws 2.1.2 (from memory): the table is 2.74 m long"),
}

#: games without a fixed release-to-target distance (a free kick, a shot, a serve from anywhere)
NO_FIXED_PLANE = {
    "soccer": "a free kick is taken from anywhere: give --target-x as the distance to the goal line",
    "golf": "no fixed distance: give --target-x",
    "volleyball": "a serve is taken from anywhere behind the end line: give --target-x (the net is 9 m from "
                  "the end line)",
    "basketball": "no fixed distance: give --target-x",
}


def default_plane(ball_name: str) -> TargetPlane | None:
    """The game's natural target plane for a ball (None when the game has none)."""
    return TARGET_PLANES.get(ball_name)


def choose_plane(ball_name: str, start_x_m: float | None) -> tuple[float | None, str]:
    """The target plane x [m] to use when ``--target-x`` is not given, and what it is in words.

    Parameters
    ----------
    ball_name : str
    start_x_m : float or None
        Where the flight is known to start along x [m]; None when not known before the fit.

    Returns
    -------
    (x_m, words) : the plane (None: the last tracked x) and a sentence saying which was used.
    """
    plane = default_plane(ball_name)
    if plane is None:
        why = NO_FIXED_PLANE.get(ball_name, "no natural plane for this ball")
        return None, f"the last tracked x ({why})"
    if start_x_m is None:
        return None, (f"the last tracked x ({plane.name} at x = {plane.x_m:.2f} m is used only when the start is "
                      "known: give --start-near or --target-x)")
    if not start_x_m < plane.x_m - 0.5:
        return None, (f"the last tracked x (the flight starts at x = {start_x_m:.2f} m, not before {plane.name} at "
                      f"x = {plane.x_m:.2f} m: the track is not in the field template's frame)")
    return plane.x_m, f"{plane.name}, x = {plane.x_m:.2f} m from {plane.frame} ({plane.source})"
