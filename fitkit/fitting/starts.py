"""Starting values from the data alone (variable projection on a coarse grid).

No starting value ever comes from the user. For a trial shape (time
constants, f0, Q ...) the levels enter linearly, so for each trial the best
baselines and steps (or the shared gain in measured-input mode) are found by
linear least squares and only the shape is searched: the trials are the
form's own ``guess()`` spread by factors of three each way, and, when the edge
time is free, a few trial delays. The best few trials start the nonlinear fit.
"""

from __future__ import annotations

import itertools
import math
from typing import Mapping

import numpy as np

from .joint_model import STACKED_FROM_EDGES, JointModel
from .projection import projected_model
from .scaling import decimated, reference_step

#: Factors applied to each guessed shape parameter to build the grid.
GRID_FACTORS = (1.0 / 3.0, 1.0, 3.0)
#: A form offering at least this many guesses is not spread further.
MANY_GUESSES = 4
#: Joint models of more edges score their start grid on this many of them.
GRID_EDGES = 8
#: Multiples of the 10-50 % rise interval tried as edge delays before the 10 % crossing.
DELAY_MULTIPLES = (0.0, 1.0, 2.0, 4.0)


def _reference(joint: JointModel) -> tuple[np.ndarray, np.ndarray]:
    """(t_rel in seconds, normalised response) of the edge with the largest step."""
    form = joint.form
    seg = max(joint.segments, key=lambda s: abs(reference_step(s, form)))
    t_rel = np.asarray(seg.time, dtype=float) - seg.edge_time
    y_norm = (np.asarray(seg.output, dtype=float) - seg.baseline) / reference_step(seg, form)
    return decimated(t_rel, y_norm)


def trial_delays(t_rel: np.ndarray, y_norm: np.ndarray) -> list[float]:
    """Trial edge times (seconds, relative to the reported edge) from the data.

    Without an input channel the reported edge is the output's own mid-level
    crossing, later than the true edge. The true edge lies at or before the
    response's 10 % crossing; the trials are 0, that crossing, and the
    crossing minus 1, 2 and 4 times the 10-50 % rise interval.
    """
    n = y_norm.size
    k = max(1, n // 200)
    if k > 1:  # running mean of k samples (by cumulative sums: O(n))
        c = np.concatenate([[0.0], np.cumsum(y_norm)])
        lo = np.clip(np.arange(n) - k // 2, 0, n)
        hi = np.clip(lo + k, 0, n)
        smooth = (c[hi] - c[lo]) / np.maximum(hi - lo, 1)
    else:
        smooth = y_norm
    dt = float(np.median(np.diff(t_rel))) if n > 1 else 0.0
    above = np.nonzero(smooth >= 0.5)[0]
    out = [0.0]
    if above.size == 0 or dt <= 0:
        return out
    i50 = int(above[0])
    low = np.nonzero(smooth[:i50] < 0.1)[0]
    i10 = int(low[-1]) if low.size else 0
    t10, t50 = t_rel[i10], t_rel[i50]
    rise = max(t50 - t10, dt)
    for m in DELAY_MULTIPLES:
        d = float(t10 - m * rise)
        if d >= t_rel[0] and all(abs(d - o) > 0.5 * dt for o in out):
            out.append(d)
    return out


def trial_shapes(joint: JointModel, delay: float = 0.0) -> list[dict[str, float]]:
    """Trial shapes in scaled units for an edge at ``delay`` seconds after the
    reported one: the form's guesses, spread over GRID_FACTORS when few."""
    form, sc = joint.form, joint.scaling
    t_rel, y_norm = _reference(joint)
    guesses = form.guess(t_rel - delay, y_norm) or []
    # A form that already offers a spread of guesses is taken as it is; a
    # form with few guesses is spread over GRID_FACTORS.
    factors_list = (list(itertools.product(GRID_FACTORS, repeat=len(form.shape)))
                    if len(guesses) < MANY_GUESSES else [(1.0,) * len(form.shape)])
    trials: list[dict[str, float]] = []
    for g in guesses:
        base = {}
        for spec in form.shape:
            v = float(g.get(spec.name, float("nan")))
            if not (math.isfinite(v) and v > 0):
                break
            base[spec.name] = v / sc.shape_unit(spec)
        else:
            for factors in factors_list:
                trials.append({k: v * f for (k, v), f in zip(base.items(), factors)})
    if not trials:  # a form gave no usable guess: fall back to order-one shapes
        trials = [{p.name: 1.0 for p in form.shape}]
    return trials


def projected_levels(joint: JointModel, shape: Mapping[str, float], delay: float
                     ) -> tuple[float, dict[str, float]]:
    """Best linear levels for a trial shape and delay: (RSS, internal values)."""
    values: dict[str, float] = {}
    rss = 0.0
    if joint.measured_input:  # per-edge baselines and one gain, in closed form (as the search solves them)
        values, model = projected_model(joint, {"log_" + k: math.log(v) for k, v in shape.items()})
        return float(np.sum((joint.weights * (joint.y - model)) ** 2)), values
    if len(joint.data) >= STACKED_FROM_EDGES:  # every edge at once
        return _projected_levels_stacked(joint, shape, delay)
    for i, d in enumerate(joint.data):
        f = joint.unit_response(i, shape, delay)
        fc, yc = f - f.mean(), d.y - d.y.mean()  # straight-line regression of y on f
        sxx = float(fc @ fc)
        step = float(fc @ yc) / sxx if sxx > 0 else 0.0
        base = float(d.y.mean() - step * f.mean())
        rss += float(np.sum((yc - step * fc) ** 2))
        values[f"baseline_{i}"], values[f"step_{i}"] = base, step
        if joint.free_t0:
            values[f"t0_{i}"] = delay
    return rss, values


def _projected_levels_stacked(joint: JointModel, shape: Mapping[str, float], delay: float
                              ) -> tuple[float, dict[str, float]]:
    """:func:`projected_levels` in ideal-step mode with every edge evaluated in one call."""
    m = len(joint.data)
    e = joint.stacked.edge_of_point
    count = np.bincount(e, minlength=m).astype(float)

    def centred(x: np.ndarray) -> np.ndarray:
        return x - (np.bincount(e, weights=x, minlength=m) / count)[e]

    f = joint.stacked_responses(shape, np.full(m, delay))
    fc, yc = centred(f), centred(joint.y)
    sxx = np.bincount(e, weights=fc * fc, minlength=m)
    step = np.where(sxx > 0, np.bincount(e, weights=fc * yc, minlength=m) / np.where(sxx > 0, sxx, 1.0), 0.0)
    base = (np.bincount(e, weights=joint.y, minlength=m) - step * np.bincount(e, weights=f, minlength=m)) / count
    rss = float(np.sum((yc - step[e] * fc) ** 2))
    values: dict[str, float] = {}
    for i in range(m):
        values[f"baseline_{i}"], values[f"step_{i}"] = float(base[i]), float(step[i])
        if joint.free_t0:
            values[f"t0_{i}"] = delay
    return rss, values


def few_edges(joint: JointModel, count: int | None = None) -> JointModel | None:
    """The joint model of ``count`` (default :data:`GRID_EDGES`) of its edges,
    in consecutive pairs spread over the record (as many rising as falling
    edges, each pair's second edge with its previous-edge tail), or None when
    it has no more edges than that."""
    count = count or GRID_EDGES
    m = len(joint.segments)
    if m <= count:
        return None
    pairs = count // 2
    firsts = sorted({2 * int(round(j * (m // 2 - 1) / max(pairs - 1, 1))) for j in range(pairs)})
    pick = [i for f in firsts for i in (f, f + 1) if i < m]
    return JointModel(joint.form, [joint.segments[i] for i in pick], joint.scaling,
                      measured_input=joint.measured_input, free_t0=joint.free_t0,
                      max_points=int(max(d.y.size for d in joint.data)))


def best_starts(joint: JointModel, keep: int = 3) -> list[dict[str, float]]:
    """The ``keep`` best starting points (internal parameter values), best first.

    With many edges the grid is scored on :data:`GRID_EDGES` of them spread
    over the record (a start needs no more), and the chosen starts get every
    edge's levels."""
    sub = few_edges(joint)
    if sub is not None:
        out = []
        for start in best_starts(sub, keep):
            shape = joint.shape_scaled(start)
            full = {k: v for k, v in start.items() if k.startswith("log_")}
            full.update(projected_levels(joint, shape, start.get("t0_0", 0.0))[1])
            out.append(full)
        return out
    if joint.free_t0:
        delays = [d / joint.scaling.time_unit for d in trial_delays(*_reference(joint))]
    else:
        delays = [0.0]
    scored = []
    with np.errstate(all="ignore"):
        for delay in delays:
            try:
                shapes = trial_shapes(joint, delay * joint.scaling.time_unit)
            except (ValueError, ArithmeticError, IndexError):
                continue
            for shape in shapes:
                if not all(math.isfinite(v) and v > 0 for v in shape.values()):
                    continue
                try:
                    rss, levels = projected_levels(joint, shape, delay)
                except (np.linalg.LinAlgError, ValueError):
                    continue
                if math.isfinite(rss):
                    start = {"log_" + k: math.log(v) for k, v in shape.items()}
                    start.update(levels)
                    scored.append((rss, start))
    scored.sort(key=lambda item: item[0])
    return [s for _, s in scored[:keep]]
