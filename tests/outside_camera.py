"""The second renderer's camera (tests/scene_outside.py) as balltraj's camera model, for the tests and
benchmarks that give the tracker a camera file. Kept out of scene_outside.py, which must not import
balltraj (it is the independent truth)."""
import numpy as np

from balltraj.camera.model import Camera, rotation_vector


def camera_file(shot):
    """The renderer's base camera as balltraj's camera model (same axes: x right, y down, z forward)."""
    lens = shot.lens
    rot = lens.rotation()
    k = [[lens.f, 0, lens.centre[0]], [0, lens.f, lens.centre[1]], [0, 0, 1]]
    return Camera("outside", lens.size, np.array(k), np.array([lens.k1, lens.k2, 0, 0, 0]), rotation_vector(rot),
                  -rot @ np.asarray(lens.pos), readout_s=shot.readout)
