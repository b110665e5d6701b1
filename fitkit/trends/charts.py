"""Control charts for one quantity measured board after board: pure computation, no plotting.

Individuals and moving-range chart (Shewhart), limits from the process: from
the first ``baseline`` boards (phase I), the centre is their mean and the
within-process standard deviation is sigma = MRbar / d2, MRbar being the
mean absolute difference of consecutive values and d2 = 1.128 for ranges of
two (NIST/SEMATECH e-Handbook of Statistical Methods, section 6.3.2.2). The
individuals limits are centre +- 3 sigma = centre +- 2.66 MRbar; the moving
range's upper limit is D4 MRbar = 3.267 MRbar.

EWMA: z_i = lambda x_i + (1 - lambda) z_(i-1), z_0 = centre; it signals when
|z_i - centre| > L sigma sqrt(lambda / (2 - lambda)) (the steady-state
limits; e-Handbook section 6.3.2.4). Defaults lambda = 0.2, L = 3.

Tabular CUSUM: C+_i = max(0, x_i - centre - k sigma + C+_(i-1)),
C-_i = max(0, centre - k sigma - x_i + C-_(i-1)); it signals when either
exceeds h sigma (e-Handbook section 6.3.2.3). Defaults k = 0.5, h = 5.

The EWMA and CUSUM functions take a 1-D series or a 2-D array (one series
per row, for run-length studies) and work along the last axis.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

#: d2 for moving ranges of two consecutive values (e-Handbook 6.3.2.2; 2/sqrt(pi)).
D2 = 1.128
#: D4 for moving ranges of two (upper limit of the moving-range chart, e-Handbook 6.3.2.2).
D4 = 3.267
EWMA_LAMBDA, EWMA_L = 0.2, 3.0
CUSUM_K, CUSUM_H = 0.5, 5.0
#: Fewest boards for a baseline (fewer: the limits are not worth drawing).
MIN_BASELINE = 8


@dataclass(frozen=True)
class ProcessBaseline:
    """Centre and within-process standard deviation from the first boards (units of the quantity)."""

    boards: int
    centre: float
    mean_moving_range: float
    sigma_within: float

    @property
    def individuals_limits(self) -> tuple[float, float]:
        """centre -+ 3 sigma_within (= 2.66 MRbar)."""
        return self.centre - 3 * self.sigma_within, self.centre + 3 * self.sigma_within

    @property
    def moving_range_limit(self) -> float:
        """Upper limit of the moving-range chart, D4 MRbar."""
        return D4 * self.mean_moving_range

    def to_dict(self) -> dict:
        lo, hi = self.individuals_limits
        return {"boards": self.boards, "centre": self.centre, "mean_moving_range": self.mean_moving_range,
                "sigma_within": self.sigma_within, "individuals_limits": [lo, hi],
                "moving_range_upper_limit": self.moving_range_limit}


def moving_ranges(values: np.ndarray) -> np.ndarray:
    """|x_i - x_(i-1)| for i = 1..n-1."""
    return np.abs(np.diff(np.asarray(values, float)))


def process_baseline(values: np.ndarray, boards: int) -> ProcessBaseline:
    """The baseline from the first ``boards`` values (all of them when fewer)."""
    x = np.asarray(values, float)[:boards]
    if len(x) < 2:
        raise ValueError("a baseline needs at least two boards")
    mr = float(np.mean(moving_ranges(x)))
    return ProcessBaseline(len(x), float(np.mean(x)), mr, mr / D2)


def ewma(values: np.ndarray, centre: float, sigma: float, lam: float = EWMA_LAMBDA, width: float = EWMA_L
         ) -> tuple[np.ndarray, float]:
    """The EWMA statistic along the last axis, and its half-width of control (steady state)."""
    x = np.asarray(values, float)
    z = np.empty_like(x)
    previous = np.full(x.shape[:-1], centre, dtype=float)
    for i in range(x.shape[-1]):
        previous = lam * x[..., i] + (1 - lam) * previous
        z[..., i] = previous
    return z, width * sigma * np.sqrt(lam / (2 - lam))


def cusum(values: np.ndarray, centre: float, sigma: float, k: float = CUSUM_K) -> tuple[np.ndarray, np.ndarray]:
    """Upper and lower tabular CUSUM along the last axis (units of the quantity)."""
    x = np.asarray(values, float)
    upper, lower = np.empty_like(x), np.empty_like(x)
    hi = np.zeros(x.shape[:-1])
    lo = np.zeros(x.shape[:-1])
    slack = k * sigma
    for i in range(x.shape[-1]):
        hi = np.maximum(0.0, x[..., i] - centre - slack + hi)
        lo = np.maximum(0.0, centre - slack - x[..., i] + lo)
        upper[..., i], lower[..., i] = hi, lo
    return upper, lower


def first_signal(flags: np.ndarray) -> np.ndarray | int | None:
    """Index of the first True along the last axis (1-D: an int or None; 2-D: -1 where none)."""
    flags = np.asarray(flags, bool)
    if flags.ndim == 1:
        hits = np.flatnonzero(flags)
        return int(hits[0]) if len(hits) else None
    return np.where(flags.any(axis=-1), flags.argmax(axis=-1), -1)


def ewma_signals(values: np.ndarray, centre: float, sigma: float, lam: float = EWMA_LAMBDA,
                 width: float = EWMA_L) -> np.ndarray:
    """True where the EWMA is outside its limits."""
    z, half_width = ewma(values, centre, sigma, lam, width)
    return np.abs(z - centre) > half_width


def cusum_signals(values: np.ndarray, centre: float, sigma: float, k: float = CUSUM_K,
                  h: float = CUSUM_H) -> np.ndarray:
    """True where either CUSUM exceeds h sigma."""
    upper, lower = cusum(values, centre, sigma, k)
    return (upper > h * sigma) | (lower > h * sigma)
