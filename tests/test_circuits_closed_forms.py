"""Library transfer functions against handbook closed forms and facts of the trade."""

from __future__ import annotations

import math

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy import signal

from fitkit.circuits.topologies import topology
from fitkit.circuits.transfer import transfer_function

RNG = np.random.default_rng(2026)


def _log_uniform(lo: float, hi: float, n: int) -> np.ndarray:
    return 10 ** RNG.uniform(math.log10(lo), math.log10(hi), n)


@pytest.mark.parametrize("R,C", list(zip(_log_uniform(10, 1e6, 6), _log_uniform(1e-12, 1e-5, 6))))
def test_rc_low_pass_time_constant_is_rc(R, C):
    # Textbook first-order RC: tau = R C, DC gain 1, H = 1 / (1 + s R C).
    q = transfer_function(topology("rc-low-pass", R1=R, C1=C)).quantities()
    assert q["tau"] == pytest.approx(R * C, rel=1e-10)
    assert q["dc_gain"] == pytest.approx(1.0, rel=1e-10)


def test_rc_high_pass_and_rl_time_constants():
    # Textbook first-order circuits: RC high-pass tau = R C (zero at s = 0);
    # series RL: tau = L / R, across L a zero at s = 0, across R DC gain 1.
    hp = transfer_function(topology("rc-high-pass", R1=4.7e3, C1=22e-9))
    assert hp.quantities()["tau"] == pytest.approx(4.7e3 * 22e-9, rel=1e-10)
    assert hp.zeros.size == 1 and abs(hp.zeros[0]) == 0
    rl = transfer_function(topology("rl", R1=10e3, L1=10e-3))
    assert rl.quantities()["tau"] == pytest.approx(1e-6, rel=1e-10)
    assert rl.dc_gain == 0
    rlr = transfer_function(topology("rl-across-r", R1=220.0, L1=4.7e-3))
    assert rlr.quantities()["tau"] == pytest.approx(4.7e-3 / 220, rel=1e-10)
    assert rlr.dc_gain == pytest.approx(1.0, rel=1e-12)


@pytest.mark.parametrize("k", range(5))
def test_series_rlc_across_c(k):
    # Textbook series RLC, output across C: omega0 = 1/sqrt(LC), Q = sqrt(L/C)/R.
    R, L, C = _log_uniform(1, 1e3, 1)[0], _log_uniform(1e-6, 1e-1, 1)[0], _log_uniform(1e-10, 1e-6, 1)[0]
    q = transfer_function(topology("rlc-series-c", R1=R, L1=L, C1=C)).quantities()
    assert 2 * math.pi * q["f0"] == pytest.approx(1 / math.sqrt(L * C), rel=1e-9)
    assert q["Q"] == pytest.approx(math.sqrt(L / C) / R, rel=1e-9)
    assert q["dc_gain"] == pytest.approx(1.0, rel=1e-9)


def test_series_rlc_across_r_is_band_pass_with_unit_peak():
    # Textbook series RLC, output across R: H = s R C / (1 + s R C + s^2 L C), |H(j w0)| = 1.
    R, L, C = 47.0, 2.2e-3, 470e-9
    tf = transfer_function(topology("rlc-series-r", R1=R, L1=L, C1=C))
    w0 = 1 / math.sqrt(L * C)
    assert abs(tf(1j * w0)) == pytest.approx(1.0, rel=1e-10)
    np.testing.assert_allclose(tf.numerator, [R * C, 0.0], rtol=1e-10, atol=0)
    assert tf.quantities()["Q"] == pytest.approx(math.sqrt(L / C) / R, rel=1e-9)


@pytest.mark.parametrize("k", range(6))
def test_unity_gain_sallen_key(k):
    # Texas Instruments SLOA024 "Analysis of the Sallen-Key Architecture" (unity gain,
    # C2 to ground, C1 feedback): omega0 = 1/sqrt(R1 R2 C1 C2), Q = sqrt(R1 R2 C1 C2) / (C2 (R1 + R2)).
    R1, R2 = _log_uniform(1e3, 1e5, 2)
    C1, C2 = _log_uniform(1e-10, 1e-7, 2)
    q = transfer_function(topology("sallen-key-low-pass", R1=R1, R2=R2, C1=C1, C2=C2)).quantities()
    assert 2 * math.pi * q["f0"] == pytest.approx(1 / math.sqrt(R1 * R2 * C1 * C2), rel=1e-9)
    assert q["Q"] == pytest.approx(math.sqrt(R1 * R2 * C1 * C2) / (C2 * (R1 + R2)), rel=1e-9)
    assert q["dc_gain"] == pytest.approx(1.0, rel=1e-9)


@pytest.mark.parametrize("k", range(6))
def test_mfb_low_pass(k):
    # Texas Instruments SLOA049 "Active Low-Pass Filter Design" and "Op Amps for Everyone"
    # (multiple feedback low-pass; formula recalled from memory, confirmed symbolically by the
    # lcapy test): H = -(R2/R1) / (1 + s C1 (R2 + R3 + R2 R3 / R1) + s^2 C1 C2 R2 R3), C1 from the
    # inverting input to the output, C2 to ground. So omega0 = 1/sqrt(R2 R3 C1 C2),
    # Q = sqrt(R2 R3 C1 C2) / (C1 (R2 + R3 + R2 R3 / R1)), DC gain -R2/R1.
    R1, R2, R3 = _log_uniform(1e3, 1e5, 3)
    C1, C2 = _log_uniform(1e-10, 1e-7, 2)
    q = transfer_function(topology("mfb-low-pass", R1=R1, R2=R2, R3=R3, C1=C1, C2=C2)).quantities()
    assert 2 * math.pi * q["f0"] == pytest.approx(1 / math.sqrt(R2 * R3 * C1 * C2), rel=1e-9)
    assert q["Q"] == pytest.approx(math.sqrt(R2 * R3 * C1 * C2) / (C1 * (R2 + R3 + R2 * R3 / R1)), rel=1e-9)
    assert q["dc_gain"] == pytest.approx(-R2 / R1, rel=1e-9)


positive_r = st.floats(min_value=10.0, max_value=1e6)
positive_c = st.floats(min_value=1e-12, max_value=1e-5)


@settings(max_examples=60, deadline=None, derandomize=True)
@given(positive_r, positive_c, positive_r, positive_c)
def test_unbuffered_ladder_q_at_most_half(R1, C1, R2, C2):
    # Common practice, no source: an unbuffered two-stage RC ladder has real poles, Q <= 1/2.
    tf = transfer_function(topology("rc-ladder-2", R1=R1, C1=C1, R2=R2, C2=C2))
    assert tf.quantities()["Q"] <= 0.5 * (1 + 1e-9)
    assert np.all(np.abs(tf.poles.imag) <= 1e-6 * np.abs(tf.poles))


def test_equal_part_ladder_facts():
    # Common practice, no source: equal parts R, C give tau0 = RC, Q = 1/3, poles at
    # 0.382/RC and 2.618/RC ((3 -+ sqrt 5)/2), unit-step response
    # 1 - 1.171 e^(-0.382 t/RC) + 0.171 e^(-2.618 t/RC) (coefficients rounded to 3 decimals).
    R, C = 10e3, 10e-9
    tf = transfer_function(topology("rc-ladder-2", R1=R, C1=C, R2=R, C2=C))
    q = tf.quantities()
    assert q["Q"] == pytest.approx(1 / 3, rel=1e-10)
    assert 1 / (2 * math.pi * q["f0"]) == pytest.approx(R * C, rel=1e-10)
    np.testing.assert_allclose(np.sort(-tf.poles.real) * R * C, [(3 - 5 ** 0.5) / 2, (3 + 5 ** 0.5) / 2],
                               rtol=1e-9)
    t = np.linspace(0, 10 * R * C, 501)
    y = 1 - 1.171 * np.exp(-0.382 * t / (R * C)) + 0.171 * np.exp(-2.618 * t / (R * C))
    assert np.max(np.abs(tf.step_response(t) - y)) < 5e-4     # rounding of the 3-decimal figures


def test_buffered_stages_have_poles_at_each_stage():
    # Common practice, no source: a unity-gain buffer isolates the stages, so the poles are
    # exactly -1/(R1 C1) and -1/(R2 C2).
    R1, C1, R2, C2 = 3.3e3, 47e-9, 22e3, 1.5e-9
    tf = transfer_function(topology("rc-buffered-2", R1=R1, C1=C1, R2=R2, C2=C2))
    np.testing.assert_allclose(np.sort(tf.poles.real), np.sort([-1 / (R1 * C1), -1 / (R2 * C2)]), rtol=1e-10)
    assert tf.dc_gain == pytest.approx(1.0, rel=1e-12)


@pytest.mark.parametrize("name", ["rc-ladder-2", "rlc-series-c", "sallen-key-low-pass", "rlc-series-r",
                                  "mfb-low-pass"])
def test_step_response_matches_scipy(name):
    # Reference: scipy.signal.step on the same polynomials (independent simulator).
    tf = transfer_function(topology(name))
    t = np.linspace(0, 20 * tf.time_scale, 2001)
    _, y_ref = signal.step((tf.numerator, tf.denominator), T=t)
    y = tf.step_response(t)
    assert np.max(np.abs(y - y_ref)) < 1e-9 * max(1.0, np.max(np.abs(y_ref)))
    # Uneven and shifted time axes give the same values.
    t2 = np.sort(RNG.uniform(-2, 20, 50)) * tf.time_scale
    np.testing.assert_allclose(tf.step_response(t2), np.interp(t2, t, y, left=0.0), atol=2e-3)
    assert np.all(tf.step_response(t2)[t2 < 0] == 0)


def test_rc_step_response_closed_form():
    # Textbook first-order step response: 1 - exp(-t / RC).
    tf = transfer_function(topology("rc-low-pass", R1=1e3, C1=1e-6))
    t = np.concatenate([[-1e-3], np.geomspace(1e-7, 1e-2, 40)])
    np.testing.assert_allclose(tf.step_response(t), np.where(t < 0, 0, -np.expm1(-t / 1e-3)),
                               rtol=1e-10, atol=1e-14)


def test_high_pass_step_and_ideal_integrator():
    # Textbook: RC high-pass step response exp(-t/RC); ideal inverting integrator
    # H = -1/(s R C), step response -t/(R C) (a pole at s = 0).
    from fitkit.circuits.description import Circuit, Part
    hp = transfer_function(topology("rc-high-pass", R1=1e3, C1=1e-7))
    t = np.linspace(0, 5e-4, 101)
    np.testing.assert_allclose(hp.step_response(t), np.exp(-t / 1e-4), atol=1e-12)
    integrator = Circuit("integrator", (Part("R1", "resistor", ("in", "m"), 1e3),
                                        Part("C1", "capacitor", ("m", "out"), 1e-6),
                                        Part("U1", "amplifier", ("out", "gnd", "m"), math.inf)), "in", "out")
    tf = transfer_function(integrator)
    # With a pole at s = 0 the lowest non-zero denominator coefficient is normalised to 1.
    np.testing.assert_allclose(tf.denominator, [1.0, 0.0], rtol=1e-12)
    np.testing.assert_allclose(tf.numerator, [-1e3], rtol=1e-10)
    assert tf(1j * 1e3) == pytest.approx(-1.0 / (1j * 1e3 * 1e-3), rel=1e-10)
    assert tf.dc_gain == -math.inf
    np.testing.assert_allclose(tf.step_response(t), -t / 1e-3, rtol=1e-10, atol=1e-14)
