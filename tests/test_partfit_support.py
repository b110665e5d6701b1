"""Tests of the shared helpers in tests/support/circuit_sims.py against outside references."""

from __future__ import annotations

import math

import numpy as np

from support.circuit_sims import rc_ladder_tf, rc_low_pass_tf, series_rlc_across_c_tf, step_capture


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
