"""A separate record of the channel's noise, for fitting under band-limited noise.

Generalised least squares needs the noise's autocorrelation. From a capture
alone it is estimated from the first fit's residuals (:mod:`.whitening`),
which takes more points than a short record has: with fewer than 140, the
noise model is too uncertain and fitkit stays with ordinary least squares and
widened intervals (efficiency 0.4-0.7 in benchmarks/bench_accuracy.py).

A bench engineer can do better by recording the noise itself: the same
channel, probe, vertical scale, bandwidth limit and timebase, with the
circuit quiet (drive held steady). That record holds nothing but noise, as
many samples as the scope gives, so its autoregressive model is as good as
the record is long (common practice, no source, to characterise a channel's
noise floor with its input quiet). The model is fitted to the record's
autocorrelation (biased estimator, after removing a straight-line drift) by
Yule-Walker with the order chosen by AIC (:func:`.uncertainty.autoregressive_model`),
and its whitening filter is then used for the capture's fit.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from ..capture import Capture
from ..errors import FitError
from .uncertainty import autoregressive_model
from .whitening import MAX_WHITENING_ORDER, WHITE_LOADING, Whitener

#: Fewest samples in a noise record (ten times the highest AR order, at least).
MIN_RECORD_SAMPLES = 256
#: The capture's sample interval may differ from the record's by this fraction.
SAMPLE_INTERVAL_TOLERANCE = 1e-3


@dataclass(frozen=True)
class NoiseRecord:
    """The noise model of a separate quiet record of the output channel.

    whitener: the whitening filter of the record's autoregressive model.
    sample_interval: the record's sample interval (s); a capture fitted with it
        must have the same.
    n_samples: samples in the record.
    rms: the record's rms noise about its straight-line drift (V).
    source: where it came from (a file name), named in its errors.
    """

    whitener: Whitener
    sample_interval: float
    n_samples: int
    rms: float
    source: str = ""

    def matches(self, sample_interval: float) -> bool:
        """True when a capture sampled every ``sample_interval`` s can use this record."""
        return math.isfinite(sample_interval) and \
            abs(sample_interval - self.sample_interval) <= SAMPLE_INTERVAL_TOLERANCE * self.sample_interval

    def require_timebase(self, sample_interval: float, path: str | None = None) -> None:
        """Raise FitError unless a capture sampled every ``sample_interval`` s can use this record."""
        if not self.matches(sample_interval):
            raise FitError(f"the noise record is sampled every {self.sample_interval:.4g} s, the capture every "
                           f"{sample_interval:.4g} s", path=path or None,
                           hint="record the noise at the capture's timebase")


def noise_record_from_samples(values: np.ndarray, sample_interval: float, source: str = "") -> NoiseRecord:
    """The noise model of ``values`` (V), a quiet record sampled every ``sample_interval`` s."""
    x = _longest_finite_run(np.asarray(values, dtype=float))
    where = source or None
    if x.size < MIN_RECORD_SAMPLES:
        raise FitError(f"the noise record has {x.size} samples; at least {MIN_RECORD_SAMPLES} are needed",
                       path=where, hint="record the quiet channel over a longer time")
    if not (math.isfinite(sample_interval) and sample_interval > 0):
        raise FitError("the noise record has no usable sample interval", path=where,
                       hint="give it a time column or --sample-interval")
    n = x.size
    k = np.arange(n, dtype=float)
    drift = np.polyval(np.polyfit(k, x, 1), k)
    e = x - drift
    variance = float(e @ e) / n
    if not variance > (1e-12 * max(1.0, float(np.max(np.abs(x))))) ** 2:  # rounding of a constant
        raise FitError("the noise record is flat (no noise at all, or clipped)", path=where,
                       hint="record the channel at the vertical scale of the capture, with its noise visible")
    max_lag = int(min(MAX_WHITENING_ORDER + 1, n // 10))
    # biased autocovariance (divisor n), positive definite
    spectrum = np.fft.rfft(e, 2 * n)
    acov = np.fft.irfft(spectrum * np.conj(spectrum))[: max_lag + 1] / n
    rho = acov / acov[0]
    rho[0] += WHITE_LOADING
    rho /= rho[0]
    model = autoregressive_model(rho, n, max_order=max_lag - 1)
    whitener = Whitener(model, float(rho[1]), rho, record_samples=n)
    return NoiseRecord(whitener, float(sample_interval), n, math.sqrt(variance), source)


def _longest_finite_run(x: np.ndarray) -> np.ndarray:
    """The longest stretch of consecutive finite samples (a gap would join unrelated noise)."""
    finite = np.isfinite(x)
    if finite.all():
        return x
    edges = np.flatnonzero(np.diff(np.concatenate([[0], finite.astype(np.int8), [0]])))
    starts, stops = edges[::2], edges[1::2]
    if starts.size == 0:
        return x[:0]
    longest = int(np.argmax(stops - starts))
    return x[starts[longest]:stops[longest]]


def noise_record_from_capture(capture: Capture, channel: str | int | None = None) -> NoiseRecord:
    """The noise model of one channel of a quiet capture: ``channel`` by name or
    position (as :meth:`Capture.channel` finds it), or the capture's only channel."""
    path = capture.provenance.path or ""
    names = capture.channel_names
    found = None
    if channel is not None:
        try:
            found = capture.channel(channel)
        except (KeyError, IndexError, ValueError):
            found = None
    if found is None:
        if len(names) != 1:
            wanted = f"no channel {channel!r}; " if channel is not None else ""
            raise FitError(f"the noise record has {wanted}channels {', '.join(names)}", path=path or None,
                           hint="record only the output channel, or name it the same as in the capture")
        found = capture.channel(names[0])
    return noise_record_from_samples(found.values, capture.sample_interval, path)
