"""Two small primitives every layer above the engine shares: the corrected
Akaike criterion and "does every segment carry a measured input step".

One home for each, so the board check, the part fits and the engine count
parameters the same way and decide measured-input mode the same way.
"""

from __future__ import annotations

import math
from typing import Sequence

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


def has_measured_input(segments: Sequence[StepSegment]) -> bool:
    """True when every segment carries an input channel with a non-zero measured step."""
    return bool(segments) and all(
        s.input is not None and s.input_before is not None and s.input_after is not None
        and s.input_after != s.input_before for s in segments)
