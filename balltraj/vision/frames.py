"""What each decoded frame is: a new exposure, a repeat of the last one, or the first of a new scene;
and how the view moved since the last exposure.

* Repeats. Frame-rate conversion (25 -> 30, 15 -> 30 frames/s, ...) stores some exposures twice or
  more; a re-encoded repeat differs from its original only by the encoder's small refinements, far
  less than two real exposures differ by sensor noise and motion (measured on H.264 and mp4v clips:
  repeats 0.001-0.01 grey levels mean absolute difference at half resolution, distinct exposures
  0.07-4). A frame is a repeat when that mean is under 15 % of the median over recent exposures, or
  when its mean is under half that median and the tail of its differences (the 99.9th percentile) is
  under 0.3 of the upper quartile of recent exposures' tails: a repeat re-coded in a noisy low-bitrate clip can differ from its original
  by half of what two exposures differ by on average, but only by coding noise (measured on 640x360
  H.264 at 800-900 kbit/s: tails of 1-8 grey levels for repeats, 31-51 for exposures). (A test on
  block means -- coding noise averages out over a block, motion does not -- also found those, but
  took for repeats the exposures of a clean clip in which only a small far ball moved, so it is not
  used.)
* Scene cuts. Most of the picture changes at once: a large share of the half-resolution pixels
  differ by far more than the typical frame-to-frame change.
* View motion (hand-held drift, slight pans). Corners (Shi-Tomasi) of the last exposure are followed
  into the new one by pyramidal Lucas-Kanade optical flow and a similarity transform (rotation,
  scale, shift) is fitted to them by RANSAC, so that people and the ball, moving on their own, are
  outliers. The detector warps its background by this transform before differencing.
"""

from __future__ import annotations

from dataclasses import dataclass

import cv2
import numpy as np

IDENTITY = np.array([[1.0, 0.0, 0.0], [0.0, 1.0, 0.0]])


def full_resolution(motion: np.ndarray) -> np.ndarray:
    """The view's motion (2 x 3, half-resolution pixels, as the guard measures it) as a 3 x 3 map of
    full-resolution pixels."""
    return np.vstack([motion * [[1, 1, 2], [1, 1, 2]], [0, 0, 1]])
# Most inexact repeats in a row that frame-rate conversion makes (12 images a second shown at 29.97
# repeat an image up to 3 times; 24 -> 60 and 25 -> 30 once or twice) (common practice). Exact repeats have no
# limit; after a run this long the frame is taken for an exposure (a busy stretch that ended, not a repeat).
MAX_REPEAT_RUN = 3


@dataclass(frozen=True)
class FrameKind:
    kind: str  # "new", "repeat" or "cut"
    motion: np.ndarray  # (2, 3) affine map, half-resolution pixels of the last exposure -> this frame
    moved_px: float  # how far the view centre moved since the last exposure [full-resolution px]
    # a new frame in which nothing differs from the last exposure beyond coding noise (the tail test
    # below) although its mean difference is not small: a repeat re-coded at a low bitrate or as a key
    # frame, or an exposure in which little moved; the tracks tell which (trackpoints.stayed_put)
    doubtful: bool = False
    # nothing differs beyond coding noise, whatever the mean (below a cut's): a repeat if it comes where
    # a conversion's fixed cadence puts the next one (pipeline.on_cadence)
    quiet: bool = False


def _tail_level(d: np.ndarray) -> float:
    """The 99.9th percentile [grey levels] of an 8-bit difference image (from its histogram)."""
    hist = cv2.calcHist([np.ascontiguousarray(d)], [0], None, [256], [0, 256]).ravel()
    return float(np.searchsorted(np.cumsum(hist), 0.999 * d.size))


def _median(xs: list[float]) -> float:
    """np.median of a short list of floats, by sorting (numpy's per-call cost is most of the work
    for the 31 recent differences, taken for every decoded frame)."""
    w = sorted(xs)
    m = len(w)
    return float(w[m // 2]) if m % 2 else (w[m // 2 - 1] + w[m // 2]) / 2


class FrameGuard:
    """Stateful; call :meth:`check` with the half-resolution grey image of every decoded frame."""

    def __init__(self, *, repeat_fraction: float = 0.15, cut_share: float = 0.4, motion: bool = True):
        self.repeat_fraction = repeat_fraction
        self.cut_share = cut_share
        self.motion = motion
        self._prev_small = None  # half-resolution grey of the last exposure
        self._diffs: list[float] = []  # mean absolute differences between recent exposures
        self._tails: list[float] = []  # and the 99.9th percentile of those differences [grey levels]
        self._pts = None
        self._key = None  # key frame the corners were found in, and the view motion at it
        self._key_T = IDENTITY.copy()
        self._still = 0  # consecutive checks that found the view standing still
        self._run = 0  # consecutive frames taken for inexact repeats
        self._k = 0
        self.total_motion = IDENTITY.copy()  # first exposure -> current (half-resolution px)
        self.max_moved_px = 0.0  # largest displacement of the view centre from the first frame [px]

    def check(self, small: np.ndarray) -> FrameKind:
        h, w = small.shape
        if self._prev_small is None:
            self._prev_small = small
            return FrameKind("new", IDENTITY, 0.0)
        a, b = small[::4], self._prev_small[::4]  # every 4th row (a view: no copy) is plenty for a mean
        d = cv2.absdiff(a, b)
        mean = float(cv2.sumElems(d)[0]) / a.size
        tail = _tail_level(d)
        if mean <= 1e-3:
            return FrameKind("repeat", IDENTITY, 0.0)
        typical = _median(self._diffs) if len(self._diffs) >= 3 else None
        if typical is not None and self._looks_repeated(mean, tail, typical):
            if self._run < MAX_REPEAT_RUN:
                self._run += 1
                return FrameKind("repeat", IDENTITY, 0.0)
            # more inexact repeats in a row than frame-rate conversion makes: the scene has calmed down
            # since the recent exposures (a person walked out of view, flicker stopped), so their
            # differences are no measure any more -- this frame is an exposure, and the measure restarts
            self._diffs, self._tails, typical = [], [], None
        self._run = 0
        big_change = max(20.0, 6.0 * typical) if typical is not None else None
        if big_change is not None and mean >= self.cut_share * big_change:  # necessary for a cut: cheap test first
            _, big = cv2.threshold(cv2.absdiff(small, self._prev_small), big_change, 255, cv2.THRESH_BINARY)
            if cv2.countNonZero(big) > self.cut_share * small.size:
                self._reset(small)
                return FrameKind("cut", IDENTITY, 0.0)
        doubtful = typical is not None and mean < 2.0 * typical and self._tail_at_noise(tail)
        # (a key frame re-coded from the same exposure spreads coding noise everywhere: its mean can
        # reach 3 times two exposures' while its tail stays at the noise)
        quiet = typical is not None and mean < 6.0 * typical and self._tail_at_noise(tail)
        self._diffs = (self._diffs + [mean])[-31:]
        self._tails = (self._tails + [tail])[-31:]
        A = self._estimate_motion(small) if self.motion else IDENTITY
        self._prev_small = small
        c = np.array([w / 2, h / 2])
        moved = float(np.hypot(*(A[:, :2] @ c + A[:, 2] - c))) * 2.0
        T = np.vstack([self.total_motion, [0, 0, 1]])
        self.total_motion = (np.vstack([A, [0, 0, 1]]) @ T)[:2]
        self.max_moved_px = max(self.max_moved_px,
                                2.0 * float(np.hypot(*(self.total_motion[:, :2] @ c + self.total_motion[:, 2] - c))))
        return FrameKind("new", A, moved, doubtful, quiet)

    def _tail_at_noise(self, tail: float) -> bool:
        """Nothing in the frame differs from the last exposure beyond coding noise: the tail of the
        differences under 0.3 of the upper quartile of recent exposures' tails."""
        return tail < 0.3 * float(np.percentile(self._tails, 75))

    def _looks_repeated(self, mean: float, tail: float, typical: float) -> bool:
        """A frame that repeats the last exposure inexactly: far less changed than exposures usually
        differ, or a repeat re-coded at a low bitrate -- its mean difference from the original can reach
        half of two exposures' (coding noise spread everywhere), but nothing in it differs much: the
        tail of the differences stays at the coding noise, where two exposures differ by tens of grey
        levels wherever something moved. (The upper quartile of recent exposures' tails: a few repeats
        not yet recognised, at the start, do not drag it down. The mean must be low too: in a clean clip
        where only a small ball moves, the tail of two exposures' differences is itself at the noise in
        many frames -- tested on tail alone, over half of such a clip's exposures were taken for repeats.)"""
        if mean < self.repeat_fraction * typical:
            return True
        return mean < 0.5 * typical and self._tail_at_noise(tail)

    def _reset(self, small):
        self._prev_small = small
        self.total_motion = IDENTITY.copy()
        self._key = None
        self._diffs = []
        self._tails = []

    def _corners(self, img):
        """Up to 6 corners in each cell of a 4 x 4 grid: no single textured object (a person's shirt)
        can outvote the rest of the scene."""
        h, w = img.shape
        pts = []
        for i in range(4):
            for j in range(4):
                y0, y1, x0, x1 = i * h // 4, (i + 1) * h // 4, j * w // 4, (j + 1) * w // 4
                c = cv2.goodFeaturesToTrack(img[y0:y1, x0:x1], maxCorners=6, qualityLevel=0.02, minDistance=8,
                                            blockSize=7)
                if c is not None:
                    pts.append(c.reshape(-1, 2) + [x0, y0])
        return np.concatenate(pts).astype(np.float32).reshape(-1, 1, 2) if pts else None

    def _estimate_motion(self, small, again: bool = True) -> np.ndarray:
        """Motion since the last exposure, from corners followed all the way from a key frame (small
        drifts add up to a measurable shift there, where frame to frame they hide in the noise).
        The view is still when standing still explains nearly as many corners as the best fit."""
        self._k += again
        every = 4 if self._still < 12 else 8  # a view still for long is re-checked less often
        if self._still >= 3 and self._k % every and self._key is not None:
            return IDENTITY  # a still view is re-checked every 4th-8th exposure (drift adds up from the key frame)
        if self._key is None or self._k % 30 == 0:
            self._key, self._key_T = self._prev_small, self.total_motion.copy()
            self._pts = self._corners(self._key)
            self._key_A = IDENTITY
        if self._pts is None or len(self._pts) < 8:
            self._key = None
            return IDENTITY
        nxt, st, _ = cv2.calcOpticalFlowPyrLK(self._key, small, self._pts, None, winSize=(15, 15), maxLevel=3,
                                              criteria=(cv2.TERM_CRITERIA_EPS | cv2.TERM_CRITERIA_COUNT, 10, 0.03))
        ok = st.ravel() == 1
        if ok.sum() < 8:
            self._key = None
            return IDENTITY
        p0, p1 = self._pts[ok].reshape(-1, 2), nxt[ok].reshape(-1, 2)
        A, inl = cv2.estimateAffinePartial2D(p0, p1, method=cv2.RANSAC, ransacReprojThreshold=0.5,
                                             maxIters=200, confidence=0.99)
        n_fit = 0 if A is None or inl is None else int(inl.sum())
        if n_fit < max(8, 0.3 * len(p0)):
            # no motion explains most corners (they left the view, or the view moved too far from the
            # key frame to follow): the view is not known to be back at the key frame -- it stays
            # where it was, and corners are found afresh: in the last exposure, followed into this one
            fresh = self._key is not self._prev_small
            self._key = None
            return self._estimate_motion(small, again=False) if fresh and again else IDENTITY
        n_still = int(np.count_nonzero(np.linalg.norm(p1 - p0, axis=1) < 0.5))
        if n_still >= 0.7 * n_fit:
            A = IDENTITY
        elif n_fit < 0.6 * len(p0):
            self._key = None  # the fit is losing its corners: a new key frame next time, while it still holds
        self._still = self._still + 1 if A is IDENTITY and self._key_T is not None and \
            np.allclose(self._key_T, self.total_motion) else 0
        if ok.sum() < 0.5 * len(self._pts):
            self._key = None  # too many corners lost: a new key frame next time
        # key -> current composed with reference -> key; the step since the last exposure
        new_total = (np.vstack([A, [0, 0, 1]]) @ np.vstack([self._key_T, [0, 0, 1]]))[:2]
        step = (np.vstack([new_total, [0, 0, 1]]) @ np.linalg.inv(np.vstack([self.total_motion, [0, 0, 1]])))[:2]
        return step
