"""Pairing one flight across the clips of unsynchronised cameras, and choosing the clip its spin is read
from (used by :func:`balltraj.pipeline.analyze_rig`)."""

from __future__ import annotations

import numpy as np

from .camera.model import Camera
from .camera.triangulate import estimate_time_offset
from .formats import Observations
from .pipeline_spin import FlightSurfaces, apply_surface_spin, frame_rate
from .vision.surface_spin import SurfaceSpin


#: an offset is accepted when the two cameras' tracks triangulate to within this [px] (median)
MATCH_REPROJECTION_PX = 6.0


def matching_flight(cam_a: Camera, f, cam_b: Camera, flights) -> tuple | None:
    """The flight of camera b that is flight ``f`` of camera a (whose clock is the rig's), and b's
    clock offset [s] (b's time + offset = a's time)."""
    best = None
    for g in flights:
        # coarse guess: the rig file's offset, or the two tracks starting together
        for guess in {cam_b.time_offset_s, float(f.t[0] - g.t[0])}:
            off, err = estimate_time_offset(cam_a, f.t, f.uv, cam_b, g.t, g.uv, guess_s=guess, search_s=0.3)
            if err < MATCH_REPROJECTION_PX and (best is None or err < best[2]):
                best = (g, off, err)
    return None if best is None else best[:2]


def concatenate_observations(parts, path: str):
    return Observations(path, np.concatenate([p.t for p in parts]), [c for p in parts for c in p.camera],
                        np.concatenate([p.uv for p in parts]), np.concatenate([p.radius_px for p in parts]),
                        np.concatenate([p.quality for p in parts]), None)


def rig_surface_spin(record: dict, fit, seen, readers, model=None) -> dict:
    """Put the spin read from a ball's surface into a rig flight's record (in place; also returned).

    The clips are tried fastest frame rate first (then the largest ball in the image); the first whose
    surface can be read gives the spin (the spin vector is in the world frame, so any camera's clip
    serves, and a clock offset does not change a rate). When none can, the record keeps the flight's
    transverse spin and says why for the fastest clip.

    Parameters
    ----------
    record : dict
        The rig flight's record.
    fit : FlightFit
        Its fit through all cameras.
    seen : sequence of (int, TrackedFlight)
        For each camera that saw the flight: its position in the rig and its tracked flight.
    readers : sequence of FlightSurfaces
        One per camera of the rig, in the rig's order.
    model : FlightModel, optional
        The flight model of the fit.
    """
    order = sorted(seen, key=lambda s: (-round(frame_rate(s[1])), -float(np.nanmedian(s[1].radius_px))))
    first: tuple[SurfaceSpin, str] | None = None
    for i, flight in order:
        reader: FlightSurfaces = readers[i]
        surface = reader.read(flight)
        if surface.readable:
            return apply_surface_spin(record, fit, surface, model=model, camera_name=reader.camera.name)
        first = first or (surface, reader.camera.name)
    return apply_surface_spin(record, fit, first[0], model=model, camera_name=first[1])
