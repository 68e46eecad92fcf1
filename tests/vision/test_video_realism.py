"""Tracking on short clips from the independent realism renderer (tests/scene_realism.py): repeated
frames, a dark ball on a bright sky, bounce against a lift-curved path, overlay or not, camera drift,
a scene cut; and the lens magnification, the 1/distance radius law and the slow-motion message."""
import math

import cv2
import numpy as np
import pytest
from scene_realism import BASEBALL, TENNIS, Ball, Cam, Person, Shot, render_shot

from balltraj.camera.model import look_at_camera
from balltraj.vision.checks import _radius_consistent
from balltraj.vision.clip import read_frames
from balltraj.vision.detect import Candidate, lens_magnification
from balltraj.vision.frames import FrameGuard
from balltraj.vision.pipeline import slow_motion_hint, track_clip
from balltraj.vision.track import _scene_travel
from balltraj.vision.trackpoints import _Track

LOB_CAM = Cam((6.0, -9.0, 1.5), (6.0, 0.0, 2.2), 700, (480, 270))
LOB = [(0.05, (0.5, 0, 1.2), (11.0, 0, 6.5), (0, 1, 0))]


def _matches(truth, res):
    """(share of distinct exposures with the ball in view matched within max(2 px, r/2), share of
    observations that match; observations on repeated frames count as wrong)."""
    hit, good, n = set(), 0, 0
    for f in res.flights:
        for k, (u, v) in zip(f.frame, f.uv):
            row = truth[int(k)]  # the stored frame the observation was measured in
            n += 1
            if "u" in row and not row["repeat"] and math.hypot(u - row["u"], v - row["v"]) <= max(2.0, 0.5 * row["r"]):
                good += 1
                hit.add(row["exposure"])
    visible = {r["exposure"] for r in truth if "u" in r}
    return len(hit & visible) / max(1, len(visible)), good / max(1, n)


@pytest.fixture(scope="module")
def repeated(tmp_path_factory):
    # 20 exposures a second stored at 50 frames/s: every exposure shown 2 or 3 times
    path = tmp_path_factory.mktemp("rep") / "rep.mp4"
    truth = render_shot(Shot(LOB_CAM, TENNIS, LOB, duration_s=1.3, capture_fps=20, stored_fps=50,
                             exposure_s=1 / 1000, seed=11), path)
    return path, truth


def test_repeated_frames_are_recognised_and_give_one_observation_per_exposure(repeated):
    path, truth = repeated
    guard = FrameGuard()
    kinds = []
    for _, _, g in read_frames(path, grey=True):
        kinds.append(guard.check(cv2.resize(g, (g.shape[1] // 2, g.shape[0] // 2), interpolation=cv2.INTER_AREA)).kind)
    is_rep = np.array([r["repeat"] for r in truth])
    got = np.array([k == "repeat" for k in kinds])
    # Source: the renderer's own record of which stored frame repeats which exposure
    assert np.mean(got[1:] == is_rep[1:]) >= 0.95
    res = track_clip(path, None, TENNIS.radius_m)
    assert len(res.flights) == 1
    f = res.flights[0]
    exposures = [truth[int(k)]["exposure"] for k in f.frame]
    assert len(set(exposures)) == len(exposures)  # never two observations of one exposure
    assert not any(truth[int(k)]["repeat"] for k in f.frame)  # each timed by the exposure's first frame
    assert any("repeat" in w for w in res.warnings)
    recall, precision = _matches(truth, res)
    assert recall >= 0.8 and precision >= 0.9


def test_dark_ball_on_a_bright_sky(tmp_path):
    dark = Ball(0.0335, 0.058, 0.55, 0.10, (70, 80, 90), (40, 40, 40))  # a grey-brown ball, darker than the sky
    path = tmp_path / "sky.mp4"
    truth = render_shot(Shot(LOB_CAM, dark, LOB, duration_s=1.0, capture_fps=60, exposure_s=1 / 1000, sky=True,
                             seed=12), path)
    sky = [r for r in truth if "u" in r]
    frame = next(g for k, _, g in read_frames(path, grey=True) if k == 30)
    assert frame[5:20, :].mean() > 180  # Source: the renderer's sky (bright), the ball is darker
    res = track_clip(path, None, dark.radius_m)
    assert len(res.flights) == 1
    recall, precision = _matches(truth, res)
    assert recall >= 0.85 and precision >= 0.95, (recall, precision, len(sky))


def test_a_ball_through_exposures_dropped_by_frame_rate_conversion_is_followed(tmp_path):
    # 30 exposures a second stored at 24 (every fifth left out: the ball moves two steps between two
    # frames), behind netting, a slow pan and a person: the benchmark's clip (bench_track_realism.py)
    path = tmp_path / "drops.mp4"
    truth = render_shot(Shot(Cam((8.0, -9.0, 1.5), (8.0, 0.0, 2.5), 900, (960, 540)), TENNIS,
                             [(0.1, (0, 0, 1.2), (13, 0, 7.5), (0, 1, 0))], duration_s=1.8, capture_fps=30,
                             stored_fps=24, exposure_s=1 / 500, netting=True, drift_px_s=(12.0, 3.0), shake_px=0.4,
                             people=[Person(600, -35, 300, 500)], seed=6), path)
    exposure = [r["exposure"] for r in truth]
    assert set(np.diff(exposure)) == {1, 2}  # Source: the renderer's own record of the exposure shown
    recall, _ = _matches(truth, track_clip(path, None, TENNIS.radius_m))
    # (measured 4 December 2026: 0.90; 0.00 before a track that has seen a left-out exposure looked for
    # the ball one exposure further on -- lost by a hair after a left-out exposure, the ball's candidates
    # were then taken by tentative tracks of the netting, with this machine's encoder build; 0.90 with
    # another's)
    assert recall >= 0.8, recall


def test_a_bounce_splits_the_flight_and_a_lift_curved_pitch_does_not(tmp_path):
    cam = Cam((8.0, -7.0, 1.0), (8.0, 0.0, 0.7), 560, (480, 270))
    bounce = tmp_path / "bounce.mp4"
    tb = render_shot(Shot(cam, TENNIS, [(0.03, (4.0, 0, 1.0), (24, 0, -3.0), (0, 1, 0))], duration_s=0.5,
                          capture_fps=120, exposure_s=1 / 1000, sky=False, seed=13), bounce)
    res = track_clip(bounce, None, TENNIS.radius_m)
    # Source: the renderer's solve_ivp flight with a ground event (one bounce inside the view)
    assert len(res.flights) == 2 and res.flights[0].bounce and not res.flights[1].bounce
    recall, _ = _matches(tb, res)
    assert recall >= 0.75
    # a pitch with an extreme lift coefficient: its image path bends, smoothly
    backspin = Ball(0.0366, 0.145, 0.35, 0.45, (225, 230, 235), (50, 50, 190))
    pitch = tmp_path / "pitch.mp4"
    tp = render_shot(Shot(cam, backspin, [(0.03, (2.0, 0, 1.2), (34, 0, -1.5), (0, -1, 0))], duration_s=0.45,
                          capture_fps=240, exposure_s=1 / 2000, sky=False, seed=14), pitch)
    res = track_clip(pitch, None, backspin.radius_m)
    assert len(res.flights) == 1 and not res.flights[0].bounce
    recall, precision = _matches(tp, res)
    assert recall >= 0.85 and precision >= 0.95


def test_overlay_does_not_change_what_is_tracked(repeated, tmp_path):
    path, _ = repeated
    plain = track_clip(path, None, TENNIS.radius_m)
    ov = tmp_path / "overlay.mp4"
    drawn = track_clip(path, None, TENNIS.radius_m, overlay_path=ov)
    assert len(plain.flights) == len(drawn.flights) >= 1
    for a, b in zip(plain.flights, drawn.flights):  # an invariant: the same pixels give the same numbers
        assert np.array_equal(a.t, b.t) and np.array_equal(a.uv, b.uv) and np.array_equal(a.radius_px, b.radius_px)
    n_ov = sum(1 for _ in read_frames(ov))
    assert n_ov == plain.n_frames
    # the flight is drawn in colour on the grey frame where the ball was
    f = plain.flights[0]
    k = int(f.frame[len(f.frame) // 2])
    img = next(fr for i, _, fr in read_frames(ov) if i == k)
    u, v = f.uv[len(f.frame) // 2]
    patch = img[max(0, int(v) - 15):int(v) + 15, max(0, int(u) - 15):int(u) + 15].astype(int)
    assert (np.abs(patch[..., 2] - patch[..., 0]) > 80).any()


def test_the_extension_reads_the_same_frames_held_or_decoded_again(repeated, monkeypatch):
    # an invariant: the frames held while tracking are the decoder's own, so the flights carried on
    # from them equal those carried on after decoding the file a second time
    import balltraj.vision.pipeline as vp
    path, _ = repeated
    held = track_clip(path, None, TENNIS.radius_m)
    monkeypatch.setattr(vp, "EXTEND_HOLD_BYTES", 0)
    again = track_clip(path, None, TENNIS.radius_m)
    assert len(held.flights) == len(again.flights) >= 1
    for a, b in zip(held.flights, again.flights):
        assert np.array_equal(a.frame, b.frame) and np.array_equal(a.uv, b.uv)


def test_frames_of_a_still_view_at_240_fps_keep_their_own_times(tmp_path):
    # a true 240 frames/s clip whose view is still before the pitch: at a low bitrate the encoder makes
    # those frames nearly alike and they are taken for repeats, but they are not a frame-rate
    # conversion, so every observation keeps its frame's own time, k / 240 s (Source: the container's
    # timestamps, which the renderer writes at exactly 1/240 s; the re-timing by exposure count put
    # them up to 2.4 frames late here)
    cam = Cam((9.0, -7.0, 1.5), (9.0, 0.0, 1.6), 600, (480, 270))
    shot = Shot(cam, BASEBALL, [(0.25, (2, 0, 1.7), (30, 0, 2.0), (0, -1, 0))], duration_s=0.6, capture_fps=240,
                noise=0.5, bitrate=600_000, seed=3)
    path = tmp_path / "still.mp4"
    render_shot(shot, path)
    res = track_clip(path, None, BASEBALL.radius_m)
    assert any("barely differ" in w for w in res.warnings), res.warnings  # frames were taken for repeats
    assert not any("frame-rate conversion" in w for w in res.warnings)
    assert res.flights
    for f in res.flights:
        assert np.max(np.abs(f.t - f.frame / 240.0)) < 1e-6


def _view_motion_errors(path, shake_px, drift_px_s, seed):
    """Per frame, how far the tracker's measured view motion is from the renderer's own record of the
    view's shift [px, full frame], how far the view moved in all, and the renderer's truth."""
    truth = render_shot(Shot(LOB_CAM, BASEBALL, LOB, duration_s=1.2, capture_fps=30, exposure_s=1 / 1000,
                             shake_px=shake_px, drift_px_s=drift_px_s, seed=seed), path)
    guard = FrameGuard()
    errs = []
    s0 = np.array(truth[0]["view_shift"])
    for k, _, g in read_frames(path, grey=True):
        guard.check(cv2.resize(g, (g.shape[1] // 2, g.shape[0] // 2), interpolation=cv2.INTER_AREA))
        errs.append(np.hypot(*(2 * guard.total_motion[:, 2] - (np.array(truth[k]["view_shift"]) - s0))))
    return errs, float(np.hypot(*(np.array(truth[-1]["view_shift"]) - s0))), truth


def test_camera_drift_is_measured_and_compensated(tmp_path):
    path = tmp_path / "drift.mp4"
    errs, moved, truth = _view_motion_errors(path, shake_px=0.6, drift_px_s=(15.0, -4.0), seed=15)
    # Source: the renderer's own record of the view's shift in each frame
    assert np.median(errs) < 0.5 and np.max(errs) < 2.0
    assert moved > 10  # the view really drifted
    res = track_clip(path, None, BASEBALL.radius_m)
    recall, precision = _matches(truth, res)
    assert len(res.flights) == 1 and recall >= 0.8 and precision >= 0.85
    # with a fixed camera file the drift is reported
    cam = look_at_camera("c", [6.0, -9.0, 1.5], [6.0, 0.0, 2.2], 700, (480, 270))
    res = track_clip(path, cam, BASEBALL.radius_m)
    assert any("no longer applies" in w for w in res.warnings)


def test_a_scene_cut_ends_every_track(tmp_path):
    path = tmp_path / "cut.mp4"
    truth = render_shot(Shot(LOB_CAM, TENNIS, [(0.05, (0.5, 0, 1.2), (11.0, 0, 6.5), (0, 1, 0))], duration_s=1.2,
                             capture_fps=30, exposure_s=1 / 1000, cut_at_s=0.7, seed=16), path)
    t_cut = next(r["t"] for r in truth if r["cut"])
    res = track_clip(path, None, TENNIS.radius_m)
    assert any("scene cut" in w for w in res.warnings)
    for f in res.flights:
        assert f.t[-1] < t_cut or f.t[0] >= t_cut  # nothing spans the cut


def test_lens_magnification_matches_the_radial_law():
    # Source: for x_d = x (1 + k1 r^2) the local area scale is s (s + 2 k1 r^2), s = 1 + k1 r^2
    # (the Jacobian of a radial map r -> r s(r) is s * d(r s)/dr)
    cam = look_at_camera("w", [0, -5, 1.5], [0, 0, 1.5], 600, (800, 600), dist=(-0.2, 0, 0, 0, 0))
    uv = np.array([[400.0, 300.0], [700.0, 500.0], [50.0, 80.0]])
    xn = cam.undistort_normalised(uv)
    r2 = (xn ** 2).sum(-1)
    s = 1 - 0.2 * r2
    assert np.allclose(lens_magnification(cam, uv), np.sqrt(s * (s - 0.4 * r2)), rtol=1e-6)
    assert lens_magnification(cam, uv)[0] == pytest.approx(1.0, abs=1e-9)


def _track_with_radii(r, dt=1 / 60):
    tr = _Track()
    for i, ri in enumerate(r):
        tr.add(i, i * dt, Candidate(100.0 + 5 * i, 200.0, float(ri), 0.0, 0.0, 10.0, 30.0))
    return tr


def test_radius_test_follows_one_over_distance():
    # a ball kicked away from a camera behind the kicker: distance 1.5 m -> 30 m at a steady speed,
    # radius = f R / distance (Source: pinhole projection)
    t = np.arange(60) / 60
    dist = 1.5 + 28.5 * t
    r = 900 * 0.11 / dist
    assert _radius_consistent(_track_with_radii(r))
    rng = np.random.default_rng(3)
    assert not _radius_consistent(_track_with_radii(r * rng.choice([0.6, 1.0, 1.6], len(r))))


def test_slow_motion_message_names_the_capture_rate():
    # Source: kinematics; time stretched by s makes the apparent fall g / s^2 (8x: 240 shown at 30)
    msg = slow_motion_hint(30.0, None, [9.81 / 64])
    assert msg is not None and "--capture-fps" in msg and "240" in msg and "8x" in msg
    assert slow_motion_hint(30.0, None, [9.5]) is None  # a real-time clip
    assert slow_motion_hint(30.0, 240.0, [9.81 / 64]) is None  # already re-timed


def test_a_long_pan_is_followed_past_its_key_frames(tmp_path):
    # a steady pan of 300 px over 1.2 s at 30 frames/s: the corners of a key frame leave the view or
    # stop fitting one motion long before the pan ends; the view's motion must carry on from where
    # it was (not snap back to the key frame's place)
    errs, moved, _ = _view_motion_errors(tmp_path / "pan.mp4", shake_px=0.3, drift_px_s=(250.0, -20.0), seed=17)
    # Source: the renderer's own record of the view's shift in each frame
    assert moved > 250
    # (measured: median 2.5 px, 5.8 px at the end of the 290-px pan; a view snapped back to its key
    # frame's place is off by about as far as the pan went, 150-270 px)
    assert np.median(errs) < 5.0 and errs[-1] < 0.05 * moved, (np.median(errs), errs[-1], moved)


def test_a_track_that_stays_in_place_in_the_scene_is_not_a_flight():
    # an edge of a panned view, misregistered: it moves across the frame with the view but stays in
    # one place in the scene (its scene position constant); the same motion with a scene position
    # that moves too is kept by this test (an invariant of the scene-travel measure)
    def track(scene_moves):
        pts = []
        for i in range(12):
            u, v = 600.0 - 10 * i, 300.0 + 4 * i
            us, vs = (u, v) if scene_moves else (640.0, 280.0)
            pts.append((i, i / 30, Candidate(u, v, 5.0, 2.0, 0.0, 78.0, 60.0, u_scene=us, v_scene=vs)))
        return _Track.of(pts)

    assert _scene_travel(track(False)) < 1e-9
    assert abs(_scene_travel(track(True)) - np.hypot(110, 44)) < 1e-6
    # a ball thrown up and caught where it rose, filmed hand-held: back at its start in the scene, but it
    # reached 60 px up (its first-to-last travel would be 0)
    up_down = _Track.of([(i, i / 30, Candidate(600.0 - 10 * i, 300.0, 5.0, 2.0, 0.0, 78.0, 60.0,
                                               u_scene=640.0, v_scene=300.0 - 60 * (1 - ((i - 6) / 6) ** 2)))
                         for i in range(13)])
    assert abs(_scene_travel(up_down) - 60.0) < 1e-6
    # the view first moved near the end of a pitch: the points before have no scene position, which is then
    # their image position (the pitch reached 200 px, not the few px of its last points)
    late = _Track.of([(i, i / 30, Candidate(600.0 - 20 * i, 300.0, 5.0, 2.0, 0.0, 78.0, 60.0,
                                            **({"u_scene": 600.0 - 20 * i, "v_scene": 300.0} if i >= 9 else {})))
                      for i in range(11)])
    assert abs(_scene_travel(late) - 200.0) < 1e-6
    still_view = _Track.of([(i, i / 30, Candidate(600.0 - 10 * i, 300.0, 5.0, 2.0, 0.0, 78.0, 60.0)) for i in range(5)])
    assert _scene_travel(still_view) == np.inf  # the view never moved: nothing to undo
