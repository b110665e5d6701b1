"""Model-free step-response metrics of one segment, with their definitions.

All metrics work on the normalised response ``r(t) = (y(t) - baseline) / step``
where ``step`` is the segment's ``step_size`` (the 100 % of the step: final -
baseline, or the input's step for a response that returns to its baseline).
Times are in seconds measured from the edge time (the input's 50 % crossing);
crossing instants are linearly interpolated between the two bracketing
samples (as IEEE Std 181 does for reference level instants).

Definitions (a falling output is handled as a rising one after normalising):

* reference levels: low and high reference levels, by default 10 % and 90 %
  of the step above the baseline (IEEE Std 181 default reference levels);
* rise time (output rising) or fall time (output falling): high reference
  level instant minus low reference level instant of the transition, where
  the high instant is the first crossing of the high level after the edge and
  the low instant the last crossing of the low level before it (IEEE Std 181
  transition duration). Control textbooks (Ogata; Dorf & Bishop) and
  python-control's ``step_info`` take the first crossing of each level, which
  is the same for a response that does not dip back below 10 %, and
  ``step_info`` does not interpolate (it reports sample times);
* delay: from the edge time to the output's first 50 % crossing (IEEE Std 181
  delay between the input's and the output's mid reference level instants);
  not defined when the edges were found on the output itself;
* overshoot: (largest normalised value after the edge - 1) x 100 %, zero when
  the response never exceeds its final level (IEEE Std 181 post-transition
  overshoot in % of the amplitude; the textbook percent overshoot);
* undershoot: how far the response drops back below its final level after
  first reaching the high reference level, in % of the step (IEEE Std 181
  post-transition undershoot);
* preshoot: how far the response first moves the wrong way, below the
  baseline, before its 50 % crossing, in % of the step (python-control's
  ``step_info`` calls this "undershoot");
* peak value and peak time: the largest value and its time after the edge;
  the peak time is only given when there is an overshoot;
* settling time: from the edge to the instant after which the response stays
  within +/- band (2 % by default) of the step around its final level, on
  the trace averaged over (6 sigma / band)^2 samples so that its noise fills
  at most half the band (not measured when that needs more than a quarter of
  the window; common practice, no source) (the
  control-textbook convention; IEEE Std 181 counts settling from the 50 %
  instant instead, from memory);
* decay time (responses that return to their baseline only): from the first
  time the excursion falls to 90 % of its peak to the first time it falls to
  10 %, after the peak; a first-order high-pass gives tau ln 9, like the rise
  of a first-order low-pass;
* final value: the segment's final level (V).

With noise above 0.2 % of the step the trace is first smoothed with a centred
moving average over a fifth of the samples up to its first 50 % crossing (at
most 101 samples), so that noise peaks are not taken for overshoot or late
band exits. Overshoot, undershoot and preshoot no larger than the largest
excursion noise alone would give, taken as sigma (sqrt(2 ln N) + 1.5) for N
samples of Gaussian noise of standard deviation sigma (sqrt(2 ln N) is the
usual extreme-value location of the largest of N; the 1.5 sigma margin is
about six widths of its spread), are reported as 0, and the peak time only
for an overshoot above that and above 0.1 % (common practice, no source).
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any

import numpy as np

from ..results import json_number
from .segment import StepSegment


@dataclass(frozen=True)
class StepMetrics:
    """Model-free metrics of one segment (definitions in the module docstring).

    Times in seconds (relative to the edge for delay, peak and settling time),
    levels in volts, overshoot/undershoot/preshoot in % of the step. A metric
    that is not defined or cannot be measured is None.
    """

    edge_time: float
    direction: int
    response: str
    baseline: float
    final_value: float
    step: float
    step_source: str
    reference_levels: tuple[float, float]
    settling_band: float
    rise_time: float | None
    fall_time: float | None
    delay: float | None
    overshoot_percent: float | None
    undershoot_percent: float | None
    preshoot_percent: float | None
    peak_value: float | None
    peak_time: float | None
    settling_time: float | None
    decay_time: float | None
    samples_across_transition: float | None

    @property
    def transition_time(self) -> float | None:
        """The rise time, fall time or decay time, whichever this response has (s)."""
        for value in (self.rise_time, self.fall_time, self.decay_time):
            if value is not None:
                return value
        return None

    def to_dict(self) -> dict[str, Any]:
        return {
            "edge_time": json_number(self.edge_time), "direction": self.direction,
            "response": self.response, "baseline": json_number(self.baseline),
            "final_value": json_number(self.final_value), "step": json_number(self.step),
            "step_source": self.step_source,
            "reference_levels": [self.reference_levels[0], self.reference_levels[1]],
            "settling_band": self.settling_band,
            "rise_time": json_number(self.rise_time), "fall_time": json_number(self.fall_time),
            "delay": json_number(self.delay),
            "overshoot_percent": json_number(self.overshoot_percent),
            "undershoot_percent": json_number(self.undershoot_percent),
            "preshoot_percent": json_number(self.preshoot_percent),
            "peak_value": json_number(self.peak_value), "peak_time": json_number(self.peak_time),
            "settling_time": json_number(self.settling_time),
            "decay_time": json_number(self.decay_time),
            "samples_across_transition": json_number(self.samples_across_transition),
        }


def _first_crossing(t: np.ndarray, r: np.ndarray, level: float, start: int = 0) -> tuple[float, int] | None:
    """Interpolated time of the first upward crossing of ``level`` at or after index ``start``.

    Returns (time, index of the first sample at or above the level), or None.
    """
    above = np.flatnonzero(r[start:] >= level)
    if above.size == 0:
        return None
    i = start + int(above[0])
    if i == 0 or r[i - 1] >= level:
        return float(t[i]), i
    a, b = r[i - 1], r[i]
    return float(t[i - 1] + (level - a) / (b - a) * (t[i] - t[i - 1])), i


def _last_crossing_before(t: np.ndarray, r: np.ndarray, level: float, stop: int) -> float | None:
    """Interpolated time of the last upward crossing of ``level`` before index ``stop``."""
    below = np.flatnonzero(r[:stop] < level)
    if below.size == 0:
        return None
    i = int(below[-1])
    if i + 1 >= r.size:
        return None
    a, b = r[i], r[i + 1]
    return float(t[i] + (level - a) / (b - a) * (t[i + 1] - t[i]))


def _first_drop_below(t: np.ndarray, e: np.ndarray, level: float, start: int) -> float | None:
    """Interpolated time of the first fall of ``e`` below ``level`` at or after ``start``."""
    hit = _first_crossing(t, -e, -level, start)
    return None if hit is None else hit[0]


def _smooth(r: np.ndarray, width: int) -> np.ndarray:
    """Centred moving average over ``width`` (odd) samples; ends use the samples available."""
    if width <= 1 or r.size < width:
        return r
    c = np.concatenate(([0.0], np.cumsum(r)))
    half = width // 2
    idx = np.arange(r.size)
    lo = np.maximum(idx - half, 0)
    hi = np.minimum(idx + half + 1, r.size)
    return (c[hi] - c[lo]) / (hi - lo)


def _above_noise(percent: float, floor: float) -> float:
    """A shoot in % of the step, or 0 when it lies within the trace's noise floor."""
    return percent if percent > floor else 0.0


def _settling_time(t: np.ndarray, r: np.ndarray, target: float, band: float, start: int) -> float | None:
    """Time after which |r - target| <= band for good (interpolated entry), from index ``start``."""
    dev = np.abs(r[start:] - target)
    outside = np.flatnonzero(dev > band)
    if outside.size == 0:
        return float(t[start])
    i = start + int(outside[-1])
    if i + 1 >= r.size:
        return None
    a, b = abs(r[i] - target), abs(r[i + 1] - target)
    frac = (a - band) / (a - b) if a != b else 0.0
    return float(t[i] + frac * (t[i + 1] - t[i]))


def _settling_time_in_noise(t: np.ndarray, r: np.ndarray, target: float, band: float,
                            noise_n: float) -> float | None:
    """Settling time on a trace averaged enough that its noise (3 sigma) fills half the band.

    The moving average spans (6 sigma / band)^2 samples; when that is more than a
    quarter of the window the settling time cannot be measured (None).
    """
    width = int(math.ceil((6.0 * noise_n / band) ** 2)) | 1 if noise_n > 0 else 1
    if width > r.size // 4:
        return None
    return _settling_time(t, _smooth(r, width), target, band, 1)


def step_metrics(segment: StepSegment, *, reference_levels: tuple[float, float] = (0.1, 0.9),
                 settling_band: float = 0.02, delay_defined: bool = True) -> StepMetrics:
    """Model-free metrics of one segment (see the module docstring for each definition).

    ``reference_levels`` are fractions of the step (low, high), ``settling_band``
    a fraction of the step; ``delay_defined`` is False when the edge time was
    taken from the output itself (the delay is then zero by construction).
    """
    lo_ref, hi_ref = reference_levels
    step = segment.step_size
    t_all = segment.time - segment.edge_time
    first_post = max(segment.n_before_edge - 1, 0)  # the last sample before the edge, for interpolation
    t = t_all[first_post:]
    common = dict(edge_time=segment.edge_time, direction=segment.direction, baseline=segment.baseline,
                  final_value=segment.final, step=step, step_source=segment.step_source,
                  reference_levels=(float(lo_ref), float(hi_ref)), settling_band=float(settling_band))
    empty = dict(rise_time=None, fall_time=None, delay=None, overshoot_percent=None,
                 undershoot_percent=None, preshoot_percent=None, peak_value=None, peak_time=None,
                 settling_time=None, decay_time=None, samples_across_transition=None)
    if not (np.isfinite(step) and step != 0 and t.size >= 3):
        return StepMetrics(response="no measurable step", **common, **empty)
    r = (segment.output[first_post:] - segment.baseline) / step
    r_raw = r
    final_n = (segment.final - segment.baseline) / step
    dt = segment.sample_interval
    noise_n = abs(segment.noise_rms / step) if np.isfinite(segment.noise_rms) else 0.0
    width = 1
    if noise_n > 0.002:
        half = _first_crossing(t, r, 0.5 * (final_n if not segment.returns_to_baseline else 1.0))
        width = min((half[1] // 5 if half else 1) | 1, 101)
        r = _smooth(r, width)
    # largest noise excursion among r.size samples: below sigma (sqrt(2 ln N) + 1.5) nearly always
    noise_floor = 100.0 * noise_n / np.sqrt(width) * (np.sqrt(2.0 * np.log(r.size)) + 1.5)

    settling = _settling_time_in_noise(t, r_raw, 1.0 if not segment.returns_to_baseline else final_n,
                                       settling_band, noise_n)
    if segment.returns_to_baseline:
        return _returns_metrics(t, r, final_n, segment, dt, settling, common, empty)

    out = dict(empty)
    response = "rise" if step > 0 else "fall"
    hi = _first_crossing(t, r, hi_ref)
    if hi is not None:
        lo_time = _last_crossing_before(t, r, lo_ref, hi[1])
        if lo_time is not None:
            duration = hi[0] - lo_time
            out["rise_time" if step > 0 else "fall_time"] = duration
            out["samples_across_transition"] = duration / dt if dt > 0 else None
    mid = _first_crossing(t, r, 0.5)
    if mid is not None and delay_defined:
        out["delay"] = mid[0]
    k = int(np.argmax(r))
    overshoot = _above_noise(max(0.0, float(r[k]) - 1.0) * 100.0, noise_floor)
    out["overshoot_percent"] = overshoot
    out["peak_value"] = segment.baseline + float(r[k]) * step
    if overshoot > max(noise_floor, 0.1):
        out["peak_time"] = float(t[k])
    undershoot = max(0.0, 1.0 - float(np.min(r[k:]))) * 100.0 if overshoot > 0 else 0.0
    out["undershoot_percent"] = _above_noise(undershoot, noise_floor)
    stop = mid[1] if mid is not None else r.size
    preshoot = max(0.0, -float(np.min(r[1:stop]))) * 100.0 if stop > 1 else 0.0
    out["preshoot_percent"] = _above_noise(preshoot, noise_floor)
    out["settling_time"] = settling
    return StepMetrics(response=response, **common, **out)


def _returns_metrics(t, r, final_n, segment, dt, settling, common, empty) -> StepMetrics:
    """Metrics of a response that spikes (or moves) and returns to its baseline."""
    out = dict(empty)
    k = int(np.argmax(np.abs(r[1:]))) + 1
    peak = float(r[k])
    out["peak_value"] = segment.baseline + peak * segment.step_size
    out["peak_time"] = float(t[k])
    sign = 1.0 if peak >= final_n else -1.0
    excursion = (r - final_n) / (peak - final_n) if peak != final_n else np.zeros_like(r)
    t90 = _first_drop_below(t, excursion, 0.9, k)
    t10 = _first_drop_below(t, excursion, 0.1, k)
    if t90 is not None and t10 is not None:
        out["decay_time"] = t10 - t90
        out["samples_across_transition"] = (t10 - t90) / dt if dt > 0 else None
    beyond = sign * (final_n - r[k:])
    out["undershoot_percent"] = max(0.0, float(np.max(beyond))) * 100.0 if beyond.size else 0.0
    out["settling_time"] = settling
    return StepMetrics(response="returns to baseline", **common, **out)
