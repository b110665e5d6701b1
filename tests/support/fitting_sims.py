"""Simulated step responses for the fitting tests, made with independent simulators.

The responses come from scipy.signal (lti step / lsim) and python-control
(step_response / forced_response), never from fitkit's own forms, so the
engine is checked against outside code. Noise is white Gaussian, or white
noise through a Butterworth low-pass (scipy.signal.butter) to imitate a
scope's band-limited front end, optionally quantised to N bits.

Other test modules import the helpers from here; the tests in this file
check that the simulators agree with textbook closed forms.
"""

from __future__ import annotations

import math

import control
import numpy as np
from scipy import signal

from fitkit.capture import Capture
from fitkit.conditioning.segment import StepSegment


def first_order_tf(tau: float) -> tuple[list[float], list[float]]:
    return [1.0], [tau, 1.0]


def two_pole_tf(tau1: float, tau2: float) -> tuple[list[float], list[float]]:
    return [1.0], list(np.polymul([tau1, 1.0], [tau2, 1.0]))


def second_order_tf(f0: float, q: float) -> tuple[list[float], list[float]]:
    w0 = 2 * math.pi * f0
    return [w0 * w0], [1.0, w0 / q, w0 * w0]


def step_scipy(tf: tuple, t_after: np.ndarray) -> np.ndarray:
    """Unit-step response by scipy.signal.step at the given times (from 0)."""
    _, y = signal.step(tf, T=t_after)
    return y


def step_control(tf: tuple, t_after: np.ndarray) -> np.ndarray:
    """Unit-step response by python-control's step_response at the given times (from 0)."""
    resp = control.step_response(control.tf(*tf), T=t_after)
    return np.asarray(resp.outputs, dtype=float).ravel()


def coloured_noise(rng: np.random.Generator, n: int, sigma: float, band: float | None) -> np.ndarray:
    """Gaussian noise of standard deviation sigma; band-limited by a 4th-order
    Butterworth low-pass at ``band`` (fraction of Nyquist) when given."""
    if band is None:
        return rng.normal(0.0, sigma, n)
    b, a = signal.butter(4, band)
    e = signal.lfilter(b, a, rng.normal(0.0, 1.0, n + 500))[500:]
    return sigma * e / np.std(e)


def quantise(y: np.ndarray, bits: int | None, full_scale: tuple[float, float]) -> np.ndarray:
    """Round to an ADC of ``bits`` bits over ``full_scale`` (V)."""
    if bits is None:
        return y
    lo, hi = full_scale
    lsb = (hi - lo) / (2 ** bits)
    return lo + np.round((y - lo) / lsb) * lsb


def simulated_segment(tf: tuple, *, dt: float, n_before: int, n_after: int, rng: np.random.Generator,
                      noise: float = 0.01, band: float | None = None, bits: int | None = None,
                      baseline: float = 0.2, step: float = 1.0, edge_time: float = 1e-3,
                      simulator=step_scipy, edge_error: float = 0.0) -> StepSegment:
    """One edge as conditioning would hand it over (no input channel).

    The true edge is at ``edge_time``; the segment reports ``edge_time +
    edge_error`` (conditioning's estimate), so the engine has to find t0.
    """
    t_after = np.arange(n_after) * dt
    y = np.concatenate([np.zeros(n_before), simulator(tf, t_after)])
    t = edge_time + np.arange(-n_before, n_after) * dt
    v = baseline + step * y + coloured_noise(rng, t.size, noise, band)
    v = quantise(v, bits, (baseline - 0.5 * abs(step), baseline + 1.5 * abs(step)))
    return StepSegment(start=0, stop=t.size, time=t, output=v, input=None, edge_time=edge_time + edge_error,
                       direction=1 if step > 0 else -1, baseline=baseline, final=baseline + step,
                       noise_rms=noise)


def square_wave_capture(tf: tuple, *, period: float, dt: float, n_periods: int, rng: np.random.Generator,
                        noise: float = 0.01, amplitude: float = 1.0, source_tau: float = 0.0,
                        with_input: bool = True, path: str = "") -> Capture:
    """A square-wave drive through the system, simulated by scipy.signal.lsim.

    ``source_tau`` > 0 makes the source edge slow (the drive itself passed
    through an RC of that time constant), as a weak generator would.
    """
    t = np.arange(0.0, n_periods * period, dt)
    drive = np.where((t % period) < period / 2, 0.0, amplitude)
    if source_tau > 0:
        _, drive, _ = signal.lsim(first_order_tf(source_tau), drive, t)
    _, out, _ = signal.lsim(tf, drive, t)
    channels = {"vout": out + rng.normal(0.0, noise, t.size)}
    if with_input:
        channels = {"vin": drive + rng.normal(0.0, noise / 4, t.size), **channels}
    return Capture.from_arrays(t, channels, path=path)


# -- the simulators themselves against closed forms ---------------------------------
