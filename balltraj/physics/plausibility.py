"""Plausibility guards: ranges of launch speed, spin and coefficients seen in play, per ball, and
a pure check that names the likely cause of a value outside them. Pure computation.

``plausibility_issues`` returns (severity, message) pairs; severity is "impossible" (meant to stop
the command with exit status 2 unless forced), "warning" or "note".
"""

from __future__ import annotations

import math
from dataclasses import dataclass

from .balls import Ball, ball_names, get_ball

FOOT_M = 0.3048  # exact (international foot, 1959)


@dataclass(frozen=True)
class PlayRange:
    """What is seen in play for one ball.

    speed_mps : (min, max) launch speeds seen in play [m/s]; impossible_speed_mps: beyond any human
    launch of this ball by a wide margin [m/s]; spin_rpm : max transverse spin seen [rpm];
    impossible_spin_rpm : far beyond it; drag : (min, max) C_D; source : where the numbers come from
    """

    speed_mps: tuple[float, float]
    impossible_speed_mps: float
    spin_rpm: float
    impossible_spin_rpm: float
    drag: tuple[float, float]
    source: str


RANGES = {
    "baseball": PlayRange((15, 55), 80, 4500, 9000, (0.20, 0.60),
                          "pitches 22-49 m/s and 1500-4500 rpm (Nathan 2008, Am. J. Phys. 76:119, abstract); batted "
                          "balls to about 54 m/s (from memory); C_D 0.5 falling to 0.3 (Adair; from memory)"),
    "softball": PlayRange((8, 35), 55, 3000, 6000, (0.25, 0.65),
                          "fastpitch pitches to about 31 m/s (from memory); C_D 0.4-0.5 (from memory)"),
    "soccer": PlayRange((3, 40), 60, 1200, 3000, (0.10, 0.60),
                        "kicks 25-30 m/s with 8-10 rev/s (Asai et al. 2002, from memory); hardest shots about "
                        "35 m/s (from memory); C_D 0.1-0.5 across the drag crisis (Asai et al. 2007)"),
    "golf": PlayRange((10, 85), 110, 12000, 20000, (0.15, 0.50),
                      "drives 70-75 m/s with 2500-3000 rpm, wedges to about 10000 rpm (Smits & Ogg 2004; from "
                      "memory); C_D 0.25-0.30 (Bearman & Harvey 1976; from memory)"),
    "tennis": PlayRange((5, 70), 90, 5000, 9000, (0.45, 0.85),
                        "serves 55-65 m/s and 2000-3000 rpm (from memory); C_D 0.507 free flight (Cross & Lindsey "
                        "2014) to 0.6-0.8 spinning (Stepanek 1988)"),
    "cricket": PlayRange((5, 45), 60, 3000, 6000, (0.30, 0.60),
                         "fast bowling to about 45 m/s (from memory); C_D 0.4-0.5 (from memory)"),
    "volleyball": PlayRange((3, 35), 50, 1000, 3000, (0.15, 0.60),
                            "jump serves to about 30 m/s (from memory); C_D 0.5 subcritical, 0.2 after the crisis "
                            "(from memory)"),
    "basketball": PlayRange((2, 20), 30, 600, 1500, (0.35, 0.65),
                            "shots and passes below about 15 m/s (from memory); C_D about 0.5 (from memory)"),
    "table-tennis": PlayRange((2, 35), 50, 9000, 15000, (0.35, 0.65),
                              "rallies 10-30 m/s, spin to about 100-150 rev/s (from memory); C_D 0.45-0.5 "
                              "(smooth sphere, fluids Barati)"),
}


def play_range(ball: Ball) -> PlayRange | None:
    return RANGES.get(ball.name)


def _other_balls(ball: Ball, speed, spin_rpm, drag_k):
    """Catalogue balls whose play ranges hold the speed, the spin and the drag (as K C_D)."""
    out = []
    for name in ball_names():
        if name == ball.name or name not in RANGES:
            continue
        b, r = get_ball(name), RANGES[name]
        if not r.speed_mps[0] <= speed <= r.speed_mps[1]:
            continue
        if spin_rpm is not None and spin_rpm > r.spin_rpm:
            continue
        if drag_k is not None:
            k_other = b.area_m2 / b.mass_kg
            cd_other = drag_k / k_other
            if not r.drag[0] <= cd_other <= r.drag[1]:
                continue
        out.append(b.title.lower())
    return out


def plausibility_issues(ball: Ball, *, speed_mps: float, spin_rpm: float | None = None,
                        drag_coefficient: float | None = None, lift_coefficient: float | None = None,
                        lift_bound: float | None = None, free_fall_mps2: float | None = None,
                        gravity: float = 9.80665, residual_unit: str = "m", misfit: dict | None = None,
                        spin_measured: bool = True) -> list[tuple[str, str]]:
    """Issues with a fitted flight, each (severity, message naming the likely cause).

    Parameters
    ----------
    ball : the ball the user named
    speed_mps : fitted launch speed [m/s]; spin_rpm : transverse spin [rpm]
    spin_measured : False when the fit cannot tell the spin from noise: then a spin beyond the ball
        is a warning, not an impossible flight
    drag_coefficient, lift_coefficient : fitted C_D, C_L at launch [-]
    lift_bound : the ideal-flow bound on C_L at this spin parameter (above it is impossible)
    free_fall_mps2 : downward acceleration of a model-free (constant-acceleration) fit [m/s^2]
    residual_unit : "m" (3D track) or "px" (image fit); misfit : :func:`..fitting.misfit.misfit_summary`
    """
    issues: list[tuple[str, str]] = []
    r = play_range(ball)
    title = ball.title.lower()
    # the units of the file: a track in feet shows gravity 3.28x too large
    # (lift and drag move a flight's mean downward acceleration away from g, so a wide band: 2.2-4.5 g)
    feet = free_fall_mps2 is not None and 2.2 < free_fall_mps2 / gravity < 4.5
    if feet:
        issues.append(("impossible", f"the track falls at {free_fall_mps2:.1f} m/s^2, {free_fall_mps2 / gravity:.2f}x "
                       "gravity, as a track written in feet would: the file is likely in feet, not metres "
                       f"(speed would be {speed_mps * FOOT_M:.1f} m/s)"))
    elif free_fall_mps2 is not None and not 0.25 * gravity < free_fall_mps2 < 2.2 * gravity:
        issues.append(("warning", f"the track falls at {free_fall_mps2:.2f} m/s^2, far from gravity: check the units of "
                       "the file and the time column (a slow-motion export stretches time)"))
    if r is not None:
        if speed_mps > r.impossible_speed_mps:
            hint = ""
            if r.speed_mps[0] <= speed_mps * FOOT_M <= r.speed_mps[1] and not feet:
                hint = f"; in feet it would be {speed_mps * FOOT_M:.1f} m/s"
            issues.append(("impossible", f"launch speed {speed_mps:.1f} m/s ({speed_mps * 3.6:.0f} km/h) is beyond any "
                           f"{title} in play (up to about {r.speed_mps[1]:.0f} m/s): likely the units of the file "
                           f"(feet or centimetres as metres), a wrong camera calibration or the wrong ball{hint}"))
        elif speed_mps > r.speed_mps[1] or speed_mps < r.speed_mps[0]:
            others = _other_balls(ball, speed_mps, spin_rpm, None)
            issues.append(("warning", f"launch speed {speed_mps:.1f} m/s is outside what a {title} does in play "
                           f"({r.speed_mps[0]:.0f}-{r.speed_mps[1]:.0f} m/s): check the units and the camera"
                           + (f"; it fits a {others[0]}" if others else "")))
        if spin_rpm is not None and math.isfinite(spin_rpm):
            if spin_rpm > r.impossible_spin_rpm:
                issues.append(("impossible" if spin_measured else "warning", f"spin {spin_rpm:.0f} rpm is far beyond any {title} (up to about "
                               f"{r.spin_rpm:.0f} rpm): likely the wrong ball (its size and mass set the spin the "
                               "lift implies) or a tracking error"))
            elif spin_rpm > r.spin_rpm:
                k = None
                if drag_coefficient is not None and math.isfinite(drag_coefficient):
                    k = drag_coefficient * ball.area_m2 / ball.mass_kg
                others = _other_balls(ball, speed_mps, None, k)
                issues.append(("warning", f"spin {spin_rpm:.0f} rpm is above what a {title} reaches in play (about "
                               f"{r.spin_rpm:.0f} rpm): likely the wrong ball"
                               + (f" (the flight fits a {', or a '.join(others[:2])})" if others else "")
                               + " or a tracking error"))
        if drag_coefficient is not None and math.isfinite(drag_coefficient):
            if drag_coefficient <= 0.02 or drag_coefficient > 2.0:
                issues.append(("impossible", f"drag coefficient {drag_coefficient:.3f} is not possible for a ball "
                               "(0.02-2): the units of the file, the time column or the ball are wrong"))
            elif not r.drag[0] <= drag_coefficient <= r.drag[1]:
                k = drag_coefficient * ball.area_m2 / ball.mass_kg
                others = _other_balls(ball, speed_mps, spin_rpm, k)
                issues.append(("warning", f"drag coefficient {drag_coefficient:.3f} is outside a {title}'s "
                               f"{r.drag[0]:.2f}-{r.drag[1]:.2f}: likely the wrong ball"
                               + (f" (it fits a {', or a '.join(others[:2])})" if others else "")
                               + ", the units of the file or the camera"))
    if lift_coefficient is not None and lift_bound is not None and math.isfinite(lift_coefficient):
        if abs(lift_coefficient) > lift_bound:
            issues.append(("impossible", f"lift coefficient {lift_coefficient:.3f} is above the ideal-flow bound "
                           f"{lift_bound:.2f} (Kutta-Joukowski): a tracking or calibration error"))
        elif abs(lift_coefficient) > ball.lift_envelope[1] + 0.2:
            issues.append(("warning", f"lift coefficient {lift_coefficient:.3f} is far above a {title}'s published "
                           f"range (up to about {ball.lift_envelope[1]:.2f}): likely a tracking or calibration error"))
    if misfit and not misfit.get("fits", True):
        where = ("the camera file (wrong camera, image size or calibration) or the time offsets"
                 if residual_unit == "px" else "the track (mixed-up points, units) or the timestamps")
        issues.append(("warning", f"the flight model does not fit ({misfit['misfit_ratio']:.1f}x the noise, structured "
                       f"residuals): check {where}"))
    return issues
