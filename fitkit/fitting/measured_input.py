"""Measured-input mode: drive a form with the recorded input instead of an ideal step.

A real source edge is not an ideal step: it has a finite rise time and may
droop. Fitting an ideal step then attributes the source's slowness to the
circuit. When the capture has an input channel, fitkit instead computes the
model output as the response of the form's system to the measured input.

The input is taken as piecewise linear between samples (first-order hold).
Two exact routes are provided:

* :func:`response_by_superposition` (used by the fit): Duhamel's integral,
  y = sum_k (u[k+1] - u[k]) * (mean of the unit-step response over one
  sample interval, shifted by k samples), with the interval mean by Simpson's
  rule from the form's own ``unit_step`` and the sum as an FFT convolution.
  It needs only the form's stable step response and costs O(n log n).
* :func:`response_to_input`: ``H(s)`` discretised for a first-order-hold
  input by scipy.signal's ``cont2discrete(..., method="foh")`` and run through
  ``lfilter``; used as an independent check.

Both start from rest at the first input value (treated as the level the input
always had).
"""

from __future__ import annotations

import numpy as np
from typing import Callable

from scipy import signal

from ..errors import FitError


def uniform_step(time: np.ndarray) -> float:
    """The sample interval of a uniformly sampled time axis (seconds or scaled).

    Raises FitError when the axis is not uniform to 1 % (measured-input mode
    needs a uniform axis for its exact discretisation).
    """
    d = np.diff(np.asarray(time, dtype=float))
    if d.size == 0:
        raise FitError("a segment has fewer than two samples; cannot simulate the measured input")
    dt = float(np.median(d))
    if dt <= 0 or np.max(np.abs(d - dt)) > 0.01 * dt:
        raise FitError("the time axis is not uniformly sampled; measured-input mode needs uniform sampling",
                       hint="resample the capture, or fit without the input channel")
    return dt


def response_to_input(num: np.ndarray, den: np.ndarray, u: np.ndarray, dt: float) -> np.ndarray:
    """Output of H(s) = num/den (descending powers of s) for input samples u at interval dt.

    The input is held piecewise-linearly between samples and the system starts
    at rest with u[0] treated as the level it has always had (so a constant
    u gives the constant DC response, not a start-up transient).
    """
    num = np.atleast_1d(np.asarray(num, dtype=float))
    den = np.atleast_1d(np.asarray(den, dtype=float))
    numd, dend, _ = signal.cont2discrete((num, den), dt, method="foh")
    numd = np.ravel(numd)
    u = np.asarray(u, dtype=float)
    if u.size == 0:
        return u.copy()
    # Start from the steady state for the first input value (lfilter_zi is
    # the state for a constant unit input; the FOH discretisation keeps H(0)).
    zi = signal.lfilter_zi(numd, dend) * u[0]
    y, _ = signal.lfilter(numd, dend, u, zi=zi)
    return y


def response_by_superposition(unit_step: Callable[[np.ndarray], np.ndarray], u: np.ndarray, dt: float,
                              dc_gain: float = 1.0) -> np.ndarray:
    """Response to samples ``u`` (interval ``dt``, linear between samples) of the
    system whose unit-step response is ``unit_step(t)`` (0 for t < 0).

    ``dc_gain`` is the step response's final value (1 for a low-pass, 0 for a
    high-pass); the input's first value is taken as having always been there.
    Accuracy: Simpson's rule over each sample interval, error of order
    (dt / tau)^4 / 2880 of the step for time constant tau.
    """
    u = np.asarray(u, dtype=float)
    n = u.size
    if n == 0:
        return u.copy()
    m = np.arange(n, dtype=float)
    # mean of the step response over [(m - 1) dt, m dt] for m = 1..n (Simpson)
    s_end = unit_step(m[1:] * dt) if n > 1 else np.zeros(0)
    s_mid = unit_step((m[1:] - 0.5) * dt) if n > 1 else np.zeros(0)
    s_start = unit_step(m[:-1] * dt) if n > 1 else np.zeros(0)
    kernel = np.concatenate([[0.0], (s_start + 4.0 * s_mid + s_end) / 6.0])
    du = np.diff(u)
    y = np.full(n, u[0] * dc_gain)
    if du.size:
        y[1:] += signal.oaconvolve(du, kernel[1:])[:n - 1]
    return y
