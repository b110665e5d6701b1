"""State levels of a two-level waveform by the histogram method of IEEE Std 181.

IEEE Std 181 (transitions, pulses and related waveforms) finds the two state
levels of a step or pulse waveform from the histogram of its sample values:
the histogram between the minimum and maximum sample is split at the
midpoint into a lower and an upper half, and the mode of each half is that
state's level ("mode method"). fitkit follows that definition, with two
practical details of its own (common practice, no source):

* the mode is refined to the mean of the samples in the modal bin and its two
  neighbours on each side, so the level is not limited to the bin width;
* when the trace is quantised, bin edges are placed half-way between codes
  and the bin width is a whole number of codes, so no bin is empty by aliasing.

For short records (fewer than ``SHORT_RECORD`` samples) the histogram is too
sparse for a mode, and the levels are the medians of the samples below and
above the midpoint between minimum and maximum instead (the fallback, named
in ``method``).

All values are in the channel's unit (volts for voltage channels).
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import math

import numpy as np

from ..results import json_number

#: Records shorter than this use the median fallback instead of the histogram.
SHORT_RECORD = 64
#: Histograms are built on at most this many samples (an even stride through longer records).
HISTOGRAM_SAMPLES = 1_000_000


@dataclass(frozen=True)
class StateLevels:
    """The low and high state levels of a trace.

    low, high: the two state levels (V), low <= high.
    minimum, maximum: the extreme sample values (V).
    method: plain words on how the levels were found.
    fraction_low, fraction_high: share of the samples lying within a quarter
        of the amplitude (high - low) of each level; both are large for a
        square wave or a settled step, and one is small when the trace spends
        little time at that level (a spike that decays back, for example).
    peak_ratio: how clearly the histogram has two peaks: the smaller of the
        two modal counts divided by the mean count of the bins in the middle
        40 % of the range (inf when those are empty). A decay that never
        settles has no peak of its own in its half, and a small ratio.
        NaN for the short-record fallback.
    """

    low: float
    high: float
    minimum: float
    maximum: float
    method: str
    fraction_low: float = float("nan")
    fraction_high: float = float("nan")
    peak_ratio: float = float("nan")

    @property
    def amplitude(self) -> float:
        """high - low (V)."""
        return self.high - self.low

    @property
    def mid(self) -> float:
        """The 50 % level between the two states (V)."""
        return 0.5 * (self.low + self.high)

    def to_dict(self) -> dict[str, Any]:
        return {"low": json_number(self.low), "high": json_number(self.high),
                "amplitude": json_number(self.amplitude),
                "minimum": json_number(self.minimum), "maximum": json_number(self.maximum),
                "method": self.method,
                "fraction_low": json_number(self.fraction_low),
                "fraction_high": json_number(self.fraction_high),
                "peak_ratio": json_number(self.peak_ratio)}


def _thin(values: np.ndarray, limit: int = HISTOGRAM_SAMPLES) -> np.ndarray:
    """An evenly strided view with at most ``limit`` samples (no copy)."""
    stride = max(1, -(-values.size // limit))
    return values[::stride]


def _bin_edges(lo: float, hi: float, n: int, quantisation_step: float | None) -> np.ndarray:
    """Histogram bin edges between lo and hi; aligned to codes when quantised."""
    target = int(np.clip(np.sqrt(n), 16, 1024))
    if quantisation_step and quantisation_step > 0:
        codes = (hi - lo) / quantisation_step
        width = quantisation_step * max(1, int(np.ceil(codes / target)))
        first = lo - 0.5 * quantisation_step
        count = int(np.ceil((hi + 0.5 * quantisation_step - first) / width)) + 1
        return first + width * np.arange(count + 1)
    return np.linspace(lo, hi, target + 1)


def _refined_mode(sample: np.ndarray, counts: np.ndarray, edges: np.ndarray,
                  first: int, last: int) -> float:
    """Mean of the samples in the modal bin of counts[first:last] and 2 bins either side."""
    k = first + int(np.argmax(counts[first:last]))
    lo_edge = edges[max(k - 2, first)]
    hi_edge = edges[min(k + 3, last)]
    near = sample[(sample >= lo_edge) & (sample <= hi_edge)]
    return float(near.mean()) if near.size else float(0.5 * (edges[k] + edges[k + 1]))


def _occupancy(sample: np.ndarray, level: float, amplitude: float) -> float:
    if amplitude <= 0 or sample.size == 0:
        return float("nan")
    return float(np.count_nonzero(np.abs(sample - level) <= 0.25 * amplitude) / sample.size)


def state_levels(values: np.ndarray, *, quantisation_step: float | None = None) -> StateLevels:
    """Low and high state levels of a trace (V), IEEE Std 181 histogram mode method.

    ``values`` is the whole trace (any length >= 1); NaNs are ignored.
    ``quantisation_step`` (V), when known, aligns the histogram bins to the codes.
    A flat trace gives low == high.
    """
    v = np.asarray(values, dtype=float)
    sample = _thin(v)
    if np.isnan(sample).any():
        sample = sample[~np.isnan(sample)]
    if sample.size == 0:
        nan = float("nan")
        return StateLevels(nan, nan, nan, nan, "no finite samples")
    vmin, vmax = float(np.nanmin(v)), float(np.nanmax(v))  # extremes of the full record
    if vmax <= vmin:
        return StateLevels(vmin, vmax, vmin, vmax, "flat trace: one level", 1.0, 1.0)
    mid = 0.5 * (vmin + vmax)
    peak_ratio = float("nan")
    if sample.size < SHORT_RECORD:
        low = float(np.median(sample[sample <= mid]))
        high = float(np.median(sample[sample > mid]))
        method = f"median of each half (short record of {sample.size} samples, too few for a histogram)"
    else:
        edges = _bin_edges(vmin, vmax, sample.size, quantisation_step)
        counts, edges = np.histogram(sample, bins=edges)
        centres = 0.5 * (edges[:-1] + edges[1:])
        split = int(np.searchsorted(centres, mid))
        split = min(max(split, 1), counts.size - 1)
        low = _refined_mode(sample, counts, edges, 0, split)
        high = _refined_mode(sample, counts, edges, split, counts.size)
        method = f"histogram modes of the lower and upper halves (IEEE Std 181), {counts.size} bins"
        span = vmax - vmin
        middle = counts[(centres > vmin + 0.3 * span) & (centres < vmin + 0.7 * span)]
        smaller_peak = min(counts[:split].max(), counts[split:].max())
        middle_mean = float(middle.mean()) if middle.size else 0.0
        peak_ratio = float(smaller_peak / middle_mean) if middle_mean > 0 else float("inf")
    amplitude = high - low
    return StateLevels(low, high, vmin, vmax, method,
                       _occupancy(sample, low, amplitude), _occupancy(sample, high, amplitude), peak_ratio)


def drifts(t: np.ndarray, y: np.ndarray, tolerance: float) -> bool:
    """True when a straight line through (t in s, y in V) changes by more than ``tolerance`` (V)
    across the samples and its slope stands more than 4 standard errors from zero (a level that
    is still moving, not noise about a level; common practice, no source). False under 3 samples."""
    t = np.asarray(t, dtype=float)
    y = np.asarray(y, dtype=float)
    if y.size < 3:
        return False
    tc = t - t.mean()
    sxx = float(tc @ tc)
    if not sxx > 0:
        return False
    slope = float(tc @ (y - y.mean())) / sxx
    resid = y - y.mean() - slope * tc
    se = math.sqrt(float(resid @ resid) / max(y.size - 2, 1) / sxx)
    return abs(slope) * float(t[-1] - t[0]) > tolerance and abs(slope) > 4 * se
