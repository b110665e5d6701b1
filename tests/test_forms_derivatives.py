"""Closed-form time derivatives of the step responses (forms' ``step_derivatives``).

The edge delays of a square wave are solved by Newton steps that need the
response and its first two derivatives in time (fitkit/fitting/edge_delays.py);
forms that have them in closed form give them from one evaluation. Checked
against scipy.signal: the first derivative of a unit-step response is the
impulse response of the same transfer function (scipy.signal.impulse), and
the second that of s H(s) where H(s) has relative degree two (the second
derivative then starts at a finite value), else central differences of
scipy's impulse response. First order has no closed form on purpose (its
slope jumps at the edge; see fitkit/forms/first_order.py): its central
differences are checked the same way.
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy import signal

from fitkit.forms import get_form

T = np.linspace(0.0, 8.0, 801)  # seconds: the shapes below have time scales near 1 s

CASES = [
    ("second-order", {"f0": 0.25, "Q": 0.2}),
    ("second-order", {"f0": 0.25, "Q": 0.5}),   # critical damping: the branch boundary
    ("second-order", {"f0": 0.25, "Q": 0.5000001}),
    ("second-order", {"f0": 0.3, "Q": 3.0}),
    ("underdamped", {"f0": 0.4, "Q": 1.2}),
    ("two-real-pole", {"tau0": 0.5, "Q": 0.3}),
    ("two-real-pole", {"tau1": 1.1, "tau2": 0.2}),
    ("critically-damped", {"tau": 0.6}),
    ("three-real-pole", {"tau1": 1.0, "tau2": 0.5, "tau3": 0.2}),
    ("four-real-pole", {"tau1": 1.0, "tau2": 0.6, "tau3": 0.3, "tau4": 0.1}),
]


def _num_den(form, shape):
    num, den = form.transfer_function(**shape)
    return np.atleast_1d(np.asarray(num, dtype=float)), np.atleast_1d(np.asarray(den, dtype=float))


@pytest.mark.parametrize("name,shape", CASES)
def test_closed_form_derivatives_are_scipy_impulse_responses(name, shape):
    form = get_form(name)
    assert form.step_derivatives is not None
    f, d1, d2 = form.step_and_derivatives(T, 1e-6, **shape)
    np.testing.assert_allclose(f, form.unit_step(T, **shape), rtol=0, atol=1e-12)
    num, den = _num_den(form, shape)
    _, h = signal.impulse((num, den), T=T)              # scipy.signal: y' = h
    np.testing.assert_allclose(d1[1:], h[1:], rtol=1e-6, atol=1e-9 * np.max(np.abs(h)))
    if den.size - num.size >= 2:
        _, h2 = signal.impulse((np.append(num, 0.0), den), T=T)  # s H(s): y''
        np.testing.assert_allclose(d2[1:], h2[1:], rtol=1e-6, atol=1e-9 * np.max(np.abs(h2)))
    else:
        mid = (h[2:] - h[:-2]) / (T[2:] - T[:-2])         # central differences of scipy's h
        np.testing.assert_allclose(d2[1:-1], mid, rtol=2e-4, atol=1e-6)


@pytest.mark.parametrize("name,shape", CASES)
def test_zero_before_the_edge(name, shape):
    form = get_form(name)
    f, d1, d2 = form.step_and_derivatives(-T[1:], 1e-6, **shape)
    assert not np.any(f) and not np.any(d1) and not np.any(d2)


def test_first_order_takes_central_differences():
    form = get_form("first-order")
    assert form.step_derivatives is None
    _, d1, _ = form.step_and_derivatives(T, 1e-6, tau=0.7)
    _, h = signal.impulse(([1.0], [0.7, 1.0]), T=T)  # scipy.signal: y' = h
    np.testing.assert_allclose(d1[1:], h[1:], rtol=1e-6, atol=1e-9 * np.max(h))


def test_close_real_poles_take_central_differences():
    """Real poles too close for partial fractions (the step itself is then a
    divided difference) are differentiated by central differences of the unit
    step; the first derivative is still scipy's impulse response to the accuracy
    of the difference step."""
    form = get_form("three-real-pole")
    shape = {"tau1": 1.0, "tau2": 0.9999, "tau3": 0.5}
    assert form.step_derivatives(T, **shape) is None
    _, d1, _ = form.step_and_derivatives(T, 1e-5, **shape)
    num, den = _num_den(form, shape)
    _, h = signal.impulse((num, den), T=T)
    np.testing.assert_allclose(d1[1:], h[1:], rtol=1e-5, atol=1e-8)
