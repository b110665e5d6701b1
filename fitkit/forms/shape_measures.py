"""Rough, noise-tolerant measurements of a normalised response, for starting guesses.

The forms' ``guess`` functions need a few numbers read off the data: when the
response crosses given levels (10 %, 63 %, 90 %), how far it overshoots and
when, and the ringing period. These are read from a lightly smoothed copy of
the response on a time axis relative to the edge (seconds). They only seed
the fit, so robustness matters more than precision.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from .base import running_mean


def after_edge(t_rel: np.ndarray, y_norm: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Samples after the edge, with a running mean of ~1/200 of their number."""
    t_rel = np.asarray(t_rel, dtype=float)
    y_norm = np.asarray(y_norm, dtype=float)
    after = t_rel > 0
    t, y = t_rel[after], y_norm[after]
    k = max(1, t.size // 200)
    if k > 1:
        y = running_mean(y, k)
    return t, y


def noise_level(y: np.ndarray) -> float:
    """Noise standard deviation of a normalised trace for starting guesses: the one
    estimator (fitkit.conditioning.noise.noise_from_differences), 0.0 where it has no
    answer (fewer than three samples), so a guess's noise floor stays a number."""
    from ..conditioning.noise import noise_from_differences
    sigma = noise_from_differences(y)
    return sigma if math.isfinite(sigma) else 0.0


def crossing_time(t: np.ndarray, y: np.ndarray, level: float, rising: bool = True) -> float:
    """First time (s) y reaches ``level`` (from below if rising), linearly interpolated; nan if never."""
    hit = np.nonzero(y >= level if rising else y <= level)[0]
    if hit.size == 0:
        return math.nan
    k = hit[0]
    if k == 0:
        return float(t[0])
    y0, y1 = y[k - 1], y[k]
    frac = 0.0 if y1 == y0 else (level - y0) / (y1 - y0)
    return float(t[k - 1] + frac * (t[k] - t[k - 1]))


@dataclass(frozen=True)
class ResponseShape:
    """What a normalised low-pass-like response looks like (times in seconds after the edge).

    t10, t63, t90: first crossings of 10 %, 63.2 % and 90 % (nan when not reached).
    overshoot: peak above the final level, as a fraction (0 when none is seen).
    peak_time: time of that peak (nan when no overshoot).
    ringing_period: period of oscillation about the final level (nan when
        fewer than two crossings rise above the noise).
    ringing_q: Q from the logarithmic decrement of successive half-cycle
        peaks (nan when fewer than three clear half cycles). Unlike the
        overshoot it is not biased by the light smoothing, which scales all
        peaks of one frequency alike.
    window: length of the post-edge record.
    """

    t10: float
    t63: float
    t90: float
    overshoot: float
    peak_time: float
    ringing_period: float
    ringing_q: float
    window: float

    @property
    def time_scale(self) -> float:
        """A usable time scale: t63, else a fifth of the window."""
        if math.isfinite(self.t63) and self.t63 > 0:
            return self.t63
        return self.window / 5.0


def measure_response(t_rel: np.ndarray, y_norm: np.ndarray) -> ResponseShape:
    """Read levels, overshoot and ringing off a response normalised to 0 -> 1."""
    t, y = after_edge(t_rel, y_norm)
    if t.size < 3:
        window = float(max(np.max(t_rel) if np.size(t_rel) else 1.0, 1e-30))
        return ResponseShape(math.nan, math.nan, math.nan, 0.0, math.nan, math.nan, math.nan, window)
    window = float(t[-1])
    noise = noise_level(np.asarray(y_norm, dtype=float)[np.asarray(t_rel) > 0])
    threshold = max(3.0 * noise, 0.01)
    k_peak = int(np.argmax(y))
    overshoot = float(y[k_peak] - 1.0)
    if overshoot <= threshold:
        overshoot, peak_time = 0.0, math.nan
    else:
        peak_time = float(t[k_peak])
    # crossings of the final level with hysteresis (+-threshold), to ignore noise
    e = y - 1.0
    state = np.where(e > threshold, 1, np.where(e < -threshold, -1, 0))
    decided = np.nonzero(state)[0]
    changes = decided[1:][np.diff(state[decided]) != 0]
    crossings = t[changes]
    period = 2.0 * float(np.median(np.diff(crossings))) if crossings.size >= 2 else math.nan
    ringing_q = _decrement_q(np.abs(e), changes, threshold)
    return ResponseShape(
        t10=crossing_time(t, y, 0.1), t63=crossing_time(t, y, 1.0 - math.exp(-1.0)),
        t90=crossing_time(t, y, 0.9), overshoot=overshoot, peak_time=peak_time,
        ringing_period=period, ringing_q=ringing_q, window=window,
    )


def _decrement_q(magnitude: np.ndarray, changes: np.ndarray, threshold: float) -> float:
    """Q from the median log decrement of half-cycle peaks |y - 1| between crossings.

    Per half cycle the envelope falls by delta = pi zeta / sqrt(1 - zeta^2)
    (logarithmic decrement, Ogata, *Modern Control Engineering*,
    transient-response chapter, from memory; taken here per half period),
    so zeta = delta / sqrt(pi^2 + delta^2).
    """
    if changes.size < 3:
        return math.nan
    peaks = np.array([magnitude[a:b].max() for a, b in zip(changes[:-1], changes[1:])])
    peaks = peaks[peaks > 3.0 * threshold]
    if peaks.size < 3:
        return math.nan
    delta = float(np.median(np.log(peaks[:-1] / peaks[1:])))
    if delta <= 0:
        return math.nan
    zeta = delta / math.sqrt(math.pi ** 2 + delta ** 2)
    return 1.0 / (2.0 * zeta)


def decay_time_scale(t_rel: np.ndarray, y_norm: np.ndarray) -> float:
    """Time (s) for a response that jumps to 1 and decays to 0 to fall to 1/e; window/5 if never."""
    t, y = after_edge(t_rel, y_norm)
    if t.size < 3:
        return float(max(np.max(t_rel) if np.size(t_rel) else 1.0, 1e-30))
    crossing = crossing_time(t, y, math.exp(-1.0), rising=False)
    if math.isfinite(crossing) and crossing > 0:
        return crossing
    return float(t[-1] / 5.0)
