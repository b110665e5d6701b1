"""Robust noise and quantisation estimates of a trace.

Noise: the standard deviation of white noise on a trace, estimated from the
median absolute deviation (MAD) of its first differences. Differencing removes
the slowly varying signal (levels, exponential settling) and the few large
differences at edges do not move a median. For Gaussian noise the MAD times
1.4826 estimates the standard deviation (Hampel's consistency constant; the
normal distribution's 0.75 quantile is 0.6745 = 1 / 1.4826), and a first
difference of white noise has sqrt(2) times the noise's standard deviation.

Band-limited (correlated) noise has a smaller first-difference spread than its
own spread, so the differencing estimate is low for heavily oversampled noise;
segments therefore also measure the spread of the settled pre-edge baseline
directly (see fitkit.conditioning.segments).

Quantisation: a trace is visibly quantised when its distinct values are far
fewer than its samples and every gap between neighbouring distinct values is a
whole multiple of one step; the step is then reported (V). When the noise is
below the step, the differences are mostly zero and the MAD is zero; the noise
is then reported as the quantisation noise floor q / sqrt(12) (uniform
rounding error of a step q, a standard result for quantisers).
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any

import numpy as np

from ..results import json_number

#: Normal-consistency factor of the median absolute deviation (1 / 0.6745).
MAD_TO_SIGMA = 1.482602218505602
#: Noise estimates use at most this many first differences (from evenly spaced blocks).
NOISE_SAMPLES = 262_144
NOISE_BLOCKS = 8
QUANTISATION_SAMPLES = 200_000


@dataclass(frozen=True)
class NoiseEstimate:
    """Noise of one trace.

    rms: estimated noise standard deviation (V).
    quantisation_step: step between codes (V), or None when not visibly quantised.
    method: plain words on how ``rms`` was obtained.
    below_one_code: the measured noise was under the quantisation floor
        q / sqrt(12), so ``rms`` is that floor (rounding is then not random).
    """

    rms: float
    quantisation_step: float | None
    method: str
    below_one_code: bool = False

    def to_dict(self) -> dict[str, Any]:
        return {"rms": json_number(self.rms), "quantisation_step": json_number(self.quantisation_step),
                "method": self.method}


def robust_sigma(x: np.ndarray) -> float:
    """Standard deviation of Gaussian data from the MAD: 1.4826 * median(|x - median(x)|)."""
    x = np.asarray(x, dtype=float)
    if x.size == 0:
        return float("nan")
    centre = np.median(x)
    return float(MAD_TO_SIGMA * np.median(np.abs(x - centre)))


def quantisation_step(values: np.ndarray) -> float | None:
    """The code step (V) of a visibly quantised trace, or None.

    Looks at up to QUANTISATION_SAMPLES samples from the start of the trace.
    Quantised means: at least three and at most a quarter as many distinct
    values as samples, and 98 % of the gaps between neighbouring distinct values within 2 % of a
    whole multiple of the smallest gap (common practice, no source).
    """
    v = np.asarray(values, dtype=float)[:QUANTISATION_SAMPLES]
    v = v[np.isfinite(v)]
    if v.size < 16:
        return None
    distinct = np.unique(v)
    if distinct.size < 3 or distinct.size > v.size // 4:
        return None  # two values (a clean square wave) show no code step
    gaps = np.diff(distinct)
    scale = max(float(np.max(np.abs(distinct))), float(distinct[-1] - distinct[0]))
    gaps = gaps[gaps > 1e-9 * scale]
    if gaps.size == 0:
        return None
    smallest = float(gaps.min())
    ratio = gaps / smallest
    whole = np.round(ratio)
    if np.mean(np.abs(ratio - whole) <= 0.02) < 0.98:
        return None
    return float(gaps.sum() / whole.sum())


def noise_from_differences(values: np.ndarray) -> float:
    """Noise standard deviation (V) from the MAD of first differences / sqrt(2).

    Long traces are sampled in NOISE_BLOCKS contiguous blocks spread evenly
    over the record, NOISE_SAMPLES differences in all.
    """
    v = np.asarray(values, dtype=float)
    if v.size < 3:
        return float("nan")
    if v.size > NOISE_SAMPLES:
        block = NOISE_SAMPLES // NOISE_BLOCKS
        starts = np.linspace(0, v.size - block - 1, NOISE_BLOCKS).astype(int)
        d = np.concatenate([np.diff(v[s:s + block + 1]) for s in starts])
    else:
        d = np.diff(v)
    d = d[np.isfinite(d)]
    return robust_sigma(d) / math.sqrt(2.0)


def estimate_noise(values: np.ndarray) -> NoiseEstimate:
    """Noise standard deviation and quantisation step of a trace (both V)."""
    q = quantisation_step(values)
    sigma = noise_from_differences(values)
    if q is not None and not (sigma >= q / math.sqrt(12.0)):
        return NoiseEstimate(q / math.sqrt(12.0), q,
                             "quantisation noise floor (step / sqrt 12): the noise is below one code", True)
    return NoiseEstimate(sigma, q, "median absolute deviation of first differences")
