"""Checks of the second realism renderer (tests/scene_outside.py) itself, not of the tracker."""
import math
import sys
from dataclasses import replace
from pathlib import Path

import numpy as np
import pytest

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from scene_outside import FOOTBALL, TENNIS, Ball, Lens, Shot, Style, fly, render_shot  # noqa: E402

av = pytest.importorskip("av")


def _decode(path, fmt="rgb24"):
    """Decoded frames (RGB, or the luma plane for "gray") and their container times [s]."""
    with av.open(str(path)) as c:
        frames = [(f.to_ndarray(format=fmt).astype(np.int16), float(f.time)) for f in c.decode(video=0)]
    return [f for f, _ in frames], np.array([t for _, t in frames])


def test_projection_of_a_known_point():
    # Source: pinhole projection with a radial distortion factor 1 + k1 r^2 + k2 r^4 (Brown 1966), worked by hand:
    # camera at (0, 0, 1) looking along +y; the point (1, 10, 1.5) is 1 m right, 0.5 m up, 10 m ahead, so
    # x = 0.1, y = -0.05, r^2 = 0.0125, factor = 1 - 0.1 * 0.0125 + 0.02 * 0.0125^2 = 0.998753125.
    lens = Lens((640, 480), 500.0, (0.0, 0.0, 1.0), k1=-0.1, k2=0.02)
    uv, depth = lens.project(np.array([[1.0, 10.0, 1.5]]))
    fac = 1 - 0.1 * 0.0125 + 0.02 * 0.0125 ** 2
    assert uv[0] == pytest.approx([319.5 + 500 * 0.1 * fac, 239.5 - 500 * 0.05 * fac], abs=1e-9)
    assert depth[0] == pytest.approx(10.0)
    # turned 90 degrees to the right, the camera looks along +x: a point ahead on that axis is the image centre
    turned = replace(lens, yaw=90.0)
    uv, depth = turned.project(np.array([[7.0, 0.0, 1.0]]))
    assert uv[0] == pytest.approx([319.5, 239.5], abs=1e-9) and depth[0] == pytest.approx(7.0)
    # pitched up by atan(0.2): the point 0.2 m up per metre ahead is the centre (invariant: the view axis)
    up = replace(lens, pitch=math.degrees(math.atan(0.2)))
    assert up.project(np.array([[0.0, 5.0, 2.0]]))[0][0] == pytest.approx([319.5, 239.5], abs=1e-9)


def test_projection_agrees_with_opencv():
    # Source: an independent implementation of the same model, cv2.projectPoints (world-to-camera rotation and
    # translation, pinhole, radial terms k1 and k2)
    import cv2

    lens = Lens((1280, 720), 1000.0, (1.0, -3.0, 1.4), yaw=20.0, pitch=8.0, roll=2.0, k1=-0.12, k2=0.03)
    pts = np.array([[0.0, 6.0, 1.0], [4.0, 10.0, 3.0], [-2.0, 5.0, 0.2], [3.0, 20.0, 8.0]])
    rot = lens.rotation()
    k = np.array([[1000.0, 0, 639.5], [0, 1000.0, 359.5], [0, 0, 1]])
    ref, _ = cv2.projectPoints(pts, cv2.Rodrigues(rot)[0], -rot @ np.asarray(lens.pos), k,
                               np.array([-0.12, 0.03, 0, 0, 0]))
    assert np.max(np.abs(lens.project(pts)[0] - ref[:, 0])) < 1e-6
    assert np.allclose(rot @ rot.T, np.eye(3)) and np.linalg.det(rot) == pytest.approx(1.0)


def test_distortion_round_trip():
    # invariant: undistort inverts distort over the frame
    lens = Lens((640, 480), 500.0, k1=-0.08, k2=0.01)
    x, y = np.meshgrid(np.linspace(-0.64, 0.64, 9), np.linspace(-0.48, 0.48, 7))
    xb, yb = lens.undistort(*lens.distort(x, y), iters=40)
    assert np.max(np.abs(xb - x)) < 1e-9 and np.max(np.abs(yb - y)) < 1e-9


def test_flight_without_air_is_the_closed_form_parabola():
    # Source: constant-acceleration kinematics, z = z0 + vz t - g t^2 / 2 (common practice)
    ball = Ball(0.11, 0.43, cd=0.0, cl=0.0)
    tt, pos, seg = fly(ball, (0, 0, 1.0), (3.0, 1.0, 8.0), 0.0, 1.5)
    t = tt - tt[0]
    assert np.max(np.abs(pos[:, 2] - (1.0 + 8.0 * t - 0.5 * 9.81 * t ** 2))) < 1e-9
    assert np.max(np.abs(pos[:, 0] - 3.0 * t)) < 1e-9 and np.all(seg == 0)


def test_flight_with_drag_and_lift_matches_solve_ivp():
    # Source: an independent integrator (scipy solve_ivp, DOP853) on the same drag + lift equations
    from scipy.integrate import solve_ivp

    ball = TENNIS
    k = 0.5 * 1.2 * math.pi * ball.radius_m ** 2 / ball.mass_kg
    axis = np.asarray(ball.spin_axis, float) / np.linalg.norm(ball.spin_axis)

    def rhs(_, s):
        v = s[3:]
        sp = np.linalg.norm(v)
        return np.r_[v, np.array([0, 0, -9.81]) - k * ball.cd * sp * v + k * ball.cl * sp * np.cross(axis, v)]

    tt, pos, _ = fly(ball, (0, 0, 2.0), (30.0, 0.0, 3.0), 0.0, 0.6)
    ref = solve_ivp(rhs, (0, tt[-1]), [0, 0, 2.0, 30.0, 0.0, 3.0], method="DOP853", rtol=1e-10, atol=1e-12,
                    t_eval=tt[::200])
    assert np.max(np.abs(ref.y[:3].T - pos[::200])) < 1e-6


def _still_shot(**kw):
    # a black ball lit from behind (a plain silhouette) thrown straight up, seen from the side, on a court
    base = dict(lens=Lens((320, 240), 260.0, (0.0, -4.0, 1.2), k1=0.0),
                ball=replace(FOOTBALL, pattern="plain", albedo=(0.0, 0.0, 0.0)), p0=(0.3, 0.0, 0.6),
                v0=(0.0, 0.0, 3.5), t_launch=0.05, duration=0.4, capture_fps=30, container_fps=30, shutter=1 / 4000,
                readout=0.0, style=Style("court", None, sun=(0.0, 1.0, 0.3)), auto_exposure=False, vignette=0.0,
                read_noise=0.0, bitrate=20_000_000, shadow=False)
    base.update(kw)
    return Shot(**base)


@pytest.mark.parametrize("moving", [False, True])
def test_truth_centre_and_radius_agree_with_the_rendered_image(tmp_path, moving):
    # Source: image moments of the ball's coverage, measured from the decoded clip against the same clip without
    # the ball; the radius from the covered area, A = pi r^2; f R / depth (pinhole; depth along the view axis, 4 m + y).
    # "moving": hand-held shake and roll, a 30 ms rolling shutter, a sideways ball and barrel distortion, which
    # the truth must follow (radius then f R / depth times the lens's local magnification)
    shot = _still_shot()
    if moving:
        shot = replace(shot, lens=replace(shot.lens, k1=-0.15), v0=(4.0, 0.0, 3.5), shake_px=2.0, roll_deg=0.5,
                       readout=0.03, shutter=1 / 500)
    truth = render_shot(shot, tmp_path / "ball.mp4")
    empty = render_shot(replace(shot, t_launch=10.0), tmp_path / "empty.mp4")
    assert not any(r["visible"] for r in empty)
    with_ball, _ = _decode(tmp_path / "ball.mp4", "gray")
    without, _ = _decode(tmp_path / "empty.mp4", "gray")
    tt, pos, _ = fly(shot.ball, shot.p0, shot.v0, 0.05, 1.0)
    for k in (3, 6, 9):
        row = truth[k]
        assert row["visible"]
        if not moving:
            depth = np.interp(row["t"], tt, pos[:, 1]) + 4.0
            assert row["r"] == pytest.approx(260.0 * shot.ball.radius_m / depth, rel=1e-6)
        # every channel of a pixel c covered by the black ball is sqrt(1 - c) of the background's (square-root
        # tone curve), so its grey value is too: c = 1 - (Y / Y_empty)^2 (full-range grey from the decoder)
        cover = 1 - (with_ball[k] / np.maximum(without[k], 1.0)) ** 2
        vv, uu = np.mgrid[:cover.shape[0], :cover.shape[1]]
        cover[np.hypot(uu - row["u"], vv - row["v"]) > 2.5 * row["r"]] = 0  # a window around the ball
        assert np.average(uu, weights=cover) == pytest.approx(row["u"], abs=0.3)
        assert np.average(vv, weights=cover) == pytest.approx(row["v"], abs=0.3)
        assert math.sqrt(cover.sum() / math.pi) == pytest.approx(row["r"], rel=0.04)


def test_repeated_frame_flags_match_identical_decoded_frames(tmp_path):
    # Source: 25 -> 30 frames/s conversion shows every 5th exposure twice: 6 frames carry 5 exposures
    # (common practice); a repeated frame decodes (nearly) as the frame before it, a new exposure does not
    shot = _still_shot(capture_fps=25, container_fps=30, duration=0.8, read_noise=0.01, shake_px=0.5)
    truth = render_shot(shot, tmp_path / "rep.mp4")
    frames, times = _decode(tmp_path / "rep.mp4")
    assert len(frames) == len(truth) == 24
    assert sum(r["repeat"] for r in truth) == 4
    assert [r["exposure"] for r in truth][:7] == [0, 0, 1, 2, 3, 4, 5]
    assert np.allclose(times, [r["t"] for r in truth], atol=1e-6)
    for k in range(1, len(frames)):
        mad = np.abs(frames[k] - frames[k - 1]).mean()
        if truth[k]["repeat"]:
            assert mad < 0.5
        else:
            assert mad > 1.5


def test_dropped_exposures_and_the_gap_at_a_scene_cut(tmp_path):
    # Source: 30 -> 24 frames/s keeps 4 of every 5 exposures (common practice); the cut adds one frame
    # interval to the container times from the cut on (the renderer's own documented rule)
    shot = _still_shot(capture_fps=30, container_fps=24, duration=0.5, cut_at=0.2, cut_style=Style("grass"))
    truth = render_shot(shot, tmp_path / "drop.mp4")
    steps = np.diff([r["exposure"] for r in truth])
    assert set(steps.tolist()) == {1, 2} and np.sum(steps == 2) == 2
    _, times = _decode(tmp_path / "drop.mp4")
    gaps = np.diff(times) * 24
    assert np.allclose(gaps, [2.0 if truth[k + 1]["cut"] and not truth[k]["cut"] else 1.0
                              for k in range(len(gaps))], atol=1e-3)
    assert not any(r["visible"] for r in truth if not r["cut"])
