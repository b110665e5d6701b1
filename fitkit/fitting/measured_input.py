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

Both start from rest. :func:`response_to_input` takes the first input value
as the level the input always had; :func:`response_by_superposition` takes an
``initial`` level when given (the fit passes the mean of the input's samples
before the edge). Taking one noisy, quantised first sample as the level the
circuit had settled to adds an error of up to a quantisation step that decays
with the circuit's own time constant through the whole record, which biased
the gain, the baseline and the time constants; the mean of the pre-edge
samples removes that.

The measured input is itself noisy (scope noise and quantisation). That noise
is filtered by the model and reaches the fitted output model as a slow,
strongly correlated error which the residuals cannot reveal (it is small in
rms but has as much low-frequency power as the output's own noise), so it is
not ignored: :mod:`.input_noise` propagates it into the covariance through
the adjoint of the linear map from input samples to the model
(:func:`superposition_adjoint`).
"""

from __future__ import annotations

import math

import numpy as np
from typing import Callable


from ..errors import FitError


def fft_convolve(a: np.ndarray, b: np.ndarray, n: int) -> np.ndarray:
    """The first ``n`` values of the full linear convolution of a and b along axis 0
    (b 1-D, broadcast over the columns of a 2-D a), by zero-padded FFT."""
    size = 1 << int(math.ceil(math.log2(max(a.shape[0] + b.shape[0] - 1, 2))))
    fa = np.fft.rfft(a, size, axis=0)
    fb = np.fft.rfft(b, size, axis=0)
    if fa.ndim == 2 and fb.ndim == 1:
        fb = fb[:, None]
    return np.fft.irfft(fa * fb, size, axis=0)[:n]


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
    from scipy import signal  # only for this independent route (start-up time)

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


def superposition_kernel(unit_step: Callable[[np.ndarray], np.ndarray], n: int, dt: float) -> np.ndarray:
    """k[m], m = 0..n: mean of the unit-step response over [(m - 1) dt, m dt] (k[0] = 0).

    The response at sample t to an input moving linearly by d between samples
    j - 1 and j is d * k[t - j + 1]. Interval means by Simpson's rule.
    """
    m = np.arange(0, n + 1, dtype=float)
    s_edges = unit_step(m * dt)  # s(0), s(dt), ..., s(n dt): each interval's start is the previous one's end
    s_start, s_end = s_edges[:-1], s_edges[1:]
    s_mid = unit_step((m[1:] - 0.5) * dt)
    return np.concatenate([[0.0], (s_start + 4.0 * s_mid + s_end) / 6.0])


def response_by_superposition(unit_step: Callable[[np.ndarray], np.ndarray], u: np.ndarray, dt: float,
                              dc_gain: float = 1.0, initial: float | None = None,
                              kernel: np.ndarray | None = None) -> np.ndarray:
    """Response to samples ``u`` (interval ``dt``, linear between samples) of the
    system whose unit-step response is ``unit_step(t)`` (0 for t < 0).

    ``dc_gain`` is the step response's final value (1 for a low-pass, 0 for a
    high-pass). ``initial``: the level the input had always had before the
    first sample (it then moves linearly to u[0] over the interval before the
    first sample); None takes u[0] itself as that level. ``kernel``: a
    precomputed :func:`superposition_kernel` of at least n + 1 values (same
    step response and dt), to share one among several inputs.
    Accuracy: Simpson's rule over each sample interval, error of order
    (dt / tau)^4 / 2880 of the step for time constant tau.
    """
    u = np.asarray(u, dtype=float)
    n = u.size
    if n == 0:
        return u.copy()
    if initial is None:
        kernel = superposition_kernel(unit_step, n - 1, dt) if kernel is None else kernel[:n]
        du = np.diff(u)
        y = np.full(n, u[0] * dc_gain)
        if du.size:
            y[1:] += fft_convolve(du, kernel[1:n], n - 1)
        return y
    if kernel is None or kernel.size < n + 1:
        kernel = superposition_kernel(unit_step, n, dt)
    du = np.diff(u, prepend=float(initial))
    return float(initial) * dc_gain + fft_convolve(du, kernel[1:n + 1], n)


def superposition_adjoint(kernel: np.ndarray, dc_gain: float, initial_weights: np.ndarray,
                          v: np.ndarray) -> np.ndarray:
    """Adjoint (transpose) of the linear map u -> response_by_superposition(u, initial = a . u).

    ``kernel`` from :func:`superposition_kernel` (length n + 1), ``initial_weights``
    the vector a (length n) that forms the initial level from the samples,
    ``v`` of shape (n,) or (n, p). Returns L^T v with the same shape; used to
    carry the input's noise into the covariance of a fit.
    """
    v = np.asarray(v, dtype=float)
    flat = v.ndim == 1
    v2 = v[:, None] if flat else v
    n = v2.shape[0]
    k = kernel[1:n + 1]
    # T is lower-triangular Toeplitz with first column k; T^T v = reverse(T reverse(v))
    tt = fft_convolve(v2[::-1], k, n)[::-1]
    d_adj = tt.copy()
    d_adj[:-1] -= tt[1:]  # D^T w: w[i] - w[i + 1]
    a = np.asarray(initial_weights, dtype=float)[:, None]
    out = d_adj + a * (dc_gain * v2.sum(axis=0) - tt[0])[None, :]
    return out[:, 0] if flat else out
