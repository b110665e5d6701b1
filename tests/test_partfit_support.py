"""An independent simulator of scope captures for the component-value tests.

The captures are made WITHOUT fitkit's nodal analysis: each circuit's
closed-form transfer function from the usual handbooks, run through
scipy.signal.lsim (or python-control's forced_response), plus white noise and
the quantisation of an n-bit scope. The tests at the bottom check the
simulator itself against textbook step responses.
"""

from __future__ import annotations

import math

import control
import numpy as np
from scipy import signal

from fitkit.capture import Capture, Channel, Provenance


# -- closed-form transfer functions (descending powers of s) ----------------------

def rc_low_pass_tf(R, C, probe_R=None, probe_C=None):
    """1 / (1 + s R C); with a probe Rp || Cp at the output, the Thevenin form
    (Rp/(R+Rp)) / (1 + s (R || Rp)(C + Cp)) (voltage divider and Thevenin's
    theorem, any circuits textbook, e.g. Horowitz & Hill, The Art of Electronics, ch. 1)."""
    if probe_R is None:
        return [1.0], [R * C, 1.0]
    Cp = probe_C or 0.0
    return [probe_R / (R + probe_R)], [R * probe_R / (R + probe_R) * (C + Cp), 1.0]


def series_rlc_across_c_tf(R, L, C):
    """1 / (L C s^2 + R C s + 1): omega0 = 1/sqrt(LC), Q = sqrt(L/C)/R (standard series RLC)."""
    return [1.0], [L * C, R * C, 1.0]


def rc_ladder_tf(R1, C1, R2, C2):
    """Unbuffered two-stage RC ladder: 1 / (R1 R2 C1 C2 s^2 + (R1 C1 + R2 C2 + R1 C2) s + 1)
    (common practice, no source; also follows from two nodal equations)."""
    return [1.0], [R1 * R2 * C1 * C2, R1 * C1 + R2 * C2 + R1 * C2, 1.0]


def sallen_key_unity_tf(R1, R2, C1, C2):
    """Unity-gain Sallen-Key low-pass, C1 feedback, C2 to ground:
    1 / (R1 R2 C1 C2 s^2 + C2 (R1 + R2) s + 1) (TI application report SLOA024,
    'Analysis of the Sallen-Key Architecture'; the issue's closed forms)."""
    return [1.0], [R1 * R2 * C1 * C2, C2 * (R1 + R2), 1.0]


# -- captures ------------------------------------------------------------------------

def quantise(y, full_scale, bits):
    """Round to the code step of an n-bit converter spanning +-full_scale/2 around 0.5 full scale."""
    q = full_scale / 2 ** bits
    return np.round(y / q) * q


def step_capture(tf, *, t_end, n=600, pre=0.1, step=1.0, noise=0.005, bits=10, seed=0,
                 simulator="scipy", name="out", path=""):
    """One rising step at t = 0 of ``step`` volts through ``tf``, sampled n times on
    [-pre * t_end, t_end], with white noise (V rms) and ``bits``-bit quantisation."""
    num, den = tf
    t = np.linspace(-pre * t_end, t_end, n)
    u = np.where(t >= 0, step, 0.0)
    if simulator == "scipy":
        _, y, _ = signal.lsim((num, den), u, t - t[0])
    else:
        y = control.forced_response(control.tf(num, den), T=t - t[0], U=u).outputs
    rng = np.random.default_rng(seed)
    y = np.asarray(y) + rng.normal(0.0, noise, n)
    if bits:
        y = quantise(y, 2.0 * abs(step), bits)
    return Capture(t, (Channel(name, y),), provenance=Provenance(path=path))


def square_capture(tf, *, period, cycles=2, n_per_period=800, high=1.0, noise=0.005, bits=10, seed=0,
                   with_input=False):
    """A square wave (starting low for a quarter period) through ``tf`` by
    scipy.signal.lsim; optionally with the drive as a second channel."""
    num, den = tf
    n = int(cycles * n_per_period)
    t = np.arange(n) * (period / n_per_period)
    phase = ((t / period) + 0.75) % 1.0
    u = np.where(phase < 0.5, high, 0.0)
    _, y, _ = signal.lsim((num, den), u, t)
    rng = np.random.default_rng(seed)
    y = quantise(y + rng.normal(0.0, noise, n), 2.0 * high, bits)
    channels = (Channel("in", u), Channel("out", y)) if with_input else (Channel("out", y),)
    return Capture(t, channels)


# -- the simulator against textbook step responses -----------------------------------

def test_first_order_step_is_one_minus_exp():
    # textbook first-order step response 1 - exp(-t/RC)
    cap = step_capture(rc_low_pass_tf(10e3, 10e-9), t_end=1e-3, noise=0.0, bits=0)
    t, y = cap.time, cap.channels[0].values
    after = t >= 0
    assert np.max(np.abs(y[after] - (1 - np.exp(-t[after] / 1e-4)))) < 2e-3


def test_equal_ladder_matches_trade_formula():
    # common practice, no source (design notes): equal parts R, C give
    # 1 - 1.171 exp(-0.382 t/RC) + 0.171 exp(-2.618 t/RC)
    R, C = 10e3, 10e-9
    cap = step_capture(rc_ladder_tf(R, C, R, C), t_end=2e-3, noise=0.0, bits=0, simulator="control")
    t, y = cap.time, cap.channels[0].values
    after = t >= 0
    x = t[after] / (R * C)
    expect = 1 - 1.171 * np.exp(-0.382 * x) + 0.171 * np.exp(-2.618 * x)
    assert np.max(np.abs(y[after] - expect)) < 2e-3


def test_series_rlc_rings_at_textbook_frequency():
    # damped frequency omega0 sqrt(1 - zeta^2), zeta = R/2 sqrt(C/L) (standard series RLC)
    R, L, C = 20.0, 10e-3, 100e-9
    cap = step_capture(series_rlc_across_c_tf(R, L, C), t_end=2e-3, n=4000, noise=0.0, bits=0)
    t, y = cap.time, cap.channels[0].values
    after = t >= 0
    crossings = np.nonzero(np.diff(np.sign(y[after] - 1.0)))[0]
    period = 2 * np.mean(np.diff(t[after][crossings[:6]]))
    w0, zeta = 1 / math.sqrt(L * C), R / 2 * math.sqrt(C / L)
    assert period == __import__("pytest").approx(2 * math.pi / (w0 * math.sqrt(1 - zeta ** 2)), rel=0.01)
