"""Moving-ball candidates in each frame.

1. Foreground: absolute difference against a running-average background at half resolution
   (static clutter becomes background; the ball passes too fast to enter it).
2. Blobs: external contours of the thresholded difference; size-gated by the ball radius the
   camera file and the ball's size predict at that pixel (the ball between the ground and a few
   metres up).
3. Measurement at full resolution in a small window: weights w = max(|I - B| - T/2, 0) (a soft
   matte against the background); the weighted centroid is the position at mid-exposure, the
   second moments give the apparent radius (a disc of radius r has variance r^2/4 per axis) and the
   motion-blur streak (a streak of length L adds L^2/12 along its direction).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, replace

import cv2
import numpy as np

from ..camera.model import Camera
from .frames import full_resolution
from .streak import fit_streak, inside_streak, streak_consistent, streak_expected, streak_half_sizes


@dataclass(frozen=True)
class Candidate:
    u: float
    v: float
    radius_px: float
    streak_px: float
    angle_rad: float
    area_px: float
    contrast: float
    # where the candidate is in the scene as the first exposure since the last cut saw it (the view's
    # motion undone; None: the view has not moved): a ball flies through the scene, a misregistered
    # edge of a panned or shaken view stays in its place there
    u_scene: float | None = None
    v_scene: float | None = None


def lens_magnification(camera: Camera, uv) -> np.ndarray:
    """Local linear magnification of the lens distortion at pixels uv (..., 2): the square root of
    the Jacobian determinant of the map from undistorted to distorted normalised coordinates (1
    without distortion; below 1 towards the edge of a barrel-distorted wide-angle image). A ball's
    apparent radius is f R / depth times this."""
    xn = camera.undistort_normalised(np.asarray(uv, float))
    eps = 1e-6
    dx = (camera.distort(xn + [eps, 0.0]) - camera.distort(xn - [eps, 0.0])) / (2 * eps)
    dy = (camera.distort(xn + [0.0, eps]) - camera.distort(xn - [0.0, eps])) / (2 * eps)
    det = dx[..., 0] * dy[..., 1] - dx[..., 1] * dy[..., 0]
    return np.sqrt(np.abs(det))


def radius_gate_map(camera: Camera | None, ball_radius_m: float | None, size: tuple[int, int],
                    cells=(32, 18), z_range=(-0.3, 60.0), depth_limits=(0.8, 150.0)):
    """Coarse map of (r_min, r_max) apparent radius [px] per image cell: the ball anywhere along
    the pixel's ray between the ground and ``z_range[1]`` (lobs, fly balls and high kicks reach
    tens of metres; the ray and the depth limits, not a fixed height, bound it), through the lens
    model's local magnification."""
    w, h = size
    if camera is None or ball_radius_m is None:
        return None
    cx = (np.arange(cells[0]) + 0.5) * w / cells[0]
    cy = (np.arange(cells[1]) + 0.5) * h / cells[1]
    uu, vv = np.meshgrid(cx, cy)
    origin, d = camera.rays(np.stack([uu, vv], axis=-1))
    axis = camera.R[2]
    # the part of each ray inside the slab z_range[0] <= z <= z_range[1] (the ball's plausible heights)
    dz = d[..., 2]
    with np.errstate(divide="ignore", invalid="ignore"):
        s0 = (z_range[0] - origin[2]) / dz
        s1 = (z_range[1] - origin[2]) / dz
    lo = np.where(np.abs(dz) > 1e-9, np.minimum(s0, s1), np.where(z_range[0] <= origin[2] <= z_range[1], 0, np.inf))
    hi = np.where(np.abs(dz) > 1e-9, np.maximum(s0, s1), np.where(z_range[0] <= origin[2] <= z_range[1], np.inf, -np.inf))
    lo = np.maximum(lo, 0.0)
    cosang = d @ axis
    near = np.clip(lo * cosang, *depth_limits)
    far = np.clip(hi * cosang, *depth_limits)
    empty = hi <= lo  # the ray never passes the slab: no gating information, be permissive
    near = np.where(empty, depth_limits[0], near)
    far = np.where(empty, depth_limits[1], far)
    f = camera.focal_px * lens_magnification(camera, np.stack([uu, vv], axis=-1))
    rmin = np.maximum(0.6, 0.5 * f * ball_radius_m / far)
    rmax = 2.0 * f * ball_radius_m / near + 1.0
    return rmin, rmax


def _elongated(c: Candidate) -> bool:
    """Is the candidate a streak (smeared over more than its diameter, and 6 px at least)?"""
    return c.streak_px >= max(6.0, 2.0 * c.radius_px)


def _static(box, frames) -> bool:
    """Was exactly this blob box in each of the last frames (half-resolution px)? A ball in flight
    moves its box within a frame or two; clutter, ghosts and parked objects do not."""
    return all(f is not None and box in f for f in frames)


class Detector:
    """Stateful per-clip detector; call :meth:`process` on consecutive exposures (not on repeated
    frames). The foreground threshold is local: ``k_noise`` times a running per-pixel mean absolute
    deviation of the frame from the background (high at textured or flickering places, low on a
    plain sky), never below ``min_threshold`` grey levels. Balls brighter or darker than the
    background are found alike (absolute differences)."""

    def __init__(self, width: int, height: int, *, gate=None, alpha: float = 0.03, min_threshold: float = 5.0,
                 k_noise: float = 5.0, max_candidates: int = 40, streaks: str = "tracked"):
        self.w, self.h = width, height
        self.sw, self.sh = width // 2, height // 2
        self.gate = gate
        self.alpha = alpha
        self.min_threshold = min_threshold
        self.k_noise = k_noise
        self.max_candidates = max_candidates
        # long streaks measured along their motion (streak.py): "tracked" only where a confirmed track
        # expects this streak (the predictions :meth:`process` is given); "all" on every elongated blob
        # (found the second renderer's dim hall ball, 0 -> 44 %, but lost the juggled football and the
        # hand-held lob: clutter measured anew seeds and confirms tracks that take the ball); "off"
        if streaks not in ("off", "tracked", "all"):
            raise ValueError(f"streaks must be off, tracked or all, not {streaks!r}")
        self.streaks = streaks
        self.bg_small = None
        self.bg_full = None
        self.dev = None  # running mean |frame - background| per half-resolution pixel [grey levels]
        self.thr = None  # the current local threshold map (uint8)
        self.T = None  # view motion reference -> current frame (half-resolution px), None when still
        self._origin = np.eye(3)  # the caller's view motion at the reference frame
        self.k = 0
        self._kernel = np.ones((5, 5), np.uint8)
        self._kernel3 = np.ones((3, 3), np.uint8)
        self._boxes = (None, None)  # half-resolution blob boxes of the last two frames

    @property
    def threshold(self) -> float:
        """Median local threshold [grey levels] (a summary for messages)."""
        return float(np.median(self.thr)) if self.thr is not None else self.min_threshold

    def _gate(self, u, v):
        if self.gate is None:
            return 0.6, max(self.w, self.h) / 8
        rmin, rmax = self.gate
        gy, gx = rmin.shape
        i = min(gy - 1, max(0, int(v / self.h * gy)))
        j = min(gx - 1, max(0, int(u / self.w * gx)))
        return float(rmin[i, j]), float(rmax[i, j])

    def prepare(self, frame):
        """(grey, half-resolution grey) of a frame; may run in the decoding thread."""
        gray = cv2.cvtColor(frame, cv2.COLOR_BGR2GRAY) if frame.ndim == 3 else frame
        return gray, cv2.resize(gray, (self.sw, self.sh), interpolation=cv2.INTER_AREA)

    def reset(self, keep_origin: bool = False) -> None:
        """Forget the background (after a scene cut)."""
        self.bg_small = self.bg_full = self.dev = self.thr = None
        self.T = None
        if not keep_origin:
            self._origin = np.eye(3)
        self._boxes = (None, None)

    def set_view(self, T) -> None:
        """The view's motion since the background began: T (2x3) maps half-resolution pixels of the
        first exposure (the reference) to the current frame. The background is kept in reference
        coordinates and each new frame is warped into them once (no blur piles up from warping the
        background again and again); measurements are made in the current frame against the
        background warped into it. A view that has moved far from the reference starts afresh."""
        if T is None:
            self.T = None
            return
        T = (np.vstack([T, [0, 0, 1]]) @ np.linalg.inv(self._origin))[:2]
        if np.abs(T[:, :2] - np.eye(2)).max() < 1e-4 and np.abs(T[:, 2]).max() < 0.02:
            self.T = None
            return
        if np.abs(T[:, 2]).max() > 0.2 * max(self.sw, self.sh):
            self._origin = np.vstack([T, [0, 0, 1]]) @ self._origin  # this frame is the new reference
            self.reset(keep_origin=True)
            self.T = None
            return
        self.T = T

    def _to_ref(self, img, T, size):
        return cv2.warpAffine(img, T, size, flags=cv2.INTER_LINEAR | cv2.WARP_INVERSE_MAP,
                              borderMode=cv2.BORDER_REPLICATE)

    def _bg_window(self, x0, y0, x1, y1):
        """The full-resolution background over the current frame's window [x0, x1) x [y0, y1)."""
        if self.T is None:
            return self.bg_full[y0:y1, x0:x1]
        Tf = full_resolution(self.T)
        M = np.linalg.inv(Tf)[:2]  # current -> reference (full resolution)
        M[:, 2] += M[:, :2] @ [x0, y0]
        # M maps window pixels to reference pixels: the inverse map, as warpAffine is told
        return cv2.warpAffine(self.bg_full, M, (x1 - x0, y1 - y0), flags=cv2.INTER_LINEAR | cv2.WARP_INVERSE_MAP,
                              borderMode=cv2.BORDER_REPLICATE)

    def process(self, frame, prepared=None, expected=None) -> list[Candidate]:
        """The candidates in the next exposure. ``expected``: where the tracker's confirmed tracks expect
        the ball (streak.Expected), which gates the streak filter (see :meth:`_streaks`)."""
        gray, small = prepared if prepared is not None else self.prepare(frame)
        self.k += 1
        if self.T is not None and self.bg_small is not None:
            small = self._to_ref(small, self.T, (self.sw, self.sh))
        if self.bg_small is None:
            self.bg_small = small.astype(np.float32)
            self.bg_full = gray.astype(np.float32)
            self.dev = np.full(small.shape, 2.0, np.float32)
            self.thr = np.full(small.shape, max(self.min_threshold, 2.0 * self.k_noise), np.uint8)
            return []
        bg8 = cv2.convertScaleAbs(self.bg_small)
        diff = cv2.absdiff(small, bg8)
        thr = cv2.max(cv2.convertScaleAbs(self.dev, alpha=self.k_noise), self.min_threshold)
        self.thr = thr
        mask = cv2.compare(diff, thr, cv2.CMP_GT)
        contours, _ = cv2.findContours(mask, cv2.RETR_EXTERNAL, cv2.CHAIN_APPROX_SIMPLE)
        noisy = len(contours) > 20 * self.max_candidates
        first_mask = mask
        for _ in range(2):
            if len(contours) <= 20 * self.max_candidates:
                break
            # a threshold that splits the view into hundreds of blobs is below this frame's noise (a
            # flicker, a burst of coding noise): look again at twice the threshold rather than give up
            # the frame -- a ball that stands out well above the noise is still there
            thr = cv2.add(thr, thr)
            mask = cv2.compare(diff, thr, cv2.CMP_GT)
            contours, _ = cv2.findContours(mask, cv2.RETR_EXTERNAL, cv2.CHAIN_APPROX_SIMPLE)
        cands: list[Candidate] = []
        boxes = []
        if len(contours) <= 20 * self.max_candidates:
            boxes = [cv2.boundingRect(c) for c in contours]
            for (x, y, bw, bh) in boxes:
                if bw * bh < 1 or x <= 0 or y <= 0 or x + bw >= self.sw or y + bh >= self.sh:
                    continue  # cut by the image edge: its centroid would be biased
                if _static((x, y, bw, bh), self._boxes):
                    continue  # the same box for three frames: clutter or a ghost, not a ball in flight
                t_loc = float(thr[min(self.sh - 1, y + bh // 2), min(self.sw - 1, x + bw // 2)])
                cur = self._to_current(x, y, bw, bh)
                cand = None if cur is None else self._measure(gray, *cur, t_loc)
                if cand is not None:
                    cands.append(cand)
                elif bw * bh >= 12:  # a ball touching a person or a shadow: its core may stand out
                    cands += self._split(gray, diff, x, y, bw, bh, t_loc)
        if cands and self.streaks == "all":
            cands = self._all_streaks(gray, cands)
        elif cands and self.streaks == "tracked" and expected:
            cands = self._streaks(gray, cands, expected)
        self._boxes = (self._boxes[1], set(boxes))
        # background update away from the foreground (no ghosts of the ball), plus a slow update
        # everywhere so that objects put down for good join the background
        # (from the last threshold's mask, after a retry: the first threshold's mask, which would keep a
        # ball's dim parts between the two thresholds out of the background too, was tried and lost the
        # juggled ball in a dark room -- recall 65 % -> 31 % in tests/vision/test_track_outside.py: it
        # also freezes the background across much of a noisy view)
        keep = cv2.bitwise_not(cv2.dilate(mask, self._kernel))
        cv2.accumulateWeighted(diff, self.dev, 2 * self.alpha, mask=keep)
        # and slowly everywhere: places that always differ (edges that shake or resample, flicker)
        # must raise their own threshold even though they are always flagged
        cv2.accumulateWeighted(diff, self.dev, 0.5 * self.alpha)
        if noisy:
            # a threshold that splits the view into hundreds of blobs is below the noise (the first
            # guess in a noisy dim scene): the noise map takes half of this difference at once, but
            # not inside solid blobs (what survives an opening of the mask: a large ball, a person),
            # which are things, not noise -- a large ball there would raise its own threshold above
            # its contrast for good
            solid = cv2.dilate(cv2.morphologyEx(first_mask, cv2.MORPH_OPEN, self._kernel3), self._kernel)
            cv2.accumulateWeighted(diff, self.dev, 0.5, mask=cv2.bitwise_not(solid))
        cv2.accumulateWeighted(small, self.bg_small, self.alpha, mask=keep)
        if self.k % 4 == 0 and self.T is not None:
            gray = self._to_ref(gray, self.T * [[1, 1, 2], [1, 1, 2]], (self.w, self.h))
        if self.k % 8 == 0:  # the full-resolution background (for the measurements) every 8th frame
            cv2.accumulateWeighted(gray, self.bg_full, min(1.0, 8 * self.alpha),
                                   mask=cv2.resize(keep, (self.w, self.h), interpolation=cv2.INTER_NEAREST))
        # slower unmasked update: ghosts (what the first frame hid) and slow movers fade in ~100 frames;
        # a passing ball leaves well under 1 % of its contrast behind
        cv2.accumulateWeighted(small, self.bg_small, 0.25 * self.alpha)
        if self.k % 8 == 4:  # (but never blend in a candidate: a slow ball lingers, and would shrink)
            cv2.accumulateWeighted(gray, self.bg_full, 2 * self.alpha, mask=self._away_from(cands))
        if len(cands) > self.max_candidates:  # lighting change or camera shake: keep the strongest
            cands = sorted(cands, key=lambda c: -c.contrast * c.area_px)[: self.max_candidates]
        return cands

    def _streaks(self, gray, cands: list[Candidate], expected) -> list[Candidate]:
        """Long streaks measured along their motion (streak.py) where a track expects one: for each
        prediction in ``expected``, the elongated candidate nearest to it that is the streak the track
        expects (streak.streak_expected) is replaced by the matched line filter's midpoint, radius and
        length if these are still of the track's size and motion and within its gate, and the fragments
        inside its oriented box and near the prediction (its shaded half, pieces split off by noise)
        are dropped. Every other candidate stays as measured: a limb, an edge or a strand of netting is
        elongated too, and measured anew it can seed or confirm a track that then takes the ball."""
        out = list(cands)
        for e in expected:
            best, d_best = None, math.inf
            for i, c in enumerate(out):
                if c is None or not _elongated(c):
                    continue
                d = math.hypot(c.u - e.u, c.v - e.v)
                if d < d_best and streak_expected(c.u, c.v, c.angle_rad, c.radius_px, c.streak_px, [e])[1]:
                    best, d_best = i, d
            if best is None:
                continue
            c = self._fit(gray, out[best])
            if c is None or not streak_consistent(e, c.radius_px, c.streak_px) \
                    or math.hypot(c.u - e.u, c.v - e.v) > e.reach_px:
                continue  # no streak there, or not the one the track expects (of its size, within its gate)
            out[best] = c
            for j, o in enumerate(out):
                if j != best and o is not None and inside_streak(c.u, c.v, c.angle_rad, c.radius_px, c.streak_px,
                                                                 o.u, o.v) and o.radius_px <= 1.2 * c.radius_px + 1.0 \
                        and math.hypot(o.u - e.u, o.v - e.v) <= e.reach_px + 0.5 * c.streak_px:
                    out[j] = None  # a fragment of the streak the track expected
        return [c for c in out if c is not None]

    def _all_streaks(self, gray, cands: list[Candidate]) -> list[Candidate]:
        """The streak filter on every elongated candidate: each replaced by the filter's midpoint, radius
        and length, and the fragments inside its oriented box dropped -- one candidate per streak."""
        order = sorted(range(len(cands)), key=lambda i: -cands[i].streak_px * cands[i].radius_px)
        out: list[Candidate] = []
        fits = []  # the streaks measured
        for i in order:
            c = cands[i]
            if any(inside_streak(f.u, f.v, f.angle_rad, f.radius_px, f.streak_px, c.u, c.v)
                   and c.radius_px <= 1.2 * f.radius_px + 1.0 for f in fits):
                continue  # a fragment of a streak already measured (the longest come first)
            fit = self._fit(gray, c) if _elongated(c) else None
            if fit is not None:
                fits.append(fit)
            out.append(c if fit is None else fit)
        return out

    def _fit(self, gray, c: Candidate) -> Candidate | None:
        """The candidate measured by the matched line filter (streak.fit_streak), or None when no streak
        is found there, its radius is outside the size gate or its midpoint far from the candidate."""
        hx, hy = streak_half_sizes(c.radius_px, c.streak_px)
        ext = int(math.ceil(math.hypot(hx, hy))) + 2
        x0, y0 = max(0, int(c.u) - ext), max(0, int(c.v) - ext)
        x1, y1 = min(self.w, int(c.u) + ext + 1), min(self.h, int(c.v) + ext + 1)
        signed = cv2.subtract(gray[y0:y1, x0:x1].astype(np.float32), self._bg_window(x0, y0, x1, y1))
        fit = fit_streak(signed, c.u - x0, c.v - y0, c.angle_rad, c.radius_px, c.streak_px)
        if fit is None:
            return None
        u, v = fit.u + x0, fit.v + y0
        rmin, rmax = self._gate(u, v)
        if not (rmin <= fit.radius_px <= rmax) or math.hypot(u - c.u, v - c.v) > 0.5 * c.streak_px + 2 * c.radius_px:
            return None
        return replace(c, u=u, v=v, radius_px=fit.radius_px, streak_px=fit.length_px)

    def _away_from(self, cands) -> np.ndarray:
        """Full-resolution mask (reference view) that is 0 around each candidate, 255 elsewhere."""
        m = np.full((self.h, self.w), 255, np.uint8)
        inv = None if self.T is None else np.linalg.inv(full_resolution(self.T))[:2]
        for c in cands:
            u, v = (c.u, c.v) if inv is None else inv @ [c.u, c.v, 1.0]
            e = int(2 * c.radius_px + c.streak_px + 4)
            m[max(0, int(v) - e):int(v) + e + 1, max(0, int(u) - e):int(u) + e + 1] = 0
        return m

    def _to_current(self, x, y, bw, bh):
        """A half-resolution box of the reference view -> the full-resolution box (x, y, w, h) in
        the current frame, or None when it is cut by the image edge there."""
        if self.T is not None:
            cx, cy = self.T @ [x + 0.5 * bw, y + 0.5 * bh, 1.0]
            x, y = int(round(cx - 0.5 * bw)), int(round(cy - 0.5 * bh))
            if x <= 0 or y <= 0 or x + bw >= self.sw or y + bh >= self.sh:
                return None
        return 2 * x, 2 * y, 2 * bw, 2 * bh

    def _split(self, gray, diff, x, y, bw, bh, t_loc, most: int = 3):
        """Candidates inside a blob that failed as a whole: the blob cut again at half its peak
        difference (a ball that touches a person, a shadow or a line separates from them when it
        stands out more than they do), the largest ``most`` parts measured with the matte starting
        there too."""
        win = diff[y:y + bh, x:x + bw]
        peak = float(cv2.minMaxLoc(win)[1])
        level = 0.5 * peak
        if level <= t_loc:
            return []
        part = cv2.compare(win, level, cv2.CMP_GT)
        contours, _ = cv2.findContours(part, cv2.RETR_EXTERNAL, cv2.CHAIN_APPROX_SIMPLE)
        if len(contours) < 2 and cv2.countNonZero(part) > 0.5 * bw * bh:
            return []  # nothing separates: the same blob again
        out = []
        for c in sorted(contours, key=cv2.contourArea, reverse=True)[:most]:
            sx, sy, sw, sh = cv2.boundingRect(c)
            cur = self._to_current(x + sx, y + sy, sw, sh)
            if cur is None:
                continue
            cand = self._measure(gray, *cur, t_loc, floor=0.75 * level)
            if cand is not None:
                out.append(cand)
        return out

    def _measure(self, gray, x, y, bw, bh, t_loc, floor: float = 0.0):
        pad = 4
        x0, y0 = max(0, x - pad), max(0, y - pad)
        x1, y1 = min(self.w, x + bw + pad), min(self.h, y + bh + pad)
        # soft matte |I - B| - 6 grey levels (more where the local threshold says the place is noisy),
        # clipped at zero (OpenCV calls: cheaper than numpy on tiny windows)
        signed = cv2.subtract(gray[y0:y1, x0:x1].astype(np.float32), self._bg_window(x0, y0, x1, y1))
        diff = np.abs(signed)
        _, wgt = cv2.threshold(cv2.subtract(diff, max(6.0, 0.5 * t_loc - 6.0, floor)), 0.0, 0.0, cv2.THRESH_TOZERO)
        peak = float(cv2.minMaxLoc(wgt)[1])
        if peak <= 0:
            return None
        # the centroid from weights clipped at half the peak: a shaded ball (lit on one side) weighs its
        # dim side nearly as much as its bright side, so the centroid is the disc's centre, not the
        # centre of its light; size and streak from the plain matte's second moments
        _, flat = cv2.threshold(wgt, 0.5 * peak, 0.0, cv2.THRESH_TRUNC)
        mc = cv2.moments(flat)
        m = cv2.moments(wgt)
        cx, cy = mc["m10"] / mc["m00"], mc["m01"] / mc["m00"]
        mu20, mu02, mu11 = m["mu20"] / m["m00"], m["mu02"] / m["m00"], m["mu11"] / m["m00"]
        tr, det = mu20 + mu02, mu20 * mu02 - mu11**2
        disc = math.sqrt(max(tr * tr / 4 - det, 0.0))
        l1, l2 = tr / 2 + disc, max(tr / 2 - disc, 0.0)
        # the soft matte's weights taper toward the edge: a disc's weighted variance is a bit below r^2/4
        r = 2.0 * math.sqrt(l2) * 1.08
        streak = math.sqrt(max(12.0 * (l1 - l2), 0.0))
        u, v = x0 + cx, y0 + cy
        rmin, rmax = self._gate(u, v)
        if not (rmin <= r <= rmax):
            return None
        area = float(cv2.countNonZero(wgt))
        if streak > 0.3 * max(self.w, self.h):  # a long thin thing (a line, a pole), not a blurred ball
            return None
        # one polarity: a ball is wholly brighter or wholly darker than what it hides; a moving
        # textured thing (a shirt's folds, an arm over a patterned background) is both
        pol = abs(float((signed * (wgt > 0)).sum())) / max(float(diff[wgt > 0].sum()), 1e-9)
        if pol < 0.6:
            return None
        fill = area / max(1.0, math.pi * r * r + 2 * r * streak)
        if fill < 0.3:
            return None
        return Candidate(u=u + 0.0, v=v + 0.0, radius_px=r, streak_px=streak,
                         angle_rad=0.5 * math.atan2(2 * mu11, mu20 - mu02), area_px=area,
                         contrast=peak)
