"""The drag law of a fit held on the catalogue rung, moved by its nuisances (:data:`.nuisance.DRAG_LAW_SIGMAS`),
and the compensation of the drag crisis position by refits (used by the image fit).
"""

from __future__ import annotations

import math
from dataclasses import replace

import numpy as np

from ..errors import BallTrajError
from ..physics.flight import FlightModel

SECANT_NUISANCES = ("log_re_shift",)  # drag-law nuisances compensated by refits (see drag_law_secant)


def pinned_drag_model(model: FlightModel, values: dict, launch_speed: float) -> FlightModel:
    """The catalogue model with its drag law moved by the drag-law nuisances ``values`` (name -> value of
    :data:`.nuisance.DRAG_LAW_SIGMAS`; absent: 0), as :func:`.ladder.batch_model` would move it: C_D =
    e^s C_D,cat(e^c Re) (Re / Re_0)^a with Re_0 at the launch speed."""
    re0 = model.air_density * model.diameter_m / model.air_viscosity * float(launch_speed)
    params = {"base": model.drag_model, "base_params": dict(model.drag_params),
              "scale": math.exp(values.get("log_drag_scale", 0.0)), "re_exponent": values.get("drag_re_exponent", 0.0),
              "reference_re": re0, "spin_slope": 0.0, "re_shift": math.exp(values.get("log_re_shift", 0.0)),
              "offset": 0.0}
    return replace(model, drag_model="modified", drag_params=params)


def drag_law_secant(prob, res, nuisance, problem_of, options, solve_kw):
    """The compensation of the drag-law nuisances by refits, not by the tangent at the catalogue law.

    A drag crisis moves the flight by far more than its slope at the catalogue law tells: a crisis the
    flight does not reach under the catalogue law (tangent nearly 0) is reached when it sits 15 % higher
    in Re. So for the crisis position b_j (``log_re_shift``, prior sigma s_j) the rung is refitted with
    the law moved to b_j = +s_j and -s_j, and A[:, j] = (theta(+s_j) - theta(-s_j)) / (2 s_j): a secant
    over the prior's one-sigma range (the central-difference form of the compensation of
    :mod:`.nuisance`). The level and the speed slope of the drag act smoothly and keep the tangent, as
    does a column whose refit fails."""
    from .flight_fit import solve
    from .nuisance import DRAG_LAW_SIGMAS

    if tuple(prob.rung):
        return nuisance
    names = nuisance["names"]
    A = np.array(nuisance["compensation"], float)
    cont = replace(options, max_nfev=min(options.max_nfev, 120))
    speed = float(np.linalg.norm(res.p[3:6]))
    for j, n in enumerate(names):
        if n not in DRAG_LAW_SIGMAS or n not in SECANT_NUISANCES:
            continue
        s = float(nuisance["prior_sigma"][j])
        sol = []
        for sign in (1.0, -1.0):
            pr = problem_of(pinned_drag_model(prob.model, {n: sign * s}, speed))
            pr.sigma, pr.mask, pr.back_s = prob.sigma.copy(), prob.mask.copy(), prob.back_s
            pr._first_xyz = getattr(prob, "_first_xyz", None)
            try:
                r = solve(pr, res.p, cont, False, robust=False, **solve_kw)
            except BallTrajError:
                break
            if not np.all(np.isfinite(r.p)):
                break
            sol.append(r.p)
        if len(sol) == 2:
            A[:, j] = (sol[0] - sol[1]) / (2.0 * s)
    return {**nuisance, "compensation": A, "compensation_method": "secant refits over the drag-law priors"}
