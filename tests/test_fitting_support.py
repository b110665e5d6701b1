"""Tests of the shared helpers in tests/support/fitting_sims.py against outside references."""

from __future__ import annotations

import numpy as np

from support.fitting_sims import coloured_noise, first_order_tf, second_order_tf, step_control, step_scipy


def test_scipy_first_order_step_matches_textbook():
    # Textbook: unit step of 1/(1 + s tau) is 1 - exp(-t/tau).
    t = np.linspace(0, 5e-6, 200)
    assert np.allclose(step_scipy(first_order_tf(1e-6), t), 1 - np.exp(-t / 1e-6), atol=1e-9)


def test_control_and_scipy_agree_on_underdamped_step():
    # python-control and scipy.signal are independent implementations.
    t = np.linspace(0, 5e-3, 500)
    tf = second_order_tf(1e3, 5.0)
    assert np.allclose(step_control(tf, t), step_scipy(tf, t), atol=1e-6)


def test_band_limited_noise_is_correlated_and_white_is_not():
    rng = np.random.default_rng(0)
    white, band = coloured_noise(rng, 4000, 1.0, None), coloured_noise(rng, 4000, 1.0, 0.15)
    lag1 = lambda e: float(np.corrcoef(e[:-1], e[1:])[0, 1])
    assert abs(lag1(white)) < 0.05 and lag1(band) > 0.8
