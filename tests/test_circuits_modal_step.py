"""The step response by partial fractions (TransferFunction.step_response) against
independent simulators, with repeated and nearly repeated poles.

References: scipy.signal.step (state-space simulation by the matrix exponential)
and python-control's step_response; textbook closed forms for the repeated pole
(inverse Laplace transform of 1 / (s (1 + s T)^2)) and the integrator.
"""

from __future__ import annotations

import math

import control
import numpy as np
import pytest
from scipy import signal

from fitkit.circuits import topology, transfer_function
from fitkit.circuits.transfer import TransferFunction, modal_step_response

RNG = np.random.default_rng(14)


def _random_transfer_function(rng: np.random.Generator, n: int, cluster: float | None = None) -> TransferFunction:
    """A stable H(s) with n poles between 1e2 and 1e5 rad/s (real or complex pairs);
    with ``cluster``, all poles within that relative spread of one another."""
    poles: list[complex] = []
    centre = -10 ** rng.uniform(2, 5)
    while len(poles) < n:
        if cluster is not None:
            base = centre * (1 + cluster * rng.uniform(-1, 1))
            poles.append(base)
            continue
        if n - len(poles) >= 2 and rng.random() < 0.5:
            a, b = -10 ** rng.uniform(2, 5), 10 ** rng.uniform(2, 5)
            poles += [a + 1j * b, a - 1j * b]
        else:
            poles.append(-10 ** rng.uniform(2, 5))
    den = np.real(np.poly(poles))
    den = den / den[-1]
    m = int(rng.integers(0, n + 1))
    num = rng.normal(size=m + 1) * np.abs(den[-m - 1:]) if m else np.array([rng.normal()])
    return TransferFunction(tuple(num), tuple(den))


def _assert_matches_references(tf: TransferFunction, t: np.ndarray, tol: float) -> None:
    y = tf.step_response(t)
    _, y_scipy = signal.step((tf.numerator, tf.denominator), T=t)                 # scipy.signal.step
    y_control = control.step_response(control.tf(tf.numerator, tf.denominator), T=t).outputs  # python-control
    scale = max(1.0, float(np.max(np.abs(y_scipy))))
    assert np.max(np.abs(y - y_scipy)) <= tol * scale
    assert np.max(np.abs(y - y_control)) <= tol * scale


def test_random_simple_poles_match_scipy_and_control_to_1e_10():
    rng = np.random.default_rng(1)
    used_modal = 0
    for _ in range(60):
        tf = _random_transfer_function(rng, int(rng.integers(1, 5)))
        t = np.linspace(0.0, 30 * tf.time_scale, 1500)
        used_modal += modal_step_response(tf, t) is not None
        _assert_matches_references(tf, t, 1e-10)
    assert used_modal >= 50          # the fast route is the usual one


@pytest.mark.parametrize("spread", [0.0, 1e-9, 1e-6, 1e-3, 1e-2])
def test_repeated_and_nearly_repeated_poles_match_scipy_to_1e_10(spread):
    rng = np.random.default_rng(int(spread * 1e9) + 3)
    for n in (2, 3):
        tf = _random_transfer_function(rng, n, cluster=spread)
        t = np.linspace(0.0, 30 * tf.time_scale, 1500)
        _assert_matches_references(tf, t, 1e-10)


def test_exactly_repeated_pole_leaves_the_modal_route_and_matches_closed_form():
    # Inverse Laplace transform of 1 / (s (1 + s T)^2): 1 - (1 + t/T) e^(-t/T) (textbook pair).
    T = 1e-4
    tf = TransferFunction((1.0,), (T * T, 2 * T, 1.0))
    t = np.linspace(-1e-4, 2e-3, 777)
    assert modal_step_response(tf, t) is None
    want = np.where(t < 0, 0.0, 1 - (1 + t / T) * np.exp(-t / T))
    np.testing.assert_allclose(tf.step_response(t), want, rtol=0, atol=1e-12)


def test_library_circuits_agree_with_matrix_exponential_and_scipy():
    for name in ("rc-low-pass", "rc-high-pass", "rl", "rc-ladder-2", "rc-buffered-2", "rlc-series-c",
                 "rlc-series-r", "sallen-key-low-pass", "mfb-low-pass"):
        tf = transfer_function(topology(name))
        t = np.linspace(0.0, 25 * tf.time_scale, 2000)
        np.testing.assert_allclose(tf.step_response(t), tf.matrix_exponential_step_response(t), rtol=0,
                                   atol=1e-11 * max(1.0, abs(tf.dc_gain)))
        _assert_matches_references(tf, t, 1e-10)


def test_critically_damped_sallen_key_goes_through_the_stable_fallback():
    # Unity-gain Sallen-Key: den = R1 R2 C1 C2 s^2 + C2 (R1 + R2) s + 1 (textbook, from memory); with
    # R1 = R2 = R and C1 = C2 = C it is (1 + s R C)^2, Q = 1/2, a double real pole at 1/(R C).
    tf = transfer_function(topology("sallen-key-low-pass", R1=10e3, R2=10e3, C1=10e-9, C2=10e-9))
    assert tf.quantities()["Q"] == pytest.approx(0.5, rel=1e-9)
    T = 10e3 * 10e-9
    t = np.linspace(0.0, 20 * T, 1000)
    assert modal_step_response(tf, t) is None
    np.testing.assert_allclose(tf.step_response(t), 1 - (1 + t / T) * np.exp(-t / T), atol=1e-9)


def test_two_dimensional_times_and_negative_times():
    tf = transfer_function(topology("rc-ladder-2"))
    t = np.linspace(-2, 20, 400).reshape(100, 4) * tf.time_scale
    y = tf.step_response(t)
    assert y.shape == t.shape and np.all(y[t < 0] == 0)
    np.testing.assert_allclose(y.ravel(), tf.step_response(t.ravel()), rtol=0, atol=1e-15)
    # common practice, no source (design notes): equal-part ladder 1 - 1.171 e^(-0.382 t/RC) + 0.171 e^(-2.618 t/RC)
    RC = 10e3 * 10e-9
    eq = transfer_function(topology("rc-ladder-2", R1=10e3, R2=10e3, C1=10e-9, C2=10e-9))
    tt = np.linspace(0, 10 * RC, 50)
    np.testing.assert_allclose(eq.step_response(tt), 1 - 1.1708 * np.exp(-0.38197 * tt / RC)
                               + 0.1708 * np.exp(-2.61803 * tt / RC), atol=2e-4)


def test_integrator_pole_at_zero_by_partial_fractions():
    # Ideal integrator H = -1/(s R C): step response -t/(R C) (textbook).
    tf = TransferFunction((-1e3,), (1.0, 0.0))
    t = np.linspace(-1e-3, 5e-3, 301)
    assert modal_step_response(tf, t) is not None
    np.testing.assert_allclose(tf.step_response(t), np.where(t < 0, 0.0, -1e3 * t), rtol=1e-12, atol=1e-15)
    assert math.isinf(tf.dc_gain)
