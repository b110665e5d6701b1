"""An independent simulator of scope captures for the component-value tests.

The captures are made WITHOUT fitkit's nodal analysis: each circuit's
closed-form transfer function from the usual handbooks, run through
scipy.signal.lsim (or python-control's forced_response), plus white noise and
the quantisation of an n-bit scope. The tests at the bottom check the
simulator itself against textbook step responses.
"""

from __future__ import annotations


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
