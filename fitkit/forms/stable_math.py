"""Numerically stable building blocks for step responses with close poles.

Two helpers, both vectorised over time:

``relative_decay(x)``
    (1 - exp(-x)) / x, equal to 1 at x = 0, computed with expm1 so it keeps
    full relative precision for tiny x (no 0/0, no cancellation).

``exp_divided_difference(nodes)``
    The divided difference exp[z0, z1, ..., zk] of the exponential function
    over k + 1 nodes (arrays of equal shape, one per node), valid when nodes
    coincide or nearly coincide.

Why divided differences: the unit-step response of n real poles,
H(s) = 1 / prod(1 + s tau_i), is (partial fractions, any control text)

    y(t) = prod_i (t / tau_i) * exp[0, -t/tau_1, ..., -t/tau_n]

(the inverse Laplace transform of 1/prod(s + p_i) is the divided difference
of exp(-p t) over the poles, up to sign). The usual partial-fraction sum
divides by (tau_i - tau_j) and loses all precision as two poles approach each
other. Here each divided difference over a group of nodes whose spread is at
most ``TAYLOR_SPREAD`` is summed from its Taylor series about the group's
centre,

    exp[w + c] = exp(c) * sum_m h_m(w) / (k + m)!,

with h_m the complete homogeneous symmetric polynomial of degree m in the
shifted nodes w (a standard identity for divided differences of a power
series; summed via Opitz's bidiagonal matrix); all terms are bounded, so
there is no cancellation. Wider groups use
the defining recursion exp[z_i..z_j] = (exp[z_i+1..z_j] - exp[z_i..z_j-1]) /
(z_j - z_i), which loses at most a small factor per level once the spread
exceeds ``TAYLOR_SPREAD``; sub-groups are evaluated only where a wider
parent group needs them. This is the approach of the Taylor / scaling
literature on divided differences of the exponential (McCurdy, Ng and
Parlett, Math. Comp., 1984; citation details from memory), written here in a simple form for at
most six nodes.
"""

from __future__ import annotations

import math

import numpy as np

#: Node groups with spread up to this use the Taylor series.
TAYLOR_SPREAD = 2.0


def relative_decay(x: np.ndarray | float) -> np.ndarray:
    """(1 - exp(-x)) / x for x >= 0 (1 at x = 0), full precision for small x."""
    x = np.asarray(x, dtype=float)
    safe = np.where(x == 0.0, 1.0, x)
    return np.where(x == 0.0, 1.0, -np.expm1(-safe) / safe)


def _taylor_terms(spread: float) -> int:
    """Taylor terms needed for nodes within ``spread``: (spread/2)^m / m! below 1e-18."""
    half, term, m = 0.5 * spread, 1.0, 0
    while term * math.exp(half) > 1e-18:
        m += 1
        term *= half / m
    return max(m, 1)


def _taylor_divided_difference(nodes: np.ndarray) -> np.ndarray:
    """exp[z0..zk] by the Taylor series about the mid-range of the nodes.

    ``nodes`` has shape (k + 1, N). Accurate when max(z) - min(z) <=
    TAYLOR_SPREAD (checked by the caller). The series is summed as the first
    row of exp(W) for the bidiagonal matrix W with the shifted nodes on its
    diagonal and ones above it (Opitz's theorem, from memory:
    exp(W)[0, k] = exp[w0..wk]); the row
    e0 W^m / m! is updated in place, two array operations per term.
    """
    k = nodes.shape[0] - 1
    centre = 0.5 * (nodes[0] + nodes[-1])  # nodes are sorted along axis 0
    shifted = nodes - centre
    terms = k + _taylor_terms(float(np.max(nodes[0] - nodes[-1], initial=0.0)))
    row = np.zeros_like(shifted)
    row[0] = 1.0
    total = np.zeros_like(centre) if k > 0 else np.ones_like(centre)
    for m in range(1, terms + 1):
        nxt = row * shifted
        nxt[1:] += row[:-1]
        row = nxt / m
        total += row[k]
    return np.exp(centre) * total


def _divided_difference_sorted(nodes: np.ndarray) -> np.ndarray:
    """exp[z0..zk] for nodes sorted descending along axis 0, shape (k + 1, N).

    A top-down pass marks, for each contiguous node group (i, j), the
    elements whose value is actually needed (a group is needed only where its
    parent is too wide for the Taylor series); a bottom-up pass then fills
    table[(i, j)] = exp[z_i..z_j] on those elements only, by Taylor series
    where the group is narrow and by the recursion where it is wide.
    """
    count = nodes.shape[0]
    top = (0, count - 1)
    need: dict[tuple[int, int], np.ndarray] = {top: np.ones(nodes.shape[1], dtype=bool)}
    narrow: dict[tuple[int, int], np.ndarray] = {}
    for length in range(count, 1, -1):
        for i in range(count - length + 1):
            j = i + length - 1
            if (i, j) not in need:
                continue
            narrow[(i, j)] = nodes[i] - nodes[j] <= TAYLOR_SPREAD
            wide_needed = need[(i, j)] & ~narrow[(i, j)]
            if np.any(wide_needed):
                for child in ((i + 1, j), (i, j - 1)):
                    need[child] = need[child] | wide_needed if child in need else wide_needed
    table: dict[tuple[int, int], np.ndarray] = {}
    for length in range(1, count + 1):
        for i in range(count - length + 1):
            j = i + length - 1
            if (i, j) not in need:
                continue
            mask = need[(i, j)]
            if length == 1:
                table[(i, j)] = np.exp(nodes[i])
                continue
            wide = mask & ~narrow[(i, j)]
            if np.any(wide):  # whole-array arithmetic; entries outside ``wide`` are replaced below
                gap = np.where(wide, nodes[j] - nodes[i], -1.0)
                value = np.where(wide, (table[(i + 1, j)] - table[(i, j - 1)]) / gap, 0.0)
            else:
                value = np.zeros(nodes.shape[1])
            taylor = mask & narrow[(i, j)]
            if np.any(taylor):
                value[taylor] = _taylor_divided_difference(nodes[i:j + 1, taylor])
            table[(i, j)] = value
    return table[top]


def exp_divided_difference(nodes: list[np.ndarray], presorted: bool = False) -> np.ndarray:
    """Divided difference of exp over the nodes (order does not matter).

    ``nodes`` is a list of k + 1 arrays of equal shape (or scalars); the result
    has that shape. Stable for coincident and nearly coincident nodes.
    ``presorted=True`` promises the nodes are already in descending order
    element by element (saves a sort).
    """
    arrays = np.broadcast_arrays(*[np.asarray(z, dtype=float) for z in nodes])
    shape = arrays[0].shape
    stacked = np.stack([a.ravel() for a in arrays])
    if not presorted:
        stacked = np.sort(stacked, axis=0)[::-1]
    return _divided_difference_sorted(np.ascontiguousarray(stacked)).reshape(shape)
