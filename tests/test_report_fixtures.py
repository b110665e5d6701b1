"""Tests of the shared helpers in tests/support/report_results.py against outside references."""

from __future__ import annotations

import math

import numpy as np

from support.report_results import FORM_SHAPES, make_result, time_scale, unit_step_response


def test_first_order_simulation_matches_textbook_exponential():
    # textbook first-order step response 1 - exp(-t/tau)
    tau = FORM_SHAPES["first-order"]["tau"][0]
    t = np.linspace(-2e-6, 50e-6, 400)
    y = unit_step_response("first-order", t)
    expected = np.where(t >= 0, 1 - np.exp(-np.clip(t, 0, None) / tau), 0.0)
    assert np.max(np.abs(y - expected)) < 1e-6


def test_underdamped_simulation_overshoot_matches_textbook_formula():
    # textbook percent overshoot 100 exp(-pi zeta / sqrt(1 - zeta^2)), zeta = 1/(2Q)
    t = np.linspace(0, 10 * time_scale("underdamped"), 20000)
    y = unit_step_response("underdamped", t)
    zeta = 1 / (2 * 3.0)
    assert abs((y.max() - 1) * 100 - 100 * math.exp(-math.pi * zeta / math.sqrt(1 - zeta ** 2))) < 0.05


def test_rc_ladder_fixture_matches_trade_fact():
    # equal-part RC ladder: 1 - 1.171 e^(-0.382 t/RC) + 0.171 e^(-2.618 t/RC) (common practice, no source)
    rc = 10e-6
    t = np.linspace(0, 8 * rc, 300)
    y = unit_step_response("two-real-pole", t)
    expected = 1 - 1.171 * np.exp(-0.382 * t / rc) + 0.171 * np.exp(-2.618 * t / rc)
    assert np.max(np.abs(y - expected)) < 2e-3


def test_make_result_segments_alternate_and_fit_the_data():
    result = make_result("first-order", n_edges=3)
    assert [s.direction for s in result.segments] == [1, -1, 1]
    for seg in result.segments:
        assert seg.time[0] < seg.edge_time < seg.time[-1]
        assert np.std(seg.residual) < 0.02  # 10 mV noise + 10-bit quantisation
