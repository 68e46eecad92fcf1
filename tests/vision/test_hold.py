"""The frames kept while tracking for the extension (balltraj/vision/hold.py)."""
from pathlib import Path

import numpy as np

import balltraj.vision.extend as ext
import balltraj.vision.pipeline as vp
from balltraj.vision.hold import FrameHold

ROOT = Path(__file__).resolve().parents[2]


def test_the_frames_near_a_confirmed_track_are_kept_within_the_budget():
    # Invariant: with room enough, every exposure from REACH before a confirmed track's first exposure
    # to REACH after its last is kept; never more frames than the budget holds
    rng = np.random.default_rng(0)
    for _ in range(50):
        n, reach = 400, int(rng.integers(5, 40))
        a = int(rng.integers(reach, 300))
        b = a + int(rng.integers(1, 60))
        most = int(rng.integers(20, 400))
        h = FrameHold(most * 4, 4, reach=reach)
        for i in range(n):
            h.add(i, np.zeros(4, np.uint8), live=a <= i <= b)
            assert len(h.frames()) <= most
        if b + reach < n and (b - a + 1) + 3 * reach <= most:
            assert set(range(a - reach, b + reach + 1)) <= set(h.frames())


def test_tracking_decodes_the_clip_once_and_extends_as_a_second_decoding_would(monkeypatch):
    # the extension on the frames kept while tracking gives the same flights as on frames decoded again
    # (the frames are the same pixels), and reads nothing more from the file
    clip = ROOT / "sample_clips" / "pitch-side.mp4"  # (the extension adds 6 points to its 107)
    calls = []
    real = ext.read_frames

    def counted(*a, **k):
        calls.append(a)
        return real(*a, **k)

    monkeypatch.setattr(ext, "read_frames", counted)
    once = vp.track_clip(clip, None, 0.0366)
    assert not calls
    monkeypatch.setattr(vp, "EXTEND_HOLD_BYTES", 0)  # nothing kept: the frames needed are decoded again
    twice = vp.track_clip(clip, None, 0.0366)
    assert len(calls) == 1
    assert len(once.flights) == len(twice.flights) >= 1
    for f, g in zip(once.flights, twice.flights):
        assert np.array_equal(f.frame, g.frame) and np.allclose(f.uv, g.uv)
