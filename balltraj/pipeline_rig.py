"""Pairing one flight across the clips of unsynchronised cameras (used by
:func:`balltraj.pipeline.analyze_rig`). Pure computation on tracked flights."""

from __future__ import annotations

import numpy as np

from .camera.model import Camera
from .camera.triangulate import estimate_time_offset
from .formats import Observations


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
