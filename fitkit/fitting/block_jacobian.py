"""The Jacobian and covariance of a joint fit of many edges, by their block structure.

A joint fit has a few global parameters (the shape, and the gain in
measured-input mode) and, per edge i, a few local ones (``baseline_i``,
``step_i``, ``t0_i``). A local parameter moves the model on its own edge's
points and, through the previous edge's settling tail, on the next edge's
(``t0_i``); nowhere else. So:

* the Jacobian is taken by central differences with the local parameters of
  every other edge perturbed together (edges two apart never share a point:
  Curtis, Powell & Reid, J. Inst. Math. Appl. 13 (1974) 117-119): about
  2 (k + 2 l) model evaluations for k global and l local parameters per edge,
  whatever the number of edges, instead of 2 (k + l m);
* from :data:`SPARSE_FROM_PARAMETERS` parameters on it is kept as a sparse
  matrix (the dense one would hold n times m l numbers, 0.4 GB for 200 edges);
* its covariance ``(J^T J)^-1`` is the block inverse through the Schur
  complement of the local block (a sparse, nearly block-diagonal matrix,
  factorised once): the cost is linear in the edges, plus the dense
  covariance matrix itself (p^2 numbers, 72 MB for 1,000 edges).
"""

from __future__ import annotations

import math
import re
from typing import Callable, Mapping, Sequence

import numpy as np

#: From this many varied parameters on the Jacobian is sparse and the covariance by blocks.
SPARSE_FROM_PARAMETERS = 30

_LOCAL = re.compile(r"^(baseline|step|t0)_(\d+)$")


def edge_of_parameter(names: Sequence[str]) -> list[int | None]:
    """The edge of each per-edge parameter (``baseline_3`` -> 3), None for a global one."""
    out: list[int | None] = []
    for n in names:
        m = _LOCAL.match(n)
        out.append(int(m.group(2)) if m else None)
    return out


def is_sparse(jacobian: object) -> bool:
    """True for a scipy.sparse matrix (told without importing scipy.sparse, slow to import)."""
    return hasattr(jacobian, "tocsr")


def dense(jacobian) -> np.ndarray:
    """The Jacobian as a dense array (a sparse one converted)."""
    return jacobian.toarray() if is_sparse(jacobian) else np.asarray(jacobian)


def weighted(jacobian, w: np.ndarray):
    """Rows of the Jacobian times the weights ``w`` (dense stays dense, sparse stays sparse)."""
    if is_sparse(jacobian):
        from scipy import sparse

        return sparse.csr_array(sparse.diags_array(w) @ jacobian)
    return jacobian * w[:, None]


def by_rows(jacobian):
    """The Jacobian in a form sliced by rows cheaply (a sparse one as CSR, once,
    before :func:`edge_columns` is called edge by edge)."""
    if is_sparse(jacobian) and jacobian.format != "csr":
        from scipy import sparse

        return sparse.csr_array(jacobian)
    return jacobian


def edge_columns(jacobian, lo: int, hi: int) -> tuple[np.ndarray, np.ndarray]:
    """(columns, dense block) of the rows lo:hi of the Jacobian: only the columns
    with a nonzero entry there (a few per edge in a joint fit of many edges)."""
    if not is_sparse(jacobian):
        rows = np.asarray(jacobian[lo:hi])
        cols = np.flatnonzero(np.any(rows != 0, axis=0))
        return cols, rows[:, cols]
    from scipy import sparse

    if jacobian.format != "csr":
        jacobian = sparse.csr_array(jacobian)
    start, stop = jacobian.indptr[lo], jacobian.indptr[hi]
    index, data = jacobian.indices[start:stop], jacobian.data[start:stop]
    cols = np.unique(index)
    row = np.repeat(np.arange(hi - lo), np.diff(jacobian.indptr[lo:hi + 1]))
    block = np.zeros((hi - lo, cols.size))
    block[row, np.searchsorted(cols, index)] = data
    return cols, block


def grouped_jacobian(fun: Callable[[np.ndarray], np.ndarray], theta: np.ndarray, names: Sequence[str],
                     bounds: Sequence[int], rel_step: float = 1e-6,
                     known: Mapping[str, tuple[np.ndarray, np.ndarray]] | None = None):
    """Central-difference Jacobian (n, p) of ``fun`` at ``theta``, the local
    parameters of edges two apart perturbed together (see the module docstring).

    ``bounds`` are the edges' point ranges; a local parameter of edge i is
    read on the points of edges i and i + 1. The same numbers as one column at
    a time (each parameter keeps its own step), in far fewer evaluations.
    ``known``: columns given in closed form, {name: (rows, values)}, taken as
    they are instead of by differences.
    """
    from scipy import sparse

    theta = np.asarray(theta, dtype=float)
    edges = edge_of_parameter(names)
    m = len(bounds) - 1
    slots: dict[int, int] = {}
    groups: dict[tuple, list[int]] = {}
    known = known or {}
    rows, cols, vals = [], [], []
    for j, e in enumerate(edges):
        if names[j] in known:
            where, value = known[names[j]]
            rows.append(np.asarray(where))
            cols.append(np.full(len(where), j))
            vals.append(np.asarray(value, dtype=float))
            continue
        if e is None:
            groups[("global", j)] = [j]
        else:
            slot = slots[e] = slots.get(e, -1) + 1
            groups.setdefault(("local", slot, e % 2), []).append(j)
    steps = rel_step * np.maximum(np.abs(theta), 1e-3)  # as least_squares.numeric_jacobian
    n = int(bounds[-1])
    dense_cols: dict[int, np.ndarray] = {}
    for members in groups.values():
        up, dn = theta.copy(), theta.copy()
        up[members] += steps[members]
        dn[members] -= steps[members]
        diff = np.asarray(fun(up), dtype=float) - np.asarray(fun(dn), dtype=float)
        for j in members:
            e = edges[j]
            if e is None:
                dense_cols[j] = diff / (2.0 * steps[j])
                continue
            lo, hi = int(bounds[e]), int(bounds[min(e + 2, m)])
            part = diff[lo:hi] / (2.0 * steps[j])
            keep = np.flatnonzero(part)
            rows.append(lo + keep)
            cols.append(np.full(keep.size, j))
            vals.append(part[keep])
    p = theta.size
    for j, col in dense_cols.items():
        keep = np.flatnonzero(col)
        rows.append(keep)
        cols.append(np.full(keep.size, j))
        vals.append(col[keep])
    cat = (lambda xs: np.concatenate(xs) if xs else np.zeros(0))
    jac = sparse.csc_array((cat(vals), (cat(rows).astype(np.int64), cat(cols).astype(np.int64))), shape=(n, p))
    return jac if p >= SPARSE_FROM_PARAMETERS else jac.toarray()


def block_covariance(jac_w, names: Sequence[str], s2: float
                     ) -> tuple[np.ndarray, bool, float]:
    """``s2 (J^T J)^-1`` of a sparse weighted Jacobian through the Schur
    complement of its local block: (covariance, singular, condition number).

    Columns are equilibrated first. The condition number is that of the two
    blocks the inverse is made of (the Schur complement of the global
    parameters and the local block's per-edge parts), an estimate of J's own.
    """
    from scipy import sparse

    from .least_squares import SINGULAR_CONDITION

    p = jac_w.shape[1]
    jac_w = sparse.csc_array(jac_w)
    norms = np.sqrt(np.asarray(jac_w.multiply(jac_w).sum(axis=0)).ravel())
    if not np.all(np.isfinite(jac_w.data)) or np.any(norms == 0):
        return np.full((p, p), np.nan), True, math.inf
    scaled = sparse.csc_array(jac_w @ sparse.diags_array(1.0 / norms))
    edges = edge_of_parameter(names)
    glob = np.array([j for j, e in enumerate(edges) if e is None], dtype=int)
    loc = np.array([j for j, e in enumerate(edges) if e is not None], dtype=int)
    g = scaled[:, glob].toarray()
    lmat = sparse.csc_array(scaled[:, loc])
    d = sparse.csc_array(lmat.T @ lmat)
    b = np.asarray(lmat.T @ g)
    try:
        solve = _banded_solver(d)
    except np.linalg.LinAlgError:  # the local block is not positive definite: singular
        return np.full((p, p), np.nan), True, math.inf
    x = solve(b) if glob.size else np.zeros((loc.size, 0))
    schur = g.T @ g - b.T @ x
    d_inv = solve(np.eye(loc.size))
    d_inv = 0.5 * (d_inv + d_inv.T)
    ev_d = _block_eigenvalues(d, [edges[j] for j in loc])
    ev_s = np.linalg.eigvalsh(schur) if glob.size else np.ones(1)
    lo, hi = min(ev_d.min(), ev_s.min()), max(ev_d.max(), ev_s.max())
    cond = math.sqrt(hi / lo) if lo > 0 else math.inf
    if cond > SINGULAR_CONDITION or not np.all(np.isfinite(ev_s)):
        return np.full((p, p), np.nan), True, cond
    s_inv = np.linalg.inv(schur) if glob.size else np.zeros((0, 0))
    cov = np.empty((p, p))
    xs = x @ s_inv
    cov[np.ix_(glob, glob)] = s_inv
    cov[np.ix_(glob, loc)] = -xs.T
    cov[np.ix_(loc, glob)] = -xs
    cov[np.ix_(loc, loc)] = d_inv + xs @ x.T
    cov *= s2 / np.outer(norms, norms)
    return cov, False, cond


def _banded_solver(d) -> Callable[[np.ndarray], np.ndarray]:
    """x -> d^-1 x for the symmetric positive definite local block ``d``, by its
    banded Cholesky factor (the local parameters are ordered edge by edge, so
    its band is a few columns wide); raises LinAlgError when not positive definite."""
    from scipy import linalg, sparse

    coo = sparse.coo_array(d)
    band = int(np.max(np.abs(coo.row - coo.col))) if coo.nnz else 0
    n = d.shape[0]
    upper = np.zeros((band + 1, n))
    keep = coo.col >= coo.row
    upper[band + coo.row[keep] - coo.col[keep], coo.col[keep]] = coo.data[keep]
    factor = linalg.cholesky_banded(upper, lower=False, check_finite=False)
    return lambda rhs: linalg.cho_solve_banded((factor, False), rhs, check_finite=False)


def _block_eigenvalues(d, edge_of_column: Sequence[int]) -> np.ndarray:
    """Eigenvalues of the per-edge diagonal blocks of the local block ``d`` (all
    blocks at once when every edge has the same number of local parameters)."""
    from scipy import sparse

    d = sparse.csr_array(d)
    edges = np.asarray(edge_of_column)
    order = np.argsort(edges, kind="stable")
    counts = np.bincount(edges)
    counts = counts[counts > 0]
    if np.all(counts == counts[0]):
        c = int(counts[0])
        idx = order.reshape(-1, c)
        blocks = np.asarray(d[idx[:, :, None].repeat(c, 2).ravel(), idx[:, None, :].repeat(c, 1).ravel()])
        return np.linalg.eigvalsh(blocks.reshape(-1, c, c)).ravel()
    out = []
    for e in np.unique(edges):
        idx = np.flatnonzero(edges == e)
        out.append(np.linalg.eigvalsh(d[idx][:, idx].toarray()))
    return np.concatenate(out) if out else np.ones(1)
