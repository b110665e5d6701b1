"""Capability against the design tolerance, the drift projection, and repeatability.

Capability (ISO 22514-2 definitions; also NIST/SEMATECH e-Handbook section 6.1.6):
Cpk = min(USL - mean, mean - LSL) / (3 sigma_within), with sigma_within
from the average moving range (MRbar / d2, the short-term spread of the
process); Ppk is the same with the overall sample standard deviation (the
long-term spread, drifts included). Cp and Pp are (USL - LSL) / (6 sigma).

Projection: a straight line fitted by least squares to the latest boards'
values against board number and against capture time; when its slope is
significant (|slope| > 2 standard errors) and heads for a limit, the number
of boards (and the time) until the line reaches that limit.

Repeatability: for a board captured n >= 2 times, with values x_j and
standard uncertainties u_j (from each 95 % interval: its width / (2 x 1.96)),
chi2 = sum (x_j - xw)^2 / u_j^2 about the weighted mean xw has n - 1 degrees
of freedom when the scatter between repeats is what the intervals claim. The
sum over boards is compared with the chi-square distribution; a ratio
chi2 / dof well above 1 says the repeats scatter more than their intervals
allow: something the model does not describe (fixture contact, drift during
the test, an interval too narrow).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from .charts import D2, moving_ranges

Z95 = 1.959964  # two-sided 95 % point of the normal distribution


def capability_index(mean: float, sigma: float, low: float | None, high: float | None) -> float | None:
    """min(high - mean, mean - low) / (3 sigma) over the limits given (None without limits or sigma)."""
    sides = [(high - mean) if high is not None else None, (mean - low) if low is not None else None]
    sides = [s for s in sides if s is not None]
    if not sides or not sigma > 0:
        return None
    return min(sides) / (3.0 * sigma)


def potential_index(sigma: float, low: float | None, high: float | None) -> float | None:
    """(high - low) / (6 sigma): Cp or Pp (None without both limits)."""
    if low is None or high is None or not sigma > 0:
        return None
    return (high - low) / (6.0 * sigma)


@dataclass(frozen=True)
class Capability:
    """Cp, Cpk (within-process sigma) and Pp, Ppk (overall sigma) of some boards against [low, high]."""

    boards: int
    mean: float
    sigma_within: float
    sigma_overall: float
    cp: float | None
    cpk: float | None
    pp: float | None
    ppk: float | None

    def to_dict(self) -> dict:
        return dict(self.__dict__)


def capability(values: np.ndarray, low: float | None, high: float | None) -> Capability | None:
    """Capability of these values (board order) against the limits; None with fewer than 3 values."""
    x = np.asarray(values, float)
    if len(x) < 3:
        return None
    mean = float(np.mean(x))
    within = float(np.mean(moving_ranges(x))) / D2
    overall = float(np.std(x, ddof=1))
    return Capability(len(x), mean, within, overall, potential_index(within, low, high),
                      capability_index(mean, within, low, high), potential_index(overall, low, high),
                      capability_index(mean, overall, low, high))


@dataclass(frozen=True)
class Projection:
    """Where the latest boards' trend line is heading.

    slope_per_board (+- its standard error), slope_per_hour (None without times),
    limit: the limit it heads for (None when the slope is not significant),
    boards_to_limit, hours_to_limit: how far away at the current rate (0 when already beyond).
    """

    boards: int
    slope_per_board: float
    slope_stderr: float
    slope_per_hour: float | None
    limit: float | None
    boards_to_limit: float | None
    hours_to_limit: float | None

    @property
    def significant(self) -> bool:
        return abs(self.slope_per_board) > 2 * self.slope_stderr

    def to_dict(self) -> dict:
        return dict(self.__dict__, significant=self.significant)


def _line(x: np.ndarray, y: np.ndarray) -> tuple[float, float, float]:
    """Least-squares slope, its standard error and the line's value at x[-1]."""
    xc = x - x.mean()
    sxx = float(xc @ xc)
    slope = float(xc @ (y - y.mean())) / sxx
    resid = y - y.mean() - slope * xc
    stderr = math.sqrt(float(resid @ resid) / max(1, len(x) - 2) / sxx)
    return slope, stderr, float(y.mean() + slope * xc[-1])


def projection(values: np.ndarray, hours: np.ndarray | None, low: float | None, high: float | None
               ) -> Projection | None:
    """Trend line of the values (board order) and when it reaches a limit; None with fewer than 5 values.

    hours: capture times in hours since any origin (None or NaN entries: no time projection).
    """
    y = np.asarray(values, float)
    n = len(y)
    if n < 5:
        return None
    slope, stderr, now = _line(np.arange(n, dtype=float), y)
    per_hour = None
    if hours is not None:
        h = np.asarray(hours, float)
        if np.all(np.isfinite(h)) and np.ptp(h) > 0:
            per_hour = _line(h, y)[0]
    limit = boards_to = hours_to = None
    if abs(slope) > 2 * stderr:
        limit = high if slope > 0 else low
        if limit is not None:
            boards_to = max(0.0, (limit - now) / slope)
            if per_hour is not None and per_hour * slope > 0:
                hours_to = max(0.0, (limit - now) / per_hour)
    return Projection(n, slope, stderr, per_hour, limit, boards_to, hours_to)


@dataclass(frozen=True)
class Repeatability:
    """Scatter of repeated captures of the same boards against their own intervals."""

    boards: int
    captures: int
    chi_square: float
    degrees_of_freedom: int
    p_value: float

    @property
    def ratio(self) -> float:
        """chi2 / dof: about 1 when the repeats scatter as their intervals say."""
        return self.chi_square / self.degrees_of_freedom

    def to_dict(self) -> dict:
        return dict(self.__dict__, ratio=self.ratio)


def repeatability(groups: list[tuple[np.ndarray, np.ndarray]]) -> Repeatability | None:
    """Chi-square of repeats: groups of (values, standard uncertainties), one group per board.

    Groups with fewer than two usable captures are skipped; None when none is left.
    """
    from scipy.special import chdtrc  # chi-square survival function (lighter than scipy.stats)
    total, dof, boards, captures = 0.0, 0, 0, 0
    for values, uncertainties in groups:
        x, u = np.asarray(values, float), np.asarray(uncertainties, float)
        keep = np.isfinite(x) & np.isfinite(u) & (u > 0)
        x, u = x[keep], u[keep]
        if len(x) < 2:
            continue
        w = 1.0 / u ** 2
        mean = float(np.sum(w * x) / np.sum(w))
        total += float(np.sum(w * (x - mean) ** 2))
        dof += len(x) - 1
        boards += 1
        captures += len(x)
    if dof == 0:
        return None
    return Repeatability(boards, captures, total, dof, float(chdtrc(dof, total)))


def standard_uncertainty(ci_low: np.ndarray, ci_high: np.ndarray) -> np.ndarray:
    """Standard uncertainty from a 95 % interval: its width / (2 x 1.96)."""
    return (np.asarray(ci_high, float) - np.asarray(ci_low, float)) / (2 * Z95)
