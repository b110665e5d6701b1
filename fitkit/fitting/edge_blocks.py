"""The Jacobian's rows edge by edge, laid side by side for sums over the edges.

The correlated-residual correction (:mod:`.uncertainty`) needs, for every
edge, the product of the noise's Toeplitz covariance with the edge's own
block of the Jacobian (the rows of that edge, the few columns that move it)
and lagged products of such blocks, summed over the edges. Done edge by edge,
a square wave of hundreds of edges spends its time in hundreds of small FFT
calls. Here the blocks of edges of similar length are padded to one length
and stacked, (length, edges, columns), so that each product is one FFT call
over every edge of the batch.

Zero padding changes nothing: a padded row of a block is zero, so the
Toeplitz product of the padded block agrees with the edge's own on the edge's
rows (its values on the padded rows are cut off), and a padded column (an
edge moved by fewer columns than the widest) is zero throughout.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Sequence

import numpy as np

from .block_jacobian import by_rows, edge_columns

#: Edges are batched while the padded batch holds at most this multiple of its rows.
PADDING_ALLOWANCE = 1.5


@dataclass(frozen=True)
class EdgeBatch:
    """Edges of similar length, their Jacobian blocks padded and stacked.

    blocks: (length, edges, width) rows of each edge's block, zero-padded.
    columns: (edges, width) the Jacobian column of each block column (0 where padded).
    used: (edges, width) True where a block column is a real one.
    lengths: (edges,) the rows of each edge.
    """

    blocks: np.ndarray
    columns: np.ndarray
    used: np.ndarray
    lengths: np.ndarray

    def toeplitz_times(self, gamma: np.ndarray) -> np.ndarray:
        """Sigma_e @ block_e for every edge, Sigma_e the symmetric Toeplitz
        matrix of ``gamma`` (lags 0, 1, ...; zero beyond its end) on the edge's
        rows: (length, edges, width), zero on padded rows. By FFT over a
        circulant embedding (Golub & Van Loan, Matrix Computations, 4th ed.,
        section 4.8, from memory)."""
        length = self.blocks.shape[0]
        col = np.zeros(length)
        col[:min(gamma.size, length)] = gamma[:length]
        size = 1 << int(math.ceil(math.log2(max(2 * length, 2))))
        circulant = np.zeros(size)
        circulant[:length] = col
        circulant[size - length + 1:] = col[1:][::-1]
        flat = self.blocks.reshape(length, -1)
        out = np.fft.irfft(np.fft.rfft(circulant)[:, None] * np.fft.rfft(flat, size, axis=0), size, axis=0)
        out = out[:length].reshape(self.blocks.shape)
        out[np.arange(length)[:, None] >= self.lengths[None, :]] = 0.0
        return out

    def times_blocks(self, matrix: np.ndarray) -> np.ndarray:
        """block_e @ matrix[cols_e, cols_e] for every edge: (length, edges, width)."""
        sub = matrix[self.columns[:, :, None], self.columns[:, None, :]]
        sub = sub * (self.used[:, :, None] & self.used[:, None, :])
        return np.einsum("lei,eij->lej", self.blocks, sub)

    def add_inner_products(self, other: np.ndarray, into: np.ndarray) -> None:
        """into[cols_e, cols_e] += block_e^T other_e for every edge (``into`` is (p, p))."""
        inner = np.einsum("lei,lej->eij", self.blocks, other)
        inner = inner * (self.used[:, :, None] & self.used[:, None, :])
        np.add.at(into, (self.columns[:, :, None], self.columns[:, None, :]), inner)

    def hat_lag_sums(self, bread: np.ndarray, lags: int) -> np.ndarray:
        """sum over this batch's edges and rows t of P[t, t + k], k = 0..lags, for
        the hat matrix P = J bread J^T within each edge (rows of one edge only)."""
        u = self.times_blocks(bread)
        length = self.blocks.shape[0]
        return np.array([float(np.einsum("lej,lej->", u[:length - k], self.blocks[k:])) if k < length else 0.0
                         for k in range(lags + 1)])

    def flat(self, stacked: np.ndarray) -> np.ndarray:
        """A (length, edges, width) array as (length, edges * width) columns."""
        return stacked.reshape(stacked.shape[0], -1)


def edge_batches(jacobian, bounds: Sequence[int]) -> list[EdgeBatch]:
    """The edges' Jacobian blocks (rows bounds[i]:bounds[i+1]) in batches of
    similar length (padded rows at most :data:`PADDING_ALLOWANCE` of the rows)."""
    jacobian = by_rows(jacobian)
    pieces = [edge_columns(jacobian, int(lo), int(hi)) for lo, hi in zip(bounds[:-1], bounds[1:])]
    order = sorted(range(len(pieces)), key=lambda i: -pieces[i][1].shape[0])
    batches: list[EdgeBatch] = []
    group: list[int] = []
    rows = 0
    for i in order:
        length = pieces[i][1].shape[0]
        longest = pieces[group[0]][1].shape[0] if group else length
        if group and longest * (len(group) + 1) > PADDING_ALLOWANCE * (rows + length):
            batches.append(_batch([pieces[k] for k in group]))
            group, rows = [], 0
        group.append(i)
        rows += length
    if group:
        batches.append(_batch([pieces[k] for k in group]))
    return batches


def _batch(pieces: list[tuple[np.ndarray, np.ndarray]]) -> EdgeBatch:
    length = max(j.shape[0] for _, j in pieces)
    width = max(max(j.shape[1] for _, j in pieces), 1)
    blocks = np.zeros((length, len(pieces), width))
    columns = np.zeros((len(pieces), width), dtype=int)
    used = np.zeros((len(pieces), width), dtype=bool)
    for e, (cols, j) in enumerate(pieces):
        blocks[:j.shape[0], e, :j.shape[1]] = j
        columns[e, :cols.size] = cols
        used[e, :cols.size] = True
    return EdgeBatch(blocks, columns, used, np.array([j.shape[0] for _, j in pieces]))
