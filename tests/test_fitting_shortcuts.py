"""Shortcuts taken for speed on many-edge captures (issue 20) give the plain computation's numbers.

- a ringing response's two-real-pole candidate starts at the underdamped fit's optimum
  instead of searching from the grid (fitkit.fitting.step_fit);
- measured-input mode: the gain and baseline columns of the Jacobian in closed form
  (JointModel.level_columns), and the drive's noise estimated once per direction of edge
  from all their rests (fitkit.fitting.input_noise);
- bins held above the point budget by their width cap are the caps, found at once
  (fitkit.fitting.binning.variable_bins).

The captures are textbook step responses summed over the edges (tests/support/square_waves.py,
Ogata's second-order step response, from memory), checked against the plain computation and,
for the drive's noise, against the autocovariance of a first-order autoregressive process,
gamma(k) = sigma_e^2 phi^k / (1 - phi^2) (Box & Jenkins, Time Series Analysis, 3rd ed., 1994,
section 3.2, from memory).
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from fitkit.capture import Capture, Channel
from fitkit.conditioning import analyse_steps
from fitkit.fitting import block_jacobian, fit_capture
from fitkit.fitting.binning import MAX_BIN_WIDTH, variable_bins
from fitkit.fitting.form_fit import fit_form
from fitkit.fitting.input_noise import input_noise_autocovariances
from fitkit.fitting.form_fit import physical_shape
from fitkit.forms import get_form
from support.square_waves import ringing_square_wave


def _output_only(t, y) -> Capture:
    return Capture(time=t, channels=(Channel("output", y, "V", "V"),))


def test_a_ringing_two_real_pole_candidate_started_at_the_underdamped_optimum_is_the_grid_optimum():
    """Q = 3: the two-real-pole form (the same function in tau0 and Q) started at the
    underdamped optimum ends where its search from the grid of starts ends, beyond
    Q = 1/2 by the same standard errors; the capture's choice is unchanged."""
    t, _, y, f0 = ringing_square_wave(20_000, 40, sigma=0.01, seed=5)
    segments = analyse_steps(_output_only(t, y)).segments[:8]
    under = fit_form(segments, get_form("underdamped"))
    start = physical_shape(under)
    start = {"tau0": 1.0 / (2.0 * math.pi * start.pop("f0")), **start}
    form = get_form("two-real-pole")
    started = fit_form(segments, form, shape_start=start)
    grid = fit_form(segments, form)
    assert started.converged and grid.converged
    assert started.fit.rss == pytest.approx(grid.fit.rss, rel=1e-7)
    for name in ("log_tau0", "log_Q"):
        assert abs(started.fit.values[name] - grid.fit.values[name]) < 1e-3 * grid.fit.stderr[name]
    result = fit_capture(_output_only(t, y))
    assert result.model == "underdamped"
    rows = {row.model: row for row in result.selection}
    assert "the response rings" in rows["two-real-pole"].note
    q = result.parameters["Q"]
    assert q.ci95[0] <= 3.0 <= q.ci95[1]
    assert result.parameters["f0"].ci95[0] <= f0 <= result.parameters["f0"].ci95[1]


def _with_drive(t, u, y) -> Capture:
    return Capture(time=t, channels=(Channel("input", u, "V", "V"), Channel("output", y, "V", "V")))


def test_measured_input_gain_and_baseline_columns_in_closed_form_are_the_differenced_ones():
    """baseline_i + gain * (the response to the measured input): its gain and baseline
    columns in closed form agree with the grouped central differences they replace."""
    t, u, y, _ = ringing_square_wave(12_000, 12, sigma=0.01, seed=8)
    segments = analyse_steps(_with_drive(t, u, y)).segments
    ff = fit_form(segments, get_form("underdamped"))
    joint, values, names = ff.joint, ff.fit.values, ff.fit.names
    assert joint.measured_input
    known = joint.level_columns(values)
    assert set(known) == {n for n in names if not n.startswith("log_")}
    theta = np.array([values[n] for n in names])
    const = {k: v for k, v in values.items() if k not in names}

    def model(th):
        return joint.evaluate(None, **{**const, **dict(zip(names, th))})

    by_differences = block_jacobian.dense(block_jacobian.grouped_jacobian(model, theta, names, joint.bounds))
    closed = block_jacobian.dense(block_jacobian.grouped_jacobian(model, theta, names, joint.bounds, known=known))
    scale = np.max(np.abs(by_differences), axis=0)
    np.testing.assert_allclose(closed / scale, by_differences / scale, rtol=0, atol=1e-6)


def test_the_drives_noise_pooled_over_its_rests_is_the_ar1_process():
    """A drive whose noise is a first-order autoregressive process (phi = 0.6): the
    autocovariance estimated once per direction from every edge's rests matches
    gamma(k) = sigma_e^2 phi^k / (1 - phi^2) (long-run variance within 10 %), and every
    edge of one direction carries the same estimate."""
    phi, sigma_e = 0.6, 0.004
    t, u, y, _ = ringing_square_wave(40_000, 40, sigma=0.01, seed=3)
    rng = np.random.default_rng(33)
    e = rng.normal(0.0, sigma_e, u.size)
    noise = np.zeros(u.size)
    for k in range(1, u.size):  # x[k] = phi x[k-1] + e[k]
        noise[k] = phi * noise[k - 1] + e[k]
    segments = analyse_steps(_with_drive(t, u + noise, y)).segments
    ff = fit_form(segments, get_form("underdamped"))
    gammas = input_noise_autocovariances(ff.joint)
    unit = ff.joint.scaling.input_unit
    expected = sigma_e ** 2 / (1.0 - phi ** 2) / unit ** 2
    long_run = sigma_e ** 2 / (1.0 - phi) ** 2 / unit ** 2  # gamma(0) + 2 sum gamma(k)
    for direction in (0, 1):
        group = [g for i, g in enumerate(gammas) if i % 2 == direction]
        first = group[0]
        assert all(np.array_equal(g, first[:g.size]) or np.array_equal(first, g[:first.size]) for g in group)
        assert first[0] == pytest.approx(expected, rel=0.1)
        assert first[1] / first[0] == pytest.approx(phi, abs=0.05)
        assert first[0] + 2.0 * first[1:].sum() == pytest.approx(long_run, rel=0.1)


def test_bins_the_width_cap_holds_above_the_budget_are_the_caps():
    """A window whose samples are nearly half a time unit apart cannot be binned below the
    budget (no bin is wider than MAX_BIN_WIDTH): its bins are the caps themselves, and a
    window that can be is binned within the budget as before."""
    t_rel = (np.arange(500) - 125.3) * 0.446
    starts = variable_bins(t_rel, 0.446, 400)
    caps = np.floor(t_rel / MAX_BIN_WIDTH).astype(int)
    np.testing.assert_array_equal(starts, np.flatnonzero(np.diff(caps, prepend=caps[0] - 1)))
    widths = np.diff(t_rel[np.append(starts, t_rel.size - 1)])
    assert np.all(widths <= MAX_BIN_WIDTH + 0.446)
    fine = (np.arange(20_000) - 5_000.5) * 0.002
    assert variable_bins(fine, 0.002, 400).size <= 400
