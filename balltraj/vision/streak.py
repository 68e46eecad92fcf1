"""A motion-blurred ball measured along its streak (a matched line filter).

A ball moving at a steady velocity during the exposure is smeared into a streak: the disc convolved
with a line of the motion's length L. Its mean position over the exposure -- the centre the flight's
time stamps refer to -- is the streak's midpoint. In a dim, noisy view a long streak's difference
from the background is often split by the threshold into a bright core and fragments (its shaded
half, noise gaps), and the core's centroid sits off the midpoint. Averaging the difference along the
motion direction over the streak's length (an oriented box filter) beats the noise down by the
square root of the length; then:

- across the motion, the averaged profile of a disc is a semicircle (each row's chord,
  2 sqrt(r^2 - y^2)), whatever the smear: its support [-r, r] is centred on the ball even when one
  side is shaded and weaker, so the centre across is the midpoint of the profile's edges (taken at a
  quarter of its peak, where a semicircle is at sqrt(1 - 1/16) r);
- along the motion, the averaged profile is the line of length L convolved with the disc's chord
  profile, symmetric about the midpoint, and at half its plateau exactly at +-L/2 (when L >= 2 r):
  the midpoint of its half-plateau crossings is the centre along, their distance the smear length.
  Gaps shorter than the ball's radius (noise splitting the streak) are bridged.

Where the tracker follows a ball it says where it expects it (:class:`Expected`), and the filter acts
on a blob near such a prediction only when the blob lies along the predicted motion and is no longer
than that motion (:func:`streak_expected`): the same elongated blob across a track's path is a limb,
an edge or a net's strand, not this ball's streak.

Pure computation on a window of the signed difference (frame minus background).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import cv2
import numpy as np

ACROSS_LEVEL = 0.1  # the across profile's edges, as a share of its peak (a ball's shaded side is dim)
ALONG_LEVEL = 0.5  # the along profile's ends, as a share of its plateau


@dataclass(frozen=True)
class StreakFit:
    u: float  # midpoint of the streak (the window's pixel coordinates)
    v: float
    radius_px: float
    length_px: float  # the smear: how far the centre moved during the exposure
    angle_rad: float  # motion direction (modulo pi)


@dataclass(frozen=True)
class Expected:
    """Where a live track expects the ball in the coming exposure (the tracker's prediction)."""
    u: float
    v: float
    du: float  # the predicted motion over one frame interval [px]
    dv: float
    reach_px: float  # how far from (u, v) the tracker will look for the ball
    spread_px: float  # rms scatter of the track's points about its fit
    radius_px: float = 0.0  # the track's recent apparent radius and streak (medians of its last points)
    streak_px: float = 0.0


def streak_expected(u: float, v: float, angle: float, radius: float, length: float,
                    expected) -> tuple[bool, bool]:
    """(near, aligned) for an elongated blob (centroid (u, v), axis ``angle``, ``radius`` and streak
    ``length`` [px]) and the tracks' predictions ``expected``: is it near one, and is it the streak
    that track expects?

    Near: within the track's reach plus half the streak (a fragment's centroid is up to half the
    streak from the streak's midpoint). Expected there (aligned), when all of these hold:

    - the track itself is a streak: its recent streak at least its diameter (and 6 px), and no longer
      than its motion in one frame interval allows (the exposure is shorter than the interval; the
      tracker's blur test: 1.2 steps + 2 px + the radius) -- a limb or a flag smeared beyond its own
      motion, or a round ball, expects none;
    - the blob is of the track's size (radii within a factor 1.6, each padded by a pixel: the tracker's
      test of a size jump) and no longer than the track's motion allows (the same blur test);
    - its axis is within ``atan(r / L) + atan((spread + 1) / step)`` of the predicted direction (the
      blob's axis is known to about its width over its length, the predicted direction to the track's
      scatter, with a pixel of centroid error, over the step), at most 45 degrees.

    >>> e = Expected(100.0, 50.0, 40.0, 0.0, 20.0, 1.0, 6.0, 30.0)
    >>> streak_expected(104.0, 51.0, 0.05, 6.0, 30.0, [e]), streak_expected(104.0, 51.0, 1.2, 6.0, 30.0, [e])
    ((True, True), (True, False))
    >>> streak_expected(300.0, 51.0, 0.05, 6.0, 30.0, [e])
    (False, False)
    """
    near = False
    for e in expected:
        if math.hypot(u - e.u, v - e.v) > e.reach_px + 0.5 * length:
            continue
        near = True
        if not streak_consistent(e, radius, length):
            continue
        step = math.hypot(e.du, e.dv)
        off = abs((angle - math.atan2(e.dv, e.du) + 0.5 * math.pi) % math.pi - 0.5 * math.pi)
        if off <= min(0.25 * math.pi, math.atan2(radius, length) + math.atan2(e.spread_px + 1.0, step)):
            return True, True
    return near, False


def streak_consistent(e: Expected, radius: float, length: float) -> bool:
    """Does track ``e`` expect a streak (its own recent streak long and within its motion), and is a
    streak of this ``radius`` and ``length`` [px] of its size and within its motion? (See
    :func:`streak_expected`.)"""
    step = math.hypot(e.du, e.dv)
    if e.streak_px < max(6.0, 2.0 * e.radius_px) or e.streak_px > 1.2 * step + 2.0 + e.radius_px:
        return False
    q = (radius + 1.0) / (e.radius_px + 1.0)
    return 1.0 / 1.6 <= q <= 1.6 and length <= 1.2 * step + 2.0 + radius


def streak_half_sizes(radius: float, length: float) -> tuple[int, int]:
    """Half sizes (along, across) [px] of the oriented window searched around a seed: twice the
    seed's length along (a seed may be one fragment of a longer streak), room for a ball whose seed
    centroid is off centre across."""
    return int(length + 3.0 * radius + 6), int(2.5 * radius + 6)


def _edge(p: np.ndarray, start: int, step: int, level: float, gap: int) -> float | None:
    """Walking from index start in direction step while p stays at or above level (dips below it
    shorter than gap samples bridged): the sub-pixel position where p last crosses the level; None
    when the walk reaches the end of p (the window does not contain the edge)."""
    n = len(p)
    last = start
    i = start
    while True:
        j = i + step
        if j < 0 or j >= n:
            return None
        if p[j] >= level:
            last = j
        elif abs(j - last) > gap:
            break
        i = j
    nxt = last + step
    if nxt < 0 or nxt >= n:
        return None
    a, b = float(p[last]), float(p[nxt])
    f = (a - level) / max(a - b, 1e-9)  # linear crossing between last (>= level) and nxt (< level)
    return last + step * min(max(f, 0.0), 1.0)


def fit_streak(signed: np.ndarray, u0: float, v0: float, angle: float, radius: float,
               length: float) -> StreakFit | None:
    """The streak's midpoint, radius and length from the signed difference window ``signed`` (float),
    given a seed centroid (u0, v0), its elongation angle, radius and streak length (window px).
    None when no streak is contained in the oriented window around the seed (an edge of the profile
    not found, or no signal)."""
    hx, hy = streak_half_sizes(radius, length)
    e = (math.cos(angle), math.sin(angle))
    nrm = (-e[1], e[0])
    # output pixel (i, j) samples signed at (u0, v0) + (i - hx) e + (j - hy) n
    M = np.array([[e[0], nrm[0], u0 - hx * e[0] - hy * nrm[0]],
                  [e[1], nrm[1], v0 - hx * e[1] - hy * nrm[1]]], np.float64)
    R = cv2.warpAffine(np.ascontiguousarray(signed, np.float32), M, (2 * hx + 1, 2 * hy + 1),
                       flags=cv2.INTER_LINEAR | cv2.WARP_INVERSE_MAP, borderMode=cv2.BORDER_CONSTANT, borderValue=0.0)
    half_l = max(int(round(0.5 * length)), int(round(radius)), 1)
    ri = max(int(round(radius)), 1)
    core = R[hy - ri:hy + ri + 1, hx - half_l:hx + half_l + 1]
    s = float(core.sum())
    if s == 0.0:
        return None
    R = R * (1.0 if s > 0 else -1.0) - float(np.median(R * (1.0 if s > 0 else -1.0)))  # the ball positive, level 0
    # across: the line filter of the seed's length, run along the motion
    P = R[:, hx - half_l:hx + half_l + 1].mean(axis=1)
    near = slice(max(0, hy - ri - 2), min(len(P), hy + ri + 3))
    jp = near.start + int(np.argmax(P[near]))
    peak = float(P[jp])
    if peak <= 0:
        return None
    lo = _edge(P, jp, -1, ACROSS_LEVEL * peak, 1)
    hi = _edge(P, jp, 1, ACROSS_LEVEL * peak, 1)
    if lo is None or hi is None:
        return None
    w = 0.5 * (hi - lo)
    # along: the rows across the ball, averaged (an oriented box of the ball's width)
    rows = R[max(0, int(math.floor(lo))):min(R.shape[0], int(math.ceil(hi)) + 1)]
    Q = cv2.blur(rows.mean(axis=0, keepdims=True), (3, 1), borderType=cv2.BORDER_REPLICATE)[0]
    span = slice(max(0, hx - half_l - ri), min(len(Q), hx + half_l + ri + 1))
    ip = span.start + int(np.argmax(Q[span]))
    plateau = float(Q[ip])
    if plateau <= 0:
        return None
    gap = max(2, int(round(w)))
    a = _edge(Q, ip, -1, ALONG_LEVEL * plateau, gap)
    b = _edge(Q, ip, 1, ALONG_LEVEL * plateau, gap)
    if a is None or b is None:
        return None
    xc, yc = 0.5 * (a + b) - hx, 0.5 * (lo + hi) - hy
    return StreakFit(u=u0 + xc * e[0] + yc * nrm[0], v=v0 + xc * e[1] + yc * nrm[1],
                     radius_px=w / math.sqrt(1.0 - ACROSS_LEVEL**2), length_px=float(b - a), angle_rad=angle)


def inside_streak(cu: float, cv: float, angle: float, radius: float, length: float, u: float, v: float,
                  margin: float = 1.5) -> bool:
    """Is (u, v) within the oriented box of the streak centred at (cu, cv) (its length plus a radius
    along, ``margin`` radii plus 2 px across)? A fragment of the streak lies there."""
    e = (math.cos(angle), math.sin(angle))
    du, dv = u - cu, v - cv
    along = du * e[0] + dv * e[1]
    across = -du * e[1] + dv * e[0]
    return abs(along) <= 0.5 * length + radius and abs(across) <= margin * radius + 2.0
