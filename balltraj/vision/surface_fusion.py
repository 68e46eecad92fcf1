"""Fusing the spin read from the ball's surface with the transverse spin of the flight fit (pure numpy).

The flight fixes only the spin across the velocity (the Magnus force is along omega x v); the surface
gives the whole vector. The two must agree across the velocity: the difference of the transverse
parts, in sigmas of both, is the agreement check. When they agree they are combined by generalised
least squares (the surface as a 3-vector measurement, the flight as a 2-vector measurement in the
plane across the velocity), so the gyro part comes from the surface alone and the transverse part from
both. When they disagree, the surface's vector is reported alone and the check says so.

References
----------
Nathan 2008, Am. J. Phys. 76(2):119-124 (only the transverse spin acts on the flight);
Aitken 1935, Proc. R. Soc. Edinb. 55:42-48 (generalised least squares).
"""
from __future__ import annotations

import math

import numpy as np

RPM_PER_RADPS = 60 / (2 * math.pi)
AGREEMENT_SIGMAS = 3.0  # a transverse difference beyond this many sigmas is a disagreement (common practice)


def _plane_basis(vhat):
    a = np.array([1.0, 0, 0]) if abs(vhat[0]) < 0.9 else np.array([0, 1.0, 0])
    e1 = np.cross(vhat, a)
    e1 /= np.linalg.norm(e1)
    return np.stack([e1, np.cross(vhat, e1)], 1)  # (3, 2)


def _quantities(w, vhat):
    rate = float(np.linalg.norm(w))
    gyro = float(w @ vhat)
    trans = float(np.linalg.norm(w - gyro * vhat))
    return np.array([rate, trans, gyro, trans / rate if rate > 0 else math.nan])


def _unit(x):
    n = float(np.linalg.norm(x))
    return [float(v) for v in (x / n)] if n > 0 else None


def fuse_spin(surface_spin, surface_cov, flight_transverse_spin, flight_cov, velocity, surface: dict | None = None,
              threshold_sigmas: float = AGREEMENT_SIGMAS) -> dict:
    """Combine the surface spin with the flight's transverse spin into the flight file's ``spin`` section.

    Parameters
    ----------
    surface_spin : array_like, shape (3,) [rad/s]
        Spin vector read from the surface, world frame.
    surface_cov : array_like, shape (3, 3) [rad^2/s^2]
    flight_transverse_spin : array_like, shape (3,) [rad/s]
        Transverse spin of the flight fit, world frame (any part along the velocity is ignored).
    flight_cov : array_like, shape (3, 3) [rad^2/s^2]
    velocity : array_like, shape (3,) [m/s]
        Ball velocity where the spin applies (launch).
    surface : dict, optional
        Details of the surface reading (e.g. ``SurfaceSpin.to_dict()``), copied under ``"surface"``.
    threshold_sigmas : float
        Largest transverse difference, in sigmas, still counted as agreement.

    Returns
    -------
    dict
        JSON-ready: ``rate_rpm``, ``axis``, ``transverse_rate_rpm``, ``transverse_axis``, ``gyro_rate_rpm``
        (signed: positive along the velocity), ``spin_efficiency`` (transverse share),
        ``gyro_observed: True``, ``spin_vector_radps``, ``uncertainty`` (one sigma of the same names, and
        ``axis_deg``), ``agreement`` (difference in rpm and sigmas, ``agrees``, ``combined``), ``surface``.
    """
    ws = np.asarray(surface_spin, float).reshape(3)
    Cs = np.asarray(surface_cov, float).reshape(3, 3)
    wf = np.asarray(flight_transverse_spin, float).reshape(3)
    Cf = np.asarray(flight_cov, float).reshape(3, 3)
    v = np.asarray(velocity, float).reshape(3)
    vhat = v / np.linalg.norm(v)
    B = _plane_basis(vhat)
    ds = B.T @ ws - B.T @ wf  # transverse difference in the plane across v
    S = B.T @ (Cs + Cf) @ B
    dist = float(math.sqrt(max(0.0, ds @ np.linalg.pinv(S) @ ds)))
    agrees = dist <= threshold_sigmas
    if agrees:
        info_s = np.linalg.pinv(Cs)
        info_f = B @ np.linalg.pinv(B.T @ Cf @ B) @ B.T
        cov = np.linalg.pinv(info_s + info_f)
        w = cov @ (info_s @ ws + info_f @ wf)
    else:
        w, cov = ws, Cs
    q = _quantities(w, vhat)
    # sigmas of rate, transverse rate, gyro rate and transverse share by first-order propagation
    J = np.empty((4, 3))
    h = 1e-6 * max(1.0, float(np.linalg.norm(w)))
    for i in range(3):
        e = np.zeros(3)
        e[i] = h
        J[:, i] = (_quantities(w + e, vhat) - _quantities(w - e, vhat)) / (2 * h)
    qs = np.sqrt(np.clip(np.einsum("ij,jk,ik->i", J, cov, J), 0, None))
    rate = q[0]
    a = w / rate if rate > 0 else np.zeros(3)
    P = np.eye(3) - np.outer(a, a)
    axis_sigma = math.degrees(math.sqrt(max(0.0, float(np.trace(P @ cov @ P)) / 2)) / rate) if rate > 0 else None
    trans = w - (w @ vhat) * vhat
    return {
        "rate_rpm": q[0] * RPM_PER_RADPS,
        "axis": _unit(w),
        "transverse_rate_rpm": q[1] * RPM_PER_RADPS,
        "transverse_axis": _unit(trans) or [0.0, 0.0, 0.0],
        "gyro_rate_rpm": q[2] * RPM_PER_RADPS,
        "spin_efficiency": None if not math.isfinite(q[3]) else float(q[3]),
        "gyro_observed": True,
        "spin_vector_radps": [float(x) for x in w],
        "note": ("full spin vector from the ball's surface" +
                 (", transverse part combined with the flight fit" if agrees else
                  "; it disagrees with the flight fit's transverse spin, which is left out")),
        "uncertainty": {"rate_rpm": qs[0] * RPM_PER_RADPS, "transverse_rate_rpm": qs[1] * RPM_PER_RADPS,
                        "gyro_rate_rpm": qs[2] * RPM_PER_RADPS,
                        "spin_efficiency": None if not math.isfinite(qs[3]) else float(qs[3]),
                        "axis_deg": axis_sigma},
        "agreement": {"transverse_difference_rpm": float(np.linalg.norm(ds)) * RPM_PER_RADPS,
                      "difference_sigmas": dist, "threshold_sigmas": float(threshold_sigmas),
                      "agrees": bool(agrees), "combined": bool(agrees),
                      "surface_transverse_rpm": float(np.linalg.norm(B.T @ ws)) * RPM_PER_RADPS,
                      "flight_transverse_rpm": float(np.linalg.norm(B.T @ wf)) * RPM_PER_RADPS},
        "surface": surface if surface is not None else {},
    }
