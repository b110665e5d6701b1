"""Bins of a long edge window: where to cut them, and how a model is averaged over one.

A long window is averaged into bins before the nonlinear fit
(:mod:`.joint_model`): narrow bins around the edge, wider ones where the
response is slow (:func:`variable_bins`); the model's mean over a bin's
samples is taken by a 3-point rule exact for the discrete mean
(:func:`discrete_mean_nodes`). In measured-input mode the level the input had
before the record is the mean of its points before the edge
(:func:`pre_edge_weights`). Times are in the joint model's scaled units.
"""

from __future__ import annotations

import numpy as np

#: Widest bin, in time units (the first time-scale guess, about the 63 % rise
#: time): the 3-point bin rule then follows even a ringing response closely.
MAX_BIN_WIDTH = 0.5

def variable_bins(t_rel: np.ndarray, dt: float, max_points: int) -> np.ndarray:
    """Start indices of bins that are narrow around the edge and widen away from it.

    t_rel is scaled time from the reported edge. Between -2 and +1 time units
    (where the true edge and the fast part of the response are) bins have a
    width w; outside, the width grows in proportion to the distance (bin count
    logarithmic in the distance). w starts at 1/200 of a time unit (never below
    one sample) and is enlarged until there are at most ``max_points`` bins;
    no bin is wider than MAX_BIN_WIDTH (so there may be more bins than that).
    Bin averages of the model are taken by a 3-point rule over each bin, which
    is accurate where the response is smooth; the edge's kink sits in a narrow bin.
    """
    lo_edge, hi_edge = -2.0, 1.0
    before = np.clip(lo_edge - t_rel, 0.0, None)
    after = np.clip(t_rel - hi_edge, 0.0, None)
    inside = np.clip(t_rel, lo_edge, hi_edge) - lo_edge
    coordinate = inside - np.log1p(before) + np.log1p(after)  # bins of width 1 in this coordinate
    # no bin wider than MAX_BIN_WIDTH time units: a ringing response keeps its shape
    caps = np.floor(t_rel / MAX_BIN_WIDTH).astype(np.int64)
    cap_starts = np.diff(caps, prepend=caps[0] - 1) != 0
    if np.count_nonzero(cap_starts) >= max_points:
        return np.flatnonzero(cap_starts)  # the caps alone fill the budget: bins as wide as they allow
    width = max(dt, 1.0 / 200.0)
    for _ in range(8):
        ids = np.floor(coordinate / width).astype(np.int64)
        starts = np.flatnonzero((np.diff(ids, prepend=ids[0] - 1) != 0) | cap_starts)
        if starts.size <= max_points:
            return starts
        width *= starts.size / max_points * 1.05
    return starts


def discrete_mean_nodes(centre: np.ndarray, counts: np.ndarray, dt: float) -> tuple[np.ndarray, np.ndarray]:
    """Nodes (m, 3) and weights (m, 3) giving the mean of a function over the
    ``counts[j]`` samples of bin j (spacing ``dt``, mean time ``centre[j]``).

    A bin mean of the data is the mean over its discrete samples, not the
    continuous mean over the bin: for a component e^(s t) the two differ by the
    factor (s dt / 2) / sinh(s dt / 2), independent of the bin width, about
    1 + (omega dt)^2 / 24 for a ringing component (4e-4 at 10 samples per
    radian). Modelling the bins by the continuous mean biased Q of a high-Q,
    high-SNR capture by that much. This rule is the 3-point Gauss quadrature
    of the discrete uniform measure on the bin's n samples: nodes at the centre
    and at +-dt sqrt(b1 + b2), weights b2 / (b1 + b2) and b1 / (2 (b1 + b2)),
    with b1 = (n^2 - 1) / 12 and b2 = (n^2 - 4) / 15 the recurrence
    coefficients of the discrete Chebyshev (Gram) polynomials (Golub & Welsch,
    Math. Comp. 23 (1969) 221-230; the coefficients from Abramowitz & Stegun
    22.2 / 22.17, from memory). It is exact for polynomials up to degree 5 and
    for every bin of one to three samples, and tends to 3-point Gauss-Legendre
    over wide bins.
    """
    n = np.asarray(counts, dtype=float)
    b1 = (n * n - 1.0) / 12.0
    b2 = (n * n - 4.0) / 15.0
    single = n < 1.5
    total = np.where(single, 1.0, b1 + b2)
    half = np.where(single, 0.0, dt * np.sqrt(np.where(single, 0.0, total)))
    w_side = np.where(single, 0.0, b1 / (2.0 * total))
    w_centre = 1.0 - 2.0 * w_side
    c = np.asarray(centre, dtype=float)
    return np.column_stack([c - half, c, c + half]), np.column_stack([w_side, w_centre, w_side])


def pre_edge_weights(t_point: np.ndarray, dt: float) -> np.ndarray | None:
    """Averaging weights over the points clearly before the edge (at least 1.5
    point intervals before it), or None when there are fewer than 3 of them.

    Their mean is the level the measured input had before the record: one
    sample alone carries the full noise and a quantisation step.
    """
    before = t_point < -1.5 * dt
    count = int(np.count_nonzero(before))
    if count < 3:
        return None
    return before / float(count)
