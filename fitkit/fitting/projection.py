"""Variable projection: the levels solved linearly inside the objective.

For a fixed shape (time constants, f0, Q, ...) and edge delays, the model of
every edge is linear in its levels: ``baseline_i + step_i * f_i`` (ideal
step) or ``baseline_i + gain * f_i`` (measured input, one shared gain). So
the nonlinear search only needs the shape and the delays; for each trial
the levels are the weighted linear least-squares solution (Golub & Pereyra,
SIAM J. Numer. Anal. 10 (1973) 413-432: the minimiser of the projected sum of
squares is the minimiser of the full one). That takes, for a four-edge
capture, the nonlinear problem from 13 parameters to 5, and the cost of a
Levenberg-Marquardt iteration (one model evaluation per parameter) with it.

The covariance is not taken from the projected problem: after convergence
the full parameter set (shape, delays and levels) gets its Jacobian and
covariance at the optimum in :func:`.least_squares.model_fit_at`, exactly as a fit
over all parameters would.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Callable, Mapping

import numpy as np
from scipy import optimize

from .least_squares import ModelFit, model_fit_at
from .edge_delays import nested_search, uses_nested_delays
from .joint_model import JointModel


def nonlinear_names(joint: JointModel) -> tuple[str, ...]:
    """The parameters searched nonlinearly: the shape logs and the free edge delays."""
    delays = tuple(f"t0_{i}" for i in range(len(joint.segments))) if joint.free_t0 else ()
    return joint.shape_names + delays


def projected_model(joint: JointModel, values: Mapping[str, float]) -> tuple[dict[str, float], np.ndarray]:
    """(levels, model over all points) for the shape and delays in ``values``, the
    levels by weighted linear least squares; each edge's response is computed once."""
    shape = joint.shape_scaled(values)
    out: dict[str, float] = {}
    if joint.measured_input:
        # baseline_i = weighted mean of (y_i - gain f_i); gain from the pooled centred sums
        f = joint.input_responses(shape)
        sums = joint.edge_sums
        fm, ym = sums.mean(f), sums.mean(joint.y)
        fc = f - fm[sums.edge]
        sxx = float(np.sum(sums.w2 * fc * fc))
        gain = float(np.sum(sums.w2 * fc * (joint.y - ym[sums.edge]))) / sxx if sxx > 0 else 0.0
        baselines = ym - gain * fm
        out["gain"] = gain
        out.update({f"baseline_{i}": float(b) for i, b in enumerate(baselines)})
        return out, baselines[sums.edge] + gain * f
    pieces = []
    for i, d in enumerate(joint.data):
        w2 = d.counts.astype(float)
        f = joint.unit_response(i, shape, values.get(f"t0_{i}", 0.0))
        tail = joint.previous_tail(i, shape, values)
        target = d.y - tail
        fm, ym = float(w2 @ f) / w2.sum(), float(w2 @ target) / w2.sum()
        fc = f - fm
        sxx = float((w2 * fc) @ fc)
        step = float((w2 * fc) @ (target - ym)) / sxx if sxx > 0 else 0.0
        out[f"baseline_{i}"] = ym - step * fm
        out[f"step_{i}"] = step
        pieces.append(out[f"baseline_{i}"] + step * f + tail)
    return out, np.concatenate(pieces)


def least_squares_search(residual: Callable[[np.ndarray], np.ndarray], theta0: np.ndarray,
                         shape: tuple[int, ...], *, tol: float, max_nfev: int
                         ) -> tuple[np.ndarray, bool, str, int]:
    """Levenberg-Marquardt (MINPACK lmdif, the routine and settings the full fit
    uses through lmfit) on ``residual`` from ``theta0``: (theta, converged,
    message, number of evaluations).

    A residual that raises an arithmetic error or is not finite counts as a
    huge residual, so the search backs away from it instead of failing.
    """
    def guarded(theta: np.ndarray) -> np.ndarray:
        try:
            with np.errstate(all="ignore"):
                r = residual(theta)
        except (ArithmeticError, ValueError, np.linalg.LinAlgError):
            return np.full(shape, 1e150)
        return np.where(np.isfinite(r), r, 1e150)

    if theta0.size == 0:
        return theta0, True, "no nonlinear parameter", 0
    x, _, info, message, ier = optimize.leastsq(guarded, theta0, full_output=True, ftol=tol,
                                                xtol=tol, gtol=0.0, maxfev=max_nfev)
    theta = np.atleast_1d(x)
    converged = ier in (1, 2, 3, 4) and bool(np.all(np.isfinite(theta)))
    return theta, converged, str(message), int(info["nfev"])


@dataclass(frozen=True)
class ProjectedSearch:
    """Where one projected search ended: all parameter values (levels solved
    linearly), the weighted residual sum of squares there, and MINPACK's verdict."""

    values: dict[str, float]
    rss: float
    converged: bool
    message: str
    nfev: int


def search_projected(joint: JointModel, start: Mapping[str, float], fixed: Mapping[str, float], *,
                     tol: float, max_nfev: int) -> ProjectedSearch:
    """Levenberg-Marquardt over the nonlinear parameters only (levels projected out).

    ``fixed`` may hold shape or delay values only (levels held fixed need the
    full fit, :func:`.least_squares.fit_model`). The Jacobian and covariance are left to
    :func:`finish_projected`, so of several starts only the best pays for them.
    """
    w = joint.weights
    if uses_nested_delays(joint, fixed):  # many edges: delays solved per edge inside
        values, converged, message, nfev = nested_search(joint, start, fixed, tol=tol, max_nfev=max_nfev)
        with np.errstate(all="ignore"):
            rss = float(np.sum((w * (joint.y - joint.evaluate(None, **values))) ** 2))
        return ProjectedSearch(values, rss if math.isfinite(rss) else math.inf, converged, message, nfev)
    names = tuple(n for n in nonlinear_names(joint) if n not in fixed)

    def values_and_model(theta: np.ndarray) -> tuple[dict[str, float], np.ndarray]:
        vals = dict(fixed)
        vals.update(zip(names, (float(v) for v in theta)))
        levels, model = projected_model(joint, vals)
        vals.update(levels)
        return vals, model

    def residual(theta: np.ndarray) -> np.ndarray:
        return w * (joint.y - values_and_model(theta)[1])

    theta0 = np.array([float(start.get(n, 0.0)) for n in names])
    theta, converged, message, nfev = least_squares_search(residual, theta0, joint.y.shape, tol=tol,
                                                           max_nfev=max_nfev)
    with np.errstate(all="ignore"):
        values, model = values_and_model(theta)
        rss = float(np.sum((w * (joint.y - model)) ** 2))
    return ProjectedSearch(values, rss if math.isfinite(rss) else math.inf, converged, message, nfev)


def finish_projected(joint: JointModel, search: ProjectedSearch, fixed: Mapping[str, float]) -> ModelFit:
    """The full-parameter :class:`ModelFit` (Jacobian, covariance) where a search ended."""
    varied = tuple(n for n in joint.names if n not in fixed)
    with np.errstate(all="ignore"):
        known = joint.level_columns(search.values)
    return model_fit_at(joint.evaluate, search.values, varied, None, joint.y, joint.weights,
                        converged=search.converged, message=search.message, nfev=search.nfev,
                        edge_bounds=joint.bounds, known_columns=known)


def can_project(joint: JointModel, fixed: Mapping[str, float]) -> bool:
    """True when no level is held fixed (then the levels can be projected out)."""
    linear = set(joint.names) - set(nonlinear_names(joint))
    return not (linear & set(fixed))
