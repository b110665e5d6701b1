"""Many edges: each edge's delay solved on its own, inside the shape search.

A joint fit of m edges without an input channel has a few shape parameters
shared by every edge (time constants, f0, Q) and, per edge, a delay ``t0_i``
and two levels. The levels are linear and already solved inside the objective
(:mod:`.projection`). Searching the delays with the shape by
Levenberg-Marquardt costs one model evaluation of every edge per delay for
each Jacobian, and a QR factorisation of an (n, m + k) matrix per step: the
cost grows with the square (and the cube) of the number of edges.

But a delay touches its own edge only (and, by the previous edge's settling
tail, which is a factor e^-7.5 down at the window start, the next edge
slightly). So here the search runs over the shape alone: for each trial shape
every edge's delay is solved by Gauss-Newton on that edge's projected sum of
squares (levels solved linearly inside, the delay warm-started where it was
last), all edges at once in arrays. The search's Jacobian is the one of the
reduced problem: the shape columns of each edge with that edge's level and
delay columns projected out (Kaufman, BIT 15 (1975) 49-57; Golub & Pereyra,
Inverse Problems 19 (2003) R1-R26 - from memory), which gives the exact
gradient of the reduced sum of squares and the Gauss-Newton Hessian of the
shape (the Schur complement of the per-edge blocks). The cost of a search is
then linear in the number of edges.

The previous edge's tail is evaluated at that edge's delay from the last
sweep (all edges are swept together until no delay moves), so the delays are
the fixed point of the per-edge problems; their coupling through the tail
(a term of relative size below 1e-3 in a delay's own gradient) is left out of
the search and kept in the final Jacobian and covariance
(:func:`.least_squares.model_fit_at`).
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Mapping

import numpy as np
from scipy import optimize

from .joint_model import DELAY_DIFFERENCE, JointModel
from .stacked_edges import EdgeSums

#: The delays are solved inside the shape search from this many edges on
#: (fewer: the delays are searched with the shape, :mod:`.projection`).
NESTED_FROM_EDGES = 6
#: A delay has converged when its Gauss-Newton step is below this (scaled time units).
DELAY_TOLERANCE = 1e-9
#: ... or below this fraction of its own standard error (a move that small changes
#: the edge's sum of squares by 1e-8 of the noise variance, far below the shape
#: search's tolerance).
DELAY_PRECISION = 1e-4
#: Gauss-Newton sweeps allowed per trial shape.
MAX_SWEEPS = 40
#: Delay steps above this (scaled time units) are checked to lower the edge's sum
#: of squares (a smaller one changes it by less than its rounding). Every larger
#: step is checked, however small against the delay's standard error: a response
#: with a kink at the edge (first order) has a sum of squares with a kink
#: wherever the edge passes a sample, and Newton steps taken unchecked there
#: cycle across it.
CHECKED_STEP = 1e-6
#: Times a delay step that raises its edge's sum of squares is halved.
HALVINGS = 12
#: Largest delay step of one sweep (scaled time units): a step beyond it is cut back.
MAX_DELAY_STEP = 0.25
#: Central-difference step of a log shape parameter (a delay's is the joint model's
#: DELAY_DIFFERENCE, for forms without closed-form time derivatives).
SHAPE_STEP = 1e-6


def uses_nested_delays(joint: JointModel, fixed: Mapping[str, float]) -> bool:
    """True when the delays are solved per edge inside the search (free delays, many edges)."""
    return (joint.free_t0 and not joint.measured_input and len(joint.segments) >= NESTED_FROM_EDGES
            and not any(n.startswith("t0_") for n in fixed))


@dataclass
class DelayFit:
    """Delays, levels and model of every edge for one shape (see :func:`solve_delays`)."""

    delays: np.ndarray
    baselines: np.ndarray
    steps: np.ndarray
    model: np.ndarray       # all points, scaled volts
    response: np.ndarray    # unit responses f_i at the delays, all points
    slope: np.ndarray       # d f_i / d t0_i, all points
    converged: bool


def _levels(sums: EdgeSums, f: np.ndarray, target: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Per-edge weighted straight-line fit of target on f: (baseline, step, residual)."""
    e = sums.edge
    fc, yc = sums.centred(f), sums.centred(target)
    sxx = sums.sum(fc * fc)
    step = np.where(sxx > 0, sums.sum(fc * yc) / np.where(sxx > 0, sxx, 1.0), 0.0)
    baseline = (sums.sum(target) - step * sums.sum(f)) / sums.total
    return baseline, step, target - baseline[e] - step[e] * f


def _response_and_slope(joint: JointModel, shape: Mapping[str, float], delays: np.ndarray
                        ) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Unit responses at the delays, and their first and second derivatives in the delay."""
    return joint.stacked_responses_and_slopes(shape, delays, DELAY_DIFFERENCE)


def solve_delays(joint: JointModel, shape: Mapping[str, float], start: np.ndarray) -> DelayFit:
    """Each edge's delay (and levels) minimising that edge's weighted sum of squares
    for this ``shape`` (scaled units), by Gauss-Newton from ``start``, all edges at once.

    A step that raises an edge's sum of squares is halved (up to HALVINGS times,
    then that edge stays where it is);
    the sweeps stop when no delay moves by more than :data:`DELAY_TOLERANCE` or
    :data:`DELAY_PRECISION` of its standard error, whichever is larger.
    """
    sums = joint.edge_sums
    y = joint.y
    e = sums.edge
    delays = np.array(start, dtype=float)
    tail = joint.stacked_tails(shape, delays)
    f, slope, curve = _response_and_slope(joint, shape, delays)
    base, step, r = _levels(sums, f, y - tail)
    ss = sums.sum(r * r)
    converged = False
    stuck = np.zeros(sums.m, dtype=bool)  # edges no step improves (left where they are)
    for _ in range(MAX_SWEEPS):
        # the delay column step * df, with the edge's level columns (1, f) projected out
        g = sums.centred(step[e] * slope)
        fc = sums.centred(f)
        sff = sums.sum(fc * fc)
        g = g - (sums.sum(g * fc) / np.where(sff > 0, sff, 1.0))[e] * fc
        # Newton: the Gauss-Newton curvature g.g less the residuals' own term
        # r.(step d2f), where that keeps it above a tenth of g.g
        sgg = sums.sum(g * g)
        hess = np.maximum(sgg - sums.sum(r * step[e] * curve), 0.1 * sgg)
        move = np.where(hess > 0, sums.sum(g * r) / np.where(hess > 0, hess, 1.0), 0.0)
        move = np.clip(np.nan_to_num(move), -MAX_DELAY_STEP, MAX_DELAY_STEP)
        move = np.where(stuck, 0.0, move)
        # the delay's standard error: edge noise variance (ss over its degrees of
        # freedom: baseline, step, delay) over the Gauss-Newton curvature
        se = np.sqrt(ss / np.maximum(sums.total - 3.0, 1.0) / np.where(sgg > 0, sgg, np.inf))
        tolerance = np.maximum(DELAY_TOLERANCE, DELAY_PRECISION * se)
        if np.all(np.abs(move) <= tolerance):
            # converged: the last step (below tolerance) applied to first order
            delays = delays + move
            f = f + move[e] * slope
            base, step, r = _levels(sums, f, y - tail)
            converged = True
            break
        pending = np.abs(move) > tolerance
        # each edge's step is checked on its own problem: the previous edge's
        # tail held where it is (its coupling is left to the sweeps, see the
        # module docstring), so a neighbour's move cannot make a good step look bad
        for _ in range(HALVINGS):
            trial = np.where(pending, delays + move, delays)
            t_f, t_slope, t_curve = _response_and_slope(joint, shape, trial)
            t_r = _levels(sums, t_f, y - tail)[2]
            # (a step too small to change the sum beyond rounding is taken as it is)
            worse = pending & (np.abs(move) > CHECKED_STEP) & ~(sums.sum(t_r * t_r) <= ss * (1.0 + 1e-12))
            if not np.any(worse):
                break
            move = np.where(worse, 0.5 * move, move)
        if np.any(worse):  # no step lowers these edges' sums: they stay where they are
            stuck |= worse
            trial = np.where(worse, delays, trial)
            t_f, t_slope, t_curve = _response_and_slope(joint, shape, trial)
        delays, f, slope, curve = trial, t_f, t_slope, t_curve
        tail = joint.stacked_tails(shape, delays)
        base, step, r = _levels(sums, f, y - tail)
        ss = sums.sum(r * r)
    model = y - r
    return DelayFit(delays, base, step, model, f, slope, converged)


def reduced_jacobian(joint: JointModel, shape_names: tuple[str, ...], values: Mapping[str, float],
                     fit: DelayFit) -> np.ndarray:
    """d(model)/d(log shape) of every edge at fixed delays and levels, with each
    edge's own level and delay columns projected out (weighted): (n, k)."""
    sums = joint.edge_sums
    e = sums.edge
    w = joint.weights
    cols = []
    for name in shape_names:
        vals = dict(values)
        out = []
        for sign in (1.0, -1.0):
            vals[name] = values[name] + sign * SHAPE_STEP
            shape = joint.shape_scaled(vals)
            out.append(fit.steps[e] * joint.stacked_responses(shape, fit.delays)
                       + joint.stacked_tails(shape, fit.delays))
        cols.append((out[0] - out[1]) / (2.0 * SHAPE_STEP))
    # Gram-Schmidt per edge against 1, f, step * df (weights w^2 = counts)
    basis = [sums.centred(fit.response), sums.centred(fit.steps[e] * fit.slope)]
    ortho: list[np.ndarray] = []
    for b in basis:
        for q in ortho:
            b = b - (sums.sum(b * q) / _safe(sums.sum(q * q)))[e] * q
        ortho.append(b)
    reduced = []
    for c in cols:
        c = sums.centred(c)
        for q in ortho:
            c = c - (sums.sum(c * q) / _safe(sums.sum(q * q)))[e] * q
        reduced.append(c * w)
    return np.column_stack(reduced) if reduced else np.zeros((w.size, 0))


def _safe(x: np.ndarray) -> np.ndarray:
    return np.where(x > 0, x, 1.0)


def nested_search(joint: JointModel, start: Mapping[str, float], fixed: Mapping[str, float], *,
                  tol: float, max_nfev: int) -> tuple[dict[str, float], bool, str, int]:
    """Levenberg-Marquardt (MINPACK lmder) over the free shape parameters, the
    delays and levels solved per edge inside (see the module docstring).

    Returns (all internal values at the end, converged, MINPACK's message,
    number of residual evaluations).
    """
    names = tuple(n for n in joint.shape_names if n not in fixed)
    w = joint.weights
    # each trial shape's delays start from those of the best shape so far (a
    # wild trial step must not leave the next trial's delays far off)
    state = {"delays": joint.delays_of(start), "best": math.inf, "key": None, "fit": None, "values": None}

    def solved(theta: np.ndarray) -> tuple[dict[str, float], DelayFit]:
        key = theta.tobytes()
        if state["key"] != key:
            vals = dict(start)
            vals.update(fixed)
            vals.update(zip(names, (float(v) for v in theta)))
            fit = solve_delays(joint, joint.shape_scaled(vals), state["delays"])
            rss = float(np.sum((w * (joint.y - fit.model)) ** 2))
            if np.all(np.isfinite(fit.delays)) and rss < state["best"]:
                state.update(delays=fit.delays, best=rss)
            state.update(key=key, fit=fit, values=vals)
        return state["values"], state["fit"]

    def residual(theta: np.ndarray) -> np.ndarray:
        try:
            with np.errstate(all="ignore"):
                r = w * (joint.y - solved(theta)[1].model)
        except (ArithmeticError, ValueError, np.linalg.LinAlgError):
            return np.full(joint.y.shape, 1e150)
        return np.where(np.isfinite(r), r, 1e150)

    last_jacobian: dict[bytes, np.ndarray] = {}

    def jacobian(theta: np.ndarray) -> np.ndarray:
        key = theta.tobytes()
        if key not in last_jacobian:  # (MINPACK's wrapper asks for the first one twice)
            with np.errstate(all="ignore"):
                vals, fit = solved(theta)
                jac = -reduced_jacobian(joint, names, vals, fit)
            last_jacobian.clear()
            last_jacobian[key] = np.where(np.isfinite(jac), jac, 0.0)
        return last_jacobian[key].copy()  # (MINPACK may factorise it in place)

    theta0 = np.array([float(start.get(n, 0.0)) for n in names])
    if theta0.size:
        x, _, info, message, ier = optimize.leastsq(residual, theta0, Dfun=jacobian, full_output=True,
                                                    ftol=tol, xtol=tol, gtol=0.0, maxfev=max_nfev)
        theta = np.atleast_1d(x)
        converged = ier in (1, 2, 3, 4) and bool(np.all(np.isfinite(theta)))
        nfev, message = int(info["nfev"]), str(message)
    else:
        theta, converged, message, nfev = theta0, True, "no nonlinear parameter", 0
    with np.errstate(all="ignore"):
        vals, fit = solved(theta)
    out = dict(vals)
    for i in range(len(joint.segments)):
        out[f"t0_{i}"] = float(fit.delays[i])
        out[f"baseline_{i}"] = float(fit.baselines[i])
        out[f"step_{i}"] = float(fit.steps[i])
    return out, converged and fit.converged, message, nfev
