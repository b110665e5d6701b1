"""Small primitives every layer above the engine shares: the corrected Akaike
criterion, the residual sum of a fit over its samples, and "does every segment
carry a measured input step".

One home for each, so the board check, the part fits and the engine count
parameters the same way (the count itself is the engine's,
FitResult.diagnostics.n_parameters) and decide measured-input mode the same way.
"""

from __future__ import annotations

import math
from typing import Sequence

import numpy as np

from ..conditioning.segment import StepSegment


def corrected_aic(rss: float, n: int, n_parameters: int, variance_inflation: float = 1.0) -> float:
    """AICc for Gaussian errors of unknown variance (lower is better).

    rss: residual sum of squares (any consistent unit); n: samples;
    n_parameters: fitted parameters (the noise variance is added here, k = p + 1).
    AIC = n ln(RSS/n) / variance_inflation + 2k, plus the small-sample term
    2k(k+1)/(n-k-1) (Hurvich and Tsai, Biometrika 76 (1989) 297-307).
    ``variance_inflation`` (n / effective samples) keeps correlated residuals
    from making noise look like evidence. Infinite when undefined.
    """
    k = n_parameters + 1
    if n - k - 1 <= 0 or not (rss > 0) or not math.isfinite(rss):
        return math.inf
    return n * math.log(rss / n) / variance_inflation + 2 * k + 2 * k * (k + 1) / (n - k - 1)


def residual_sum(result) -> tuple[float, int]:
    """(residual sum of squares V^2, samples) over a FitResult's fitted segments, every
    sample counted once (not the engine's binned points): what callers that score
    several fits of the same segments against each other compare."""
    rss = float(sum(np.sum((s.data - s.fitted) ** 2) for s in result.segments))
    return rss, int(sum(s.data.size for s in result.segments))


def has_measured_input(segments: Sequence[StepSegment]) -> bool:
    """True when every segment carries an input channel with a non-zero measured step."""
    return bool(segments) and all(
        s.input is not None and s.input_before is not None and s.input_after is not None
        and s.input_after != s.input_before for s in segments)
