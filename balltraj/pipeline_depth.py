"""What fixes the depth of a flight seen by one camera, for :func:`balltraj.pipeline.analyze_clip`:
a ball at rest where the flight starts, a bounce that starts it, the user's start point, the launch
zone of the field template the camera was calibrated on, or only the ball's apparent size.

- :func:`template_zone` — the template's launch zone that agrees with a tracked flight, as a soft prior.
- :func:`flight_anchor` — the anchor of one tracked flight, the observations to keep, and the
  record's ``depth_anchor`` section.
- :func:`depth_warnings` — what the console and the record must say when only the apparent size is left.

Nothing here prints; the clip is read (frames before the launch) to look for a ball at rest.
"""

from __future__ import annotations


import numpy as np

from .camera.calibrate import LAUNCH_ZONES, TEMPLATES, launch_zone
from .camera.model import Camera
from .vision.resting import clear_of_rest_spot, depth_anchor

# The apparent size is only a loose check of a zone: the detector's radius was measured 24 % small to 1 %
# large on rendered balls (shading, blur; docs/validation.md, one camera; the edge-fit radius of
# vision/ball_size.py is closer, but a flight may keep detector radii where it fails), so a zone is refused only when
# the ball looks more than 40 % off the size of a ball there (it then tells an 11 m kick from a 20 m one).
ZONE_RADIUS_GATE = 0.40
ZONE_RAY_M = 0.10  # the rays of the backward-extended path must pass within 3 zone sigmas + this [m]


def _backward_pixel_path(t, uv, n_fit: int = 8):
    """Quadratic in time through the first ``n_fit`` pixels: t -> uv (..., 2)."""
    t = np.asarray(t, float)[:n_fit]
    uv = np.asarray(uv, float)[:n_fit]
    deg = min(2, len(t) - 1)
    coef = [np.polyfit(t - t[0], uv[:, k], deg) for k in range(2)]
    return lambda tt: np.stack([np.polyval(c, np.asarray(tt, float) - t[0]) for c in coef], axis=-1)


def template_zone(camera: Camera, ball_radius_m: float, flight_t, flight_uv, radius_px=None):
    """The launch zone of the camera's field template that the tracked flight can have left.

    A zone is kept when (1) the rays through the flight's image path, extended back in time (up to
    1 s), pass within three of its sigmas (+ 10 cm) of its centre, and (2) the ball's apparent size
    in the first frames is within 40 % (+ the zone's depth extent) of the size of a ball there. Of
    the zones kept, the narrowest (the most informative) is chosen: a wide zone agrees with almost
    any flight, so agreeing with it says little.

    Parameters
    ----------
    camera : Camera
        With ``template`` and ``world_frame`` from the scene calibration (else no zone).
    ball_radius_m : float [m]
    flight_t : array_like, shape (N,) [s]; flight_uv : array_like, shape (N, 2) [px]
        The flight's first tracked frames.
    radius_px : array_like, shape (N,) [px], optional
        The flight's apparent radii of those frames, as tracked (edge-fit where refined) (the depth check
        is skipped without them).

    Returns
    -------
    zone : (centre (3,) [m], sigma [m], label) or None
    reason : str
        Which zone was chosen and why, or why none was.
    """
    name = camera.template
    if name is None:
        return None, "the camera file names no field template"
    if name not in TEMPLATES or name not in LAUNCH_ZONES:
        return None, f"the camera's template {name!r} has no launch zones in this version"
    if camera.world_frame and camera.world_frame != TEMPLATES[name]["frame"]:
        return None, (f"the camera was calibrated on {name!r} in another world frame than the template's present one; "
                      "its zones are not used (re-run the scene calibration)")
    t = np.asarray(flight_t, float)
    uv = np.asarray(flight_uv, float)
    if len(t) < 3:
        return None, "too few tracked frames to tell which launch zone the flight left"
    path = _backward_pixel_path(t, uv)
    origin, rays = camera.rays(path(np.linspace(t[0] - 1.0, t[0], 401)))
    r_obs = None
    if radius_px is not None:
        r = np.asarray(radius_px, float)[:5]
        r = r[np.isfinite(r)]
        r_obs = float(np.median(r)) if len(r) else None
    kept, refused = [], []
    for zone in LAUNCH_ZONES[name]:
        centre, sigma, label = launch_zone(name, zone, ball_radius_m)
        depth = float(camera.depth(centre[None])[0])
        if depth <= ball_radius_m:
            refused.append(f"{zone}: behind the camera")
            continue
        rel = centre - origin
        along = rays @ rel
        miss = np.linalg.norm(rel[None, :] - along[:, None] * rays, axis=1)
        gap = float(np.min(np.where(along > 0, miss, np.inf)))
        if not gap <= 3.0 * sigma + ZONE_RAY_M:
            refused.append(f"{zone}: the flight's path extended back passes {gap:.2f} m from it")
            continue
        if r_obs is not None:
            r_zone = camera.focal_px * ball_radius_m / depth
            if abs(r_obs / r_zone - 1.0) > ZONE_RADIUS_GATE + 3.0 * sigma / depth:
                refused.append(f"{zone}: the ball looks {r_obs:.1f} px, not the {r_zone:.1f} px of a ball there")
                continue
        kept.append((gap / sigma, sigma, centre, label))
    if not kept:
        return None, "no launch zone of the template agrees with the flight (" + "; ".join(refused) + ")"
    _, sigma, centre, label = min(kept, key=lambda k: (k[1], k[0]))  # the narrowest that agrees
    others = f" (not {'; '.join(refused)})" if refused else ""
    return (centre, sigma, label), f"launch zone '{label}' agrees with the flight's start{others}"


def flight_anchor(clip, camera: Camera, ball_radius_m: float, f, previous=None, hint=None):
    """The depth anchor of one tracked flight.

    Parameters
    ----------
    clip : balltraj.pipeline.ClipInput
    camera : Camera
    ball_radius_m : float [m]
    f : the tracked flight (``t``, ``uv``, ``radius_px``, ``streak_px``, ``flight``)
    previous : the flight just before when it ended on a bounce, or None
    hint : ((x, y, z), sigma) or None
        The user's start point [m].

    Returns
    -------
    anchor : balltraj.camera.anchors.Anchor
    keep : ndarray of bool, shape (N,) or None
        The observations clear of the resting ball's spot (None: keep all).
    section : dict
        The record's ``depth_anchor`` section.
    """
    zone, zone_reason = template_zone(camera, ball_radius_m, f.t[:10], f.uv[:10], f.radius_px[:10])
    anchor, search = depth_anchor(clip.path, camera, ball_radius_m, f.t[:10], f.uv[:10], flight=f.flight,
                                  radius_px=f.radius_px, previous=None if previous is None else (previous.t, previous.uv),
                                  hint=hint, zone=zone, capture_fps=clip.capture_fps)
    keep = None if search.ball is None else clear_of_rest_spot(search.ball, f.uv, f.radius_px, f.streak_px)
    section = {"name": anchor.name, "note": anchor.note,
               "start_near_m": None if anchor.start_near_m is None else list(anchor.start_near_m),
               "start_sigma_m": anchor.start_sigma_m, "resting_ball": search.reason, "template_zone": zone_reason,
               "template": camera.template, "frames_dropped_at_rest_spot": 0 if keep is None else int((~keep).sum())}
    return anchor, keep, section


__all__ = ["template_zone", "flight_anchor", "depth_warnings"]


def depth_warnings(anchor, radius: dict | None = None) -> list[str]:
    """Warnings for a one-camera flight whose depth rests on the ball's apparent size alone.

    ``radius``: the flight's radius summary (``RadiusRefinement.summary()``), None when the radii were
    not refined. The detector's radius on small, shaded or blurred balls was measured 10-26 % small on
    independently rendered clips, the edge-fit radius (``vision/ball_size.py``) within 5 % on both
    renderers for balls of 2.5 px radius and more (docs/validation.md, one camera); the fit's radius-scale prior is 6 %: beyond it the
    launch speed can be off by tens of per cent with a sigma that does not show it."""
    if anchor.name == "none":
        return ["nothing fixes the depth along the camera's line of sight (no ball at rest, bounce, field template, "
                "start point or measured ball size): the launch speed and the deflection are rough; film the ball "
                "at rest before the kick or throw, or add a second camera"]
    if anchor.name != "apparent size":
        return []
    if radius is not None and radius.get("refined", 0) >= 0.5 * max(1, sum(radius.get(k, 0) for k in
                                                                         ("refined", "scaled", "kept"))):
        return ["the depth along the camera's line of sight rests on the ball's apparent size alone (measured from "
                "its edge): in independently rendered clips tracked end to end the launch speed came out 4-12 % off, "
                "beyond its stated uncertainty in some; film the ball at rest "
                "before the kick or throw, calibrate the camera on a field template, give --start-near, or add a "
                "second camera"]
    return ["the depth along the camera's line of sight rests on the ball's apparent size alone: on a small, "
            "shaded or blurred ball the measured size can be a quarter too small, and the launch speed then tens "
            "of per cent off beyond its stated uncertainty; film the ball at rest before the kick or throw, "
            "calibrate the camera on a field template, give --start-near, or add a second camera"]
