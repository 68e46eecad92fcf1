"""Seeding new tracks: three candidates in three recent exposures that move fast enough and continue
each other's motion (a random pair of clutter blobs is common in a busy scene, a random triplet in line
is not). Used by :class:`~balltraj.vision.track.Tracker` for the candidates no track took."""
from __future__ import annotations

import numpy as np


def seed_all(pool, k, t, cs, width, height, min_speed, max_speed):
    """For each candidate c of cs, the best (p0, p1, c) from the pool that starts a plausible
    flight (p0 and p1 in earlier exposures, each step fast enough, sizes alike, and c within a
    few radii of where p0 -> p1 extrapolates), or None. All candidates at once: every pool pair
    and candidate is judged in arrays."""
    out = [None] * len(cs)
    if not cs or len(pool) < 2:
        return out
    K = np.array([p[0] for p in pool])
    T = np.array([p[1] for p in pool])
    U = np.array([p[2].u for p in pool])
    V = np.array([p[2].v for p in pool])
    Rr = np.array([p[2].radius_px for p in pool])
    cu = np.array([c.u for c in cs])
    cv = np.array([c.v for c in cs])
    cr = np.array([c.radius_px for c in cs])

    max_step = float(np.hypot(width, height)) / 6.0

    def link(k1, t1, u1, v1, r1, k0, t0, u0, v0, r0):
        """Could (k0, t0, ...) -> (k1, t1, ...) be consecutive points of a flight? Fast enough,
        but not so far a step per exposure that the ball would cross the whole view in fewer
        exposures than a flight needs (a random pair of far-apart blobs), sizes alike
        (broadcast arrays)"""
        dt = t1 - t0
        d = np.hypot(u1 - u0, v1 - v0)
        with np.errstate(divide="ignore", invalid="ignore"):
            sp = d / dt
        return (dt > 0) & (k1 - k0 <= 2) & (k0 != k1) & (sp >= min_speed) & (sp <= max_speed) \
            & (d <= max_step * np.abs(k1 - k0)) & (r1 >= 0.5 * r0 - 2) & (r1 <= 2 * r0 + 2)

    m1 = link(k, t, cu[:, None], cv[:, None], cr[:, None], K[None], T[None], U[None], V[None], Rr[None])
    ic, i1 = np.nonzero(m1)  # (candidate, p1) pairs
    if not len(ic):
        return out
    m0 = link(K[:, None], T[:, None], U[:, None], V[:, None], Rr[:, None], K[None], T[None], U[None], V[None],
              Rr[None]) & (K[None] < K[:, None])  # m0[p1, p0]
    ip, i0 = np.nonzero(m0[i1])
    if not len(ip):
        return out
    c_i, p1_i = ic[ip], i1[ip]
    f = (t - T[p1_i]) / (T[p1_i] - T[i0])
    pu = U[p1_i] + (U[p1_i] - U[i0]) * f
    pv = V[p1_i] + (V[p1_i] - V[i0]) * f
    step = np.hypot(cu[c_i] - U[p1_i], cv[c_i] - V[p1_i])
    d = np.hypot(cu[c_i] - pu, cv[c_i] - pv)
    good = d < 3.0 + 2.0 * cr[c_i] + 0.35 * step
    if not good.any():
        return out
    c_i, p1_i, p0_i, d = c_i[good], p1_i[good], i0[good], d[good]
    order = np.lexsort((d, c_i))  # by candidate, then best first
    first = np.ones(len(order), bool)
    first[1:] = c_i[order][1:] != c_i[order][:-1]
    for o in order[first]:
        out[int(c_i[o])] = (pool[int(p0_i[o])], pool[int(p1_i[o])], (k, t, cs[int(c_i[o])]))
    return out
