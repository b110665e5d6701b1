"""No starting values from the user, ever: convergence over a wide grid.

Issue 4 asks for convergence in 100 % of a grid of captures spanning time
constants from 1 ns to 10 s, tau2/tau1 from 0.02 to 1 and Q from 0.1 to 30.
Responses are simulated with python-control (step_response); the reported
edge time is late by about the response's own delay, as conditioning reports
it without an input channel (the output's 50 % crossing), so the engine has
to find the true edge time too. Each fit must converge, be determined and
land within a few percent of the truth (noise 0.1 % of the step).
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from fitkit.fitting import fit_segments

from support.fitting_sims import first_order_tf, second_order_tf, simulated_segment, step_control, two_pole_tf

TIME_SCALES = (1e-9, 1e-6, 1e-3, 1.0, 10.0)


def _segment(tf, scale, dt, n_after, seed, edge_error):
    rng = np.random.default_rng(seed)
    return simulated_segment(tf, dt=dt, n_before=100, n_after=n_after, rng=rng, noise=1e-3,
                             edge_time=7.0 * scale, edge_error=edge_error, simulator=step_control)


@pytest.mark.parametrize("tau", TIME_SCALES)
def test_first_order_converges_from_1ns_to_10s(tau):
    seg = _segment(first_order_tf(tau), tau, tau / 50, 500, 1, edge_error=0.69 * tau)
    r = fit_segments([seg], "first-order", derived=False)
    assert r.parameters["tau"].value == pytest.approx(tau, rel=0.01)
    assert r.parameters["t0"].value == pytest.approx(7.0 * tau, abs=0.02 * tau)


@pytest.mark.parametrize("tau1", (1e-9, 1e-3, 10.0))
@pytest.mark.parametrize("ratio", (0.02, 0.1, 0.3, 0.6))
def test_two_real_poles_converge(tau1, ratio):
    tau2 = ratio * tau1
    seg = _segment(two_pole_tf(tau1, tau2), tau1, tau1 / 100, 1000, 2, edge_error=tau1)
    r = fit_segments([seg], "two-real-pole", derived=False)
    assert r.parameters["tau1"].value == pytest.approx(tau1, rel=0.03)
    assert r.parameters["tau2"].value == pytest.approx(tau2, rel=0.10)
    assert r.parameters["tau1"].determined and r.parameters["tau2"].determined


@pytest.mark.parametrize("tau", (1e-9, 1e-3, 10.0))
@pytest.mark.parametrize("form", ("critically-damped", "second-order"))
def test_equal_poles_converge(tau, form):
    # tau2/tau1 = 1: the double pole, Q = 1/2 (textbook: f0 = 1/(2 pi tau)).
    seg = _segment(two_pole_tf(tau, tau), tau, tau / 100, 1000, 3, edge_error=tau)
    r = fit_segments([seg], form)
    assert r.quantity("f0").value == pytest.approx(1 / (2 * math.pi * tau), rel=0.01)
    assert r.quantity("Q").value == pytest.approx(0.5, rel=0.01)


@pytest.mark.parametrize("scale", (1e-9, 1.0, 10.0))
@pytest.mark.parametrize("q", (0.1, 0.3, 0.7, 2.0, 8.0, 30.0))
def test_second_order_converges_for_q_from_0p1_to_30(scale, q):
    # scale = 1/omega0; f0 = 1/(2 pi scale).
    f0 = 1 / (2 * math.pi * scale)
    n_after = 2000 if q < 10 else 6000
    seg = _segment(second_order_tf(f0, q), scale, scale / 20, n_after, 4, edge_error=scale)
    r = fit_segments([seg], "second-order", derived=False)
    # At Q = 0.1 the fast pole is two samples long and f0 = 1/(2 pi sqrt(tau1 tau2))
    # is known to about +-13 % only: the check is then the interval.
    tolerance = 0.15 if q < 0.2 else 0.03
    for name, truth in (("f0", f0), ("Q", q)):
        assert r.parameters[name].value == pytest.approx(truth, rel=tolerance)
        assert r.parameters[name].contains(truth)


def test_auto_selection_converges_on_ringing_and_slow_responses():
    for q, expected in ((5.0, "underdamped"), (30.0, "underdamped")):
        seg = _segment(second_order_tf(1e6, q), 1e-6, 1 / (1e6 * 40), 4000, 5, edge_error=0.1e-6)
        assert fit_segments([seg], "auto", derived=False).model == expected


def test_a_runaway_time_constant_is_put_in_order_without_overflow():
    """A candidate fit whose time constant ran away (a log of 900: exp overflows a float) goes
    through the check of its form's canonical order at the joint model's clip instead of raising
    OverflowError (a half record of a real RLC capture crashed this way)."""
    from dataclasses import replace

    from fitkit.fitting.form_fit import _canonical, fit_form
    from fitkit.forms import get_form

    seg = _segment(two_pole_tf(1e-3, 2e-4), 1e-3, 2e-5, 500, 3, edge_error=0.0)
    fitted = fit_form([seg], get_form("two-real-pole"))
    runaway = replace(fitted.fit, values={**fitted.fit.values, "log_tau0": 900.0})
    assert _canonical(fitted.joint, runaway).values == runaway.values
