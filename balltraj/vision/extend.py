"""Flights carried on past the ends where the tracker lost them, and through the exposures it coasted
over, frame by frame along their own path.

The tracker finds the ball where it moved against the running background. A ball that travels along
the line of sight (a kick filmed from behind the kicker) moves a pixel or two a frame while its
apparent size shrinks: the running background takes it in, and the track is lost long before the
ball leaves the view; elsewhere a track coasts through exposures where the ball's blob merged with
something. Here each flight's start, its end where it was lost, and its gaps are searched with what
the flight itself says:

- the expected position from the image of a path with constant acceleration seen in perspective
  (:class:`~balltraj.vision.trackpoints.PathFit`) through the nearest observations (on both sides
  inside a gap), strays left out; the radius from 1/radius linear in time (apparent radius =
  f R / distance, and distance changes about linearly over a short stretch);
- a clean background for that frame: the median of earlier (or, going backwards, later) exposures
  in which the ball was at least 3 radii away from where it is now expected;
- the ball's evidence: the mean of the absolute difference over a disc of the expected radius (a
  matched filter; absolute, because the same ball is darker than a sky and brighter than a wall, and
  a shaded ball is both at once), above its level in the window; a peak counts if it lies within the
  prediction's gate, stands well above the filter's noise in the same window, reaches a share of the
  flight's own contrast measured the same way on its tracked frames, and is isolated (an annulus
  around it is quiet, and the difference around the peak is not lopsided: a person or a shadow
  moving with the ball is not a ball); its radius is its own (the area above half its contrast);
- ten misses in a row (a person passing in front), the edge of the view, another flight or a gap in
  the exposure times ends an extension.

On a moving view (hand-held, a pan) positions are fitted in the scene (the view's motion, estimated
frame to frame while tracking, undone) and the background frames are moved onto the frame searched.

References
----------
Turin 1960, IRE Trans. Inf. Theory 6(3):311-329 (the matched filter);
Piccardi 2004, IEEE SMC (background subtraction by the temporal median).
"""
from __future__ import annotations

from dataclasses import dataclass, replace

import cv2
import numpy as np

from .clip import read_frames
from .trackpoints import PathFit

KEEP_SHARE = 0.35  # least share of the flight's own median contrast a new observation must reach
NOISE_SIGMAS = 5.0  # and least peak over the matched filter's noise in the window
MAX_SHARE = 3.0  # most: a far stronger contrast is something else (a shirt, a shadow)
RING_SHARE = 0.3  # the annulus 1.5-2.5 radii around it at most this share of its contrast
LOPSIDED = 0.25  # the difference's centroid within 1.5 radii of the peak at most this many radii off it
MAX_MISSES = 10
REACH = 60  # most exposures added at either end
REF_REACH = 40  # how far (exposures) background frames are looked for
MEMORY_BYTES = 512 * 2 ** 20  # most grey frames held at once
BACKWARD = True  # also before the flight's first observation (off: bounce 89 -> 78 %, juggle 83 -> 68 % recall)
N_REFS = 3  # background frames in the median
FIT_POINTS = 15  # nearest observations the path is fitted to


@dataclass(frozen=True)
class Extension:
    """How many observations were added before the flight's first, after its last, and in between."""
    before: int = 0
    after: int = 0
    filled: int = 0


class View:
    """Where each exposure's pixels are in the scene: ``motions[i]`` (3 x 3) maps the scene (the first
    exposure since the last cut) to exposure i's image, None for a fixed view; ``segment[i]`` counts the
    scene cuts before exposure i (background frames come from the same scene only)."""

    def __init__(self, n: int, motions=None, segment=None):
        self.M = None if motions is None else np.asarray(motions, float)
        self.Minv = None if motions is None else np.linalg.inv(self.M)
        self.segment = np.zeros(n, int) if segment is None else np.asarray(segment, int)

    def scene(self, j: int, u: float, v: float):
        if self.M is None:
            return u, v
        x = self.Minv[j] @ [u, v, 1.0]
        return float(x[0]), float(x[1])

    def image(self, j: int, u: float, v: float):
        if self.M is None:
            return u, v
        x = self.M[j] @ [u, v, 1.0]
        return float(x[0]), float(x[1])

    def crop(self, frames, k: int, j: int, box):
        """Exposure k's pixels over exposure j's window ``box`` (moved with the view)."""
        x0, y0, x1, y1 = box
        if self.M is None:
            return frames[k][y0:y1, x0:x1]
        A = (self.M[k] @ self.Minv[j] @ np.array([[1.0, 0, x0], [0, 1.0, y0], [0, 0, 1.0]]))[:2]
        return cv2.warpAffine(frames[k], A, (x1 - x0, y1 - y0), flags=cv2.INTER_LINEAR | cv2.WARP_INVERSE_MAP,
                              borderMode=cv2.BORDER_REPLICATE)


def extend_flights(path, flights, exposures, times, *, start_s: float = 0.0, end_s: float | None = None,
                   capture_fps: float | None = None, motions=None, segment=None, frame_size=None, held=None,
                   decode_missing: bool = True):
    """Flights with observations added where the tracker lost the ball (one more pass over the needed frames).

    ``exposures``: the container frame index of every exposure the tracker used, in order; ``times``
    their times [s]; ``motions``, ``segment``: see :class:`View` (None: a fixed view, no cuts);
    ``frame_size`` (width, height): the frames held stay within MEMORY_BYTES (the reach is shortened
    when they would not); ``held``: grey frames already at hand (exposure index -> image; the file is
    decoded again only for the others needed, unless not ``decode_missing``: the search then stops where a
    frame is missing). Returns (flights, [Extension per flight]).
    """
    none = [Extension() for _ in flights]
    if not flights or len(exposures) < 8:
        return flights, none
    view = View(len(exposures), motions, segment)
    exposures = np.asarray(exposures, int)
    times = np.asarray(times, float)
    index = {int(k): i for i, k in enumerate(exposures)}
    spans = [(index[int(f.frame[0])], index[int(f.frame[-1])]) for f in flights]
    cap = MEMORY_BYTES // max(1, int(np.prod(frame_size))) if frame_size is not None and decode_missing else None
    reach, ref_reach = REACH, REF_REACH
    while True:
        need: set[int] = set()
        for f, (i0, i1) in zip(flights, spans):
            need.update(range(max(0, i0 - reach), min(len(exposures), i0 + ref_reach + 1)))
            need.update(range(i0, i1 + 1))  # the gaps inside it
            if f.end_reason == "lost":
                need.update(range(max(0, i1 - ref_reach), min(len(exposures), i1 + reach + 1)))
        if cap is None or len(need) <= cap or reach <= 8:
            break
        reach, ref_reach = reach * 2 // 3, ref_reach * 2 // 3
    if cap is not None and len(need) > cap:
        return flights, none
    held = held or {}
    frames: dict[int, np.ndarray] = {i: held[i] for i in need if i in held}
    wanted = {int(exposures[i]): i for i in need if i not in held} if decode_missing else {}
    if wanted:
        last = max(wanted)
        for k, _, img in read_frames(path, start_s=start_s, end_s=end_s, capture_fps=capture_fps, grey=True):
            if k in wanted:
                frames[wanted[k]] = img
            if k >= last:
                break
    out, ext = [], []
    for fi, f in enumerate(flights):
        others = [s for j, s in enumerate(spans) if j != fi]
        g, e = extend_one(f, frames, times, exposures, others, view)
        out.append(g)
        ext.append(e)
    return out, ext


def extend_one(f, frames: dict[int, np.ndarray], times, exposures, others=(), view: View | None = None):
    """One flight carried on at both ends over the exposures in ``frames`` (exposure index -> grey image).

    ``times``, ``exposures``: every exposure's time [s] and container frame index (``f.frame`` holds
    container frame indices); ``others``: other flights' first and last exposure indices (not entered);
    ``view``: the view's motion and cuts (None: fixed, no cuts). Returns (flight, Extension)."""
    times = np.asarray(times, float)
    exposures = np.asarray(exposures, int)
    index = {int(k): i for i, k in enumerate(exposures)}
    obs_i = [index[int(k)] for k in f.frame]
    span = (obs_i[0], obs_i[-1])
    view = view or View(len(times))
    # positions in the scene (the view's motion undone), radii [px]
    known = {i: (*view.scene(i, float(f.uv[j, 0]), float(f.uv[j, 1])), float(f.radius_px[j]))
             for j, i in enumerate(obs_i)}
    level = _own_contrast(known, frames, view)
    if level is None:
        return f, Extension()
    dt_med = float(np.median(np.diff(times))) if len(times) > 1 else 0.0
    added = {}
    for step, end_reason in ((-1, None), (1, f.end_reason)):
        if step == 1 and end_reason != "lost" or step == -1 and not BACKWARD:
            continue
        track = dict(known)
        i = span[0] if step < 0 else span[1]
        misses = 0
        n_new = 0
        while n_new + misses < REACH:
            j = i + step
            if (j not in frames or j < 0 or j >= len(times) or any(a <= j <= b for a, b in others)
                    or view.segment[j] != view.segment[i]):
                break
            if abs(times[j] - times[i]) > 2.5 * dt_med:
                break  # a gap in the exposure times
            pred = _predict(track, times, j, step)
            if pred is None:
                break
            us, vs, r, gate = pred
            u, v = view.image(j, us, vs)
            h, w = frames[j].shape
            if not (r < u < w - 1 - r and r < v < h - 1 - r):
                break
            hit = _look(frames, track, j, (u, v), (us, vs), r, gate, level, step, view)
            i = j
            if hit is None:
                misses += 1
                if misses >= MAX_MISSES:
                    break
                continue
            misses = 0
            n_new += 1
            track[j] = (*view.scene(j, hit[0], hit[1]), hit[3])
            added[j] = (hit[0], hit[1], hit[3], hit[2])
    # the exposures inside the flight that the tracker missed (coasting through them): the path on
    # both sides is known, so the prediction is an interpolation
    track = dict(known)
    track.update({j: (*view.scene(j, a[0], a[1]), a[2]) for j, a in added.items()})
    filled = 0
    for j in range(span[0] + 1, span[1]):
        if j in known or j not in frames:
            continue
        pred = _interpolate(known, times, j)
        if pred is None:
            continue
        us, vs, r, gate = pred
        u, v = view.image(j, us, vs)
        hit = None
        for step in (1, -1):  # background from earlier exposures, else from later ones
            if _refs(frames, track, j, (us, vs), r, step, view):
                hit = _look(frames, track, j, (u, v), (us, vs), r, gate, level, step, view)
                break
        if hit is not None:
            added[j] = (hit[0], hit[1], hit[3], hit[2])
            filled += 1
    if not added:
        return f, Extension()
    n_before = sum(1 for j in added if j < span[0])
    keys = sorted(added)
    t_all = np.concatenate([f.t, times[keys]])
    order = np.argsort(t_all, kind="stable")
    new_uv = np.array([[added[j][0], added[j][1]] for j in keys])
    new_r = np.array([added[j][2] for j in keys])
    fr_new = exposures[keys]
    streak = float(np.median(f.streak_px)) if len(f.streak_px) else 0.0
    g = replace(f, t=t_all[order], frame=np.concatenate([np.asarray(f.frame, int), fr_new])[order],
                uv=np.vstack([f.uv, new_uv])[order], radius_px=np.concatenate([f.radius_px, new_r])[order],
                streak_px=np.concatenate([f.streak_px, np.full(len(keys), streak)])[order],
                quality=np.concatenate([f.quality, [min(1.0, added[j][3]) * 0.5 for j in keys]])[order])
    return g, Extension(before=n_before, after=len(keys) - n_before - filled, filled=filled)


def _predict(track: dict, times: np.ndarray, j: int, step: int):
    """Position, radius and gate [px] at exposure j from the nearest FIT_POINTS known positions."""
    keys = sorted(track, reverse=step > 0)[:FIT_POINTS]
    if len(keys) < 5:
        return None
    # a stray observation at the end (the tracker took something else as it lost the ball) must not steer
    # the prediction: fitted first without the nearest three, then kept by their agreement with the rest
    keep = np.ones(len(keys), bool)
    if len(keys) >= 8:
        keep[:3] = False
    u, v, r, rms, keep = _path_at(track, keys, times, j, keep, iterations=4)
    # the fit's scatter, growing with the distance ahead of the nearest observation it rests on
    ahead = abs(j - keys[int(np.flatnonzero(keep)[0])])
    return u, v, r, max(2.0, 0.5 * r) + min(3.0 * rms * ahead, 2.0 * r + 4.0)


def _interpolate(known: dict, times: np.ndarray, j: int, side: int = 5):
    """Position, radius and gate [px] at exposure j inside a flight, from up to ``side`` observations on
    each side of it (at least two on each), strays left out; or None."""
    before = [k for k in sorted(known) if k < j][-side:]
    after = [k for k in sorted(known) if k > j][:side]
    if len(before) < 2 or len(after) < 2:
        return None
    keys = before + after
    u, v, r, rms, _ = _path_at(known, keys, times, j, np.ones(len(keys), bool), iterations=3)
    return u, v, r, max(2.0, 0.5 * r) + 3.0 * rms


def _path_at(track: dict, keys, times: np.ndarray, j: int, keep, iterations: int):
    """The flight's path (:class:`PathFit`) through the observations ``keys`` of ``track``, read at
    exposure j: (u, v, radius, the fit's scatter [px], the observations kept). Observations off the
    fit by more than 3 robust sigmas (1.5 px at least) are left out, starting from ``keep``; the
    radius from 1/radius linear in time (apparent radius f R / depth, the depth about linear over a
    short stretch), within half and twice the radii seen."""
    P = np.array([track[k] for k in keys])
    tc = times[keys] - times[j]
    tau = tc / max(float(np.abs(tc).max()), 1e-9)
    for it in range(iterations):
        fit = PathFit(tau[keep], P[keep, :2])
        e = np.linalg.norm(P[:, :2] - fit(tau), axis=1)
        new = e <= max(3.0 * 1.4826 * float(np.median(e[keep])), 1.5)
        if new.sum() < 5 or np.array_equal(new, keep) and it > 0:
            break
        keep = new
    n_par = 7 if keep.sum() >= 8 else 6
    rms = float(np.sqrt((e[keep] ** 2).sum() / max(2 * int(keep.sum()) - n_par, 1)))
    u, v = fit(np.zeros(1))[0]
    c_r = np.polyfit(tau[keep], 1.0 / np.maximum(P[keep, 2], 0.5), 1)
    r = float(np.clip(1.0 / max(float(np.polyval(c_r, 0.0)), 1e-3), 0.5 * P[:, 2].min(), 2.0 * P[:, 2].max()))
    return float(u), float(v), r, rms, keep


def _box(img, u, v, r, reach):
    """The window around (u, v) that the filters need: (x0, y0, x1, y1)."""
    h, w = img.shape
    half = int(np.ceil(reach)) + 2 * (int(np.ceil(2.5 * r)) + 1) + 2
    return max(0, int(u) - half), max(0, int(v) - half), min(w, int(u) + half + 1), min(h, int(v) + half + 1)


def _refs(frames, track, j, s, r, step, view) -> list[int]:
    """Up to N_REFS exposures of the same scene on the flight's known side in which the ball was >= 3 r
    away from the scene position ``s``."""
    out = []
    for d in range(4, REF_REACH + 1, 2):
        k = j - step * d
        if k not in frames or view.segment[k] != view.segment[j]:
            continue
        p = track.get(k)
        if p is None or np.hypot(p[0] - s[0], p[1] - s[1]) < 3.0 * max(r, p[2]):
            continue
        out.append(k)
        if len(out) == N_REFS:
            return out
    return out


def _background(frames, track, j, s, r, step, box, view):
    """Median of the :func:`_refs` exposures, moved with the view onto exposure j's window ``box``."""
    refs = [view.crop(frames, k, j, box) for k in _refs(frames, track, j, s, r, step, view)]
    if not refs:
        return None
    return np.median(np.stack(refs).astype(np.float32), axis=0)


def _filters(r: float):
    """The disc (radius r) and the annulus 1.5-2.5 r, as mean filters."""
    n = int(np.ceil(2.5 * r)) + 1
    yy, xx = np.mgrid[-n:n + 1, -n:n + 1]
    d = np.hypot(xx, yy)
    disc = (d <= r).astype(np.float32)
    ring = ((d >= 1.5 * r) & (d <= 2.5 * r)).astype(np.float32)
    return disc / disc.sum(), ring / max(ring.sum(), 1.0), n


def _response(frames, track, j, uv, s, r, step, reach, view):
    """Disc and annulus means of the absolute difference D from the background around the pixel ``uv``
    (scene position ``s``), less their level in the window (the median), the disc filter's noise there,
    the window's corner and D; or None."""
    img = frames[j]
    disc, ring, _ = _filters(r)
    x0, y0, x1, y1 = _box(img, uv[0], uv[1], r, reach)
    bg = _background(frames, track, j, s, r, step, (x0, y0, x1, y1), view)
    if bg is None:
        return None
    D = img[y0:y1, x0:x1].astype(np.float32) - bg
    D = np.abs(D - float(np.median(D)))  # exposure drift and flicker: a common offset
    Rd = cv2.filter2D(D, -1, disc, borderType=cv2.BORDER_REFLECT)
    Rr = cv2.filter2D(D, -1, ring, borderType=cv2.BORDER_REFLECT)
    base = float(np.median(Rd))
    # the filter's noise from the quiet part of the window (a person moving there is not noise): the
    # lower quartile of |deviation| is 0.3186 sigma for a Gaussian
    noise = float(np.quantile(np.abs(Rd - base), 0.25)) / 0.3186
    return Rd - base, Rr - base, noise, (x0, y0), D


def _own_contrast(known: dict, frames, view):
    """The flight's median contrast [grey levels] through the matched filter at its tracked
    observations (the first and last dozen); None if too few can be measured."""
    vals = []
    for j in sorted(known)[-12:] + sorted(known)[:12]:
        if j not in frames:
            continue
        us, vs, r = known[j]
        u, v = view.image(j, us, vs)
        for step in (1, -1):
            got = _response(frames, known, j, (u, v), (us, vs), r, step, 1.0, view)
            if got is None:
                continue
            Rd, _, _, (x0, y0), _ = got
            yi, xi = int(round(v)) - y0, int(round(u)) - x0
            if 0 <= yi < Rd.shape[0] and 0 <= xi < Rd.shape[1]:
                vals.append(float(Rd[yi, xi]))
            break
    if len(vals) < 3:
        return None
    med = float(np.median(vals))
    return med if med > 0 else None


def _look(frames, track, j, uv, s, r, gate, level, step, view):
    """The ball near the prediction at exposure j (pixel ``uv``, scene position ``s``): (u, v, contrast
    share, apparent radius) in exposure j's pixels, or None."""
    u, v = uv
    got = _response(frames, track, j, uv, s, r, step, gate, view)
    if got is None:
        return None
    Rd, Rr, noise, (x0, y0), D = got
    S = Rd
    yy, xx = np.mgrid[0:S.shape[0], 0:S.shape[1]]
    inside = np.hypot(xx + x0 - u, yy + y0 - v) <= gate
    if not inside.any():
        return None
    Sm = np.where(inside, S, -np.inf)
    yi, xi = np.unravel_index(int(np.argmax(Sm)), S.shape)
    peak = float(S[yi, xi])
    if peak < max(KEEP_SHARE * level, NOISE_SIGMAS * noise):
        return None
    if peak > MAX_SHARE * level or float(Rr[yi, xi]) > RING_SHARE * peak:
        return None  # not isolated: part of something larger moving there
    m = int(np.ceil(1.5 * r))
    ys = slice(max(0, yi - m), min(D.shape[0], yi + m + 1))
    xs = slice(max(0, xi - m), min(D.shape[1], xi + m + 1))
    wy, wx = np.mgrid[ys, xs]
    wgt = D[ys, xs] * (np.hypot(wx - xi, wy - yi) <= 1.5 * r)
    if wgt.sum() > 0 and np.hypot(float((wgt * (wx - xi)).sum()), float((wgt * (wy - yi)).sum())) / float(wgt.sum()) > LOPSIDED * r:
        return None  # lopsided: merged with something beside it
    du = dv = 0.0
    if 0 < xi < S.shape[1] - 1:
        a, b, c = S[yi, xi - 1], S[yi, xi], S[yi, xi + 1]
        den = a - 2 * b + c
        du = float(np.clip(0.5 * (a - c) / den, -0.5, 0.5)) if den < 0 else 0.0
    if 0 < yi < S.shape[0] - 1:
        a, b, c = S[yi - 1, xi], S[yi, xi], S[yi + 1, xi]
        den = a - 2 * b + c
        dv = float(np.clip(0.5 * (a - c) / den, -0.5, 0.5)) if den < 0 else 0.0
    # its own apparent radius (not the prediction's, which would only repeat the trend): the area where
    # the difference exceeds half its level on the disc, the detector's way of sizing a blob
    near = np.hypot(wx - xi, wy - yi) <= 1.5 * r
    half = 0.5 * float(D[ys, xs][np.hypot(wx - xi, wy - yi) <= r].mean())
    r_own = float(np.sqrt(max(int((D[ys, xs][near] > half).sum()), 1) / np.pi))
    return float(x0 + xi + du), float(y0 + yi + dv), peak / level, r_own
