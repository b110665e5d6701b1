"""Parameters of simulated responses are recovered within their 95 % intervals.

Responses come from scipy.signal and python-control (see test_fitting_support),
with white noise, band-limited noise (Butterworth) and 8-12 bit quantisation.
Each single-capture check is a 95 % statement, so each seed below was run once
and the checks use several captures: "at least k of n inside".
"""

from __future__ import annotations

import dataclasses
import math

import numpy as np
import pytest
from scipy import signal

from fitkit.conditioning.segment import StepSegment
from fitkit.errors import FitError
from fitkit.fitting import fit_capture, fit_segments
from fitkit.fitting.measured_input import response_by_superposition, response_to_input
from fitkit.forms import FORMS

from support.fitting_sims import (first_order_tf, second_order_tf, simulated_segment, square_wave_capture,
                                  step_control, two_pole_tf)


def _inside_count(results, truth: dict[str, float]) -> int:
    return sum(all(r.quantity(k).contains(v) for k, v in truth.items()) for r in results)


@pytest.mark.parametrize("band, bits", [(None, None), (None, 8), (0.2, None), (0.2, 12)])
def test_first_order_tau_recovered(band, bits):
    # Simulator: scipy.signal.step of 1/(1 + s tau).
    rng = np.random.default_rng(11)
    tau = 3.3e-6
    results = [fit_segments([simulated_segment(first_order_tf(tau), dt=tau / 40, n_before=80, n_after=500,
                                               rng=rng, noise=0.01, band=band, bits=bits,
                                               edge_error=0.7 * tau)], "first-order")
               for _ in range(10)]
    assert _inside_count(results, {"tau": tau}) >= 8
    # textbook first-order results (rise time tau ln 9, 2 % settling tau ln 50)
    r = results[0]
    assert r.derived["rise_time"].value == pytest.approx(r.parameters["tau"].value * math.log(9), rel=1e-3)
    assert r.derived["settling_time_2pct"].value == pytest.approx(r.parameters["tau"].value * math.log(50),
                                                                  rel=1e-3)


@pytest.mark.parametrize("band", [None, 0.25])
def test_underdamped_f0_q_recovered_with_python_control(band):
    # Simulator: python-control step_response of w0^2/(s^2 + w0/Q s + w0^2).
    rng = np.random.default_rng(21)
    f0, q = 12e3, 4.0
    results = [fit_segments([simulated_segment(second_order_tf(f0, q), dt=1 / (f0 * 40), n_before=60,
                                               n_after=600, rng=rng, noise=0.02, band=band, bits=10,
                                               simulator=step_control)], "underdamped")
               for _ in range(10)]
    assert _inside_count(results, {"f0": f0, "Q": q}) >= 8
    r = results[0]
    # Textbook percent overshoot 100 exp(-pi zeta / sqrt(1 - zeta^2)), zeta = 1/(2Q).
    zeta = r.derived["zeta"].value
    assert r.derived["overshoot"].value == pytest.approx(100 * math.exp(-math.pi * zeta / math.sqrt(1 - zeta ** 2)),
                                                         rel=1e-3)
    assert zeta == pytest.approx(1 / (2 * r.parameters["Q"].value), rel=1e-9)


def test_two_real_poles_recovered_and_second_order_quantities_present():
    # Simulator: python-control step_response of 1/((1 + s tau1)(1 + s tau2)).
    rng = np.random.default_rng(31)
    tau1, tau2 = 10e-6, 2.5e-6
    results = [fit_segments([simulated_segment(two_pole_tf(tau1, tau2), dt=tau1 / 50, n_before=50,
                                               n_after=600, rng=rng, noise=0.003,
                                               simulator=step_control)], "two-real-pole")
               for _ in range(8)]
    assert _inside_count(results, {"tau1": tau1, "tau2": tau2}) >= 6
    d = results[0].derived
    # For any second-order form derived holds f0 and Q (textbook: f0 = 1/(2 pi sqrt(tau1 tau2)),
    # Q = sqrt(tau1 tau2)/(tau1 + tau2)).
    t1, t2 = results[0].parameters["tau1"].value, results[0].parameters["tau2"].value
    assert d["f0"].value == pytest.approx(1 / (2 * math.pi * math.sqrt(t1 * t2)), rel=1e-9)
    assert d["Q"].value == pytest.approx(math.sqrt(t1 * t2) / (t1 + t2), rel=1e-9)
    assert d["Q"].ci95[0] < d["Q"].value < d["Q"].ci95[1]


def test_equal_part_rc_ladder_gives_golden_ratio_poles_and_q_one_third():
    # Common practice, no source: an unbuffered two-stage RC ladder with equal
    # R and C has poles at 0.382/RC and 2.618/RC (taus RC/0.382 and RC/2.618),
    # tau0 = RC, Q = 1/3. The response is simulated from the ladder's nodal
    # equations by scipy.signal.lsim (state space, not from those numbers).
    r_, c_ = 10e3, 10e-9
    rc = r_ * c_
    # states v1, v2:  C dv1/dt = (vin - v1)/R - (v1 - v2)/R,  C dv2/dt = (v1 - v2)/R
    a = np.array([[-2.0, 1.0], [1.0, -1.0]]) / rc
    b = np.array([[1.0], [0.0]]) / rc
    sys = signal.StateSpace(a, b, np.array([[0.0, 1.0]]), np.array([[0.0]]))
    dt = rc / 40
    t_after = np.arange(1200) * dt
    _, y, _ = signal.lsim(sys, np.ones_like(t_after), t_after)
    rng = np.random.default_rng(41)
    t = 1e-3 + np.arange(-100, 1200) * dt
    v = np.concatenate([np.zeros(100), y]) + rng.normal(0, 2e-4, t.size)
    seg = StepSegment(0, t.size, t, v, None, 1e-3, 1, 0.0, 1.0, noise_rms=2e-4)
    r = fit_segments([seg], "two-real-pole")
    tau1, tau2 = r.parameters["tau1"], r.parameters["tau2"]
    assert tau1.contains(rc / 0.381966) and tau2.contains(rc / 2.618034)
    assert r.derived["Q"].contains(1 / 3)
    assert r.derived["Q"].value == pytest.approx(1 / 3, rel=0.01)
    # unit-step response 1 - 1.171 e^(-0.382 t/RC) + 0.171 e^(-2.618 t/RC) (same source)
    x = t_after / rc
    assert np.allclose(y, 1 - 1.1708 * np.exp(-0.38197 * x) + 0.1708 * np.exp(-2.618 * x), atol=2e-4)


def test_measured_input_removes_the_bias_of_a_slow_source_edge():
    # A first-order system (tau) driven through a slow source (an RC of tau/3),
    # simulated with scipy.signal.lsim. With the measured input the fit is
    # unbiased; an ideal-step fit absorbs the source's slowness and is biased.
    rng = np.random.default_rng(51)
    tau = 5e-6
    cap = square_wave_capture(first_order_tf(tau), period=100e-6, dt=tau / 25, n_periods=2, rng=rng,
                              noise=0.005, source_tau=tau / 3)
    from fitkit.conditioning import analyse_steps
    segs = analyse_steps(cap, input="vin", output="vout").segments
    measured = fit_segments(segs, "first-order")
    assert measured.details.mode == "measured input"
    assert measured.parameters["tau"].contains(tau)
    assert measured.parameters["tau"].value == pytest.approx(tau, rel=0.01)
    ideal = fit_segments(segs, "first-order", measured_input=False)
    assert ideal.details.mode == "ideal step"
    assert not ideal.parameters["tau"].contains(tau)
    assert ideal.parameters["tau"].value > 1.1 * tau  # biased long by the slow edge


def test_joint_fit_of_square_wave_shares_tau_and_keeps_per_edge_levels():
    # Simulator: scipy.signal.lsim of a square wave through 1/(1 + s tau).
    rng = np.random.default_rng(61)
    tau = 2e-6
    cap = square_wave_capture(first_order_tf(tau), period=40e-6, dt=tau / 20, n_periods=4, rng=rng,
                              noise=0.01, amplitude=2.0, with_input=False)
    from fitkit.conditioning import analyse_steps
    segs = analyse_steps(cap, output="vout").segments
    assert len(segs) >= 6
    r = fit_segments(segs, "first-order")
    assert r.parameters["tau"].contains(tau)
    edges = r.details.edges
    assert len(edges) == len(segs)
    steps = [e["step"].value for e in edges]
    assert all(abs(abs(s) - 2.0) < 0.02 for s in steps) and min(steps) < 0 < max(steps)
    # one shared tau is better determined than from a single edge
    single = fit_segments(segs[:1], "first-order")
    assert r.parameters["tau"].stderr < 0.6 * single.parameters["tau"].stderr


def test_superposition_matches_scipy_lsim_and_foh_discretisation():
    # scipy.signal.lsim (linear interpolation of the input) is the reference.
    t = np.arange(0, 2e-3, 1e-6)
    u = np.where(t > 2e-4, 1 - np.exp(-(t - 2e-4) / 3e-5), 0.0) + 0.25
    form = FORMS["underdamped"]
    shape = {"f0": 8e3, "Q": 3.0}
    num, den = form.transfer_function(**shape)
    _, ref, _ = signal.lsim((num, den), u - 0.25, t)
    y = response_by_superposition(lambda tt: form.unit_step(tt, **shape), u, 1e-6)
    assert np.allclose(y - 0.25, ref, atol=1e-8)
    assert np.allclose(response_to_input(num, den, u, 1e-6) - 0.25, ref, atol=1e-8)


def test_flat_trace_is_reported_as_not_determined():
    rng = np.random.default_rng(71)
    t = np.arange(-100, 500) * 1e-6
    seg = StepSegment(0, t.size, t, rng.normal(0, 0.01, t.size), None, 0.0, 1, 0.0, 0.0, noise_rms=0.01)
    with pytest.raises(FitError):
        fit_segments([seg], "auto")


def test_long_capture_is_bin_averaged_and_still_covers_the_truth():
    # 200 000 samples on one edge: averaged into bins before the nonlinear fit.
    rng = np.random.default_rng(81)
    tau = 1e-3
    seg = simulated_segment(first_order_tf(tau), dt=tau / 20000, n_before=20000, n_after=180000, rng=rng,
                            noise=0.05, simulator=lambda tf, t: 1 - np.exp(-t / tau))
    r = fit_segments([seg], "first-order")
    assert r.details.bin_size > 1
    assert r.parameters["tau"].contains(tau)
    # the interval is as narrow as the full-resolution Cramer-Rao scale: noise/sqrt(n) order
    assert r.parameters["tau"].stderr / tau < 5 * 0.05 / math.sqrt(180000) * 3


def test_fit_capture_runs_conditioning_and_fits_averaged_or_single_edges():
    # Square wave through 1/(1 + s tau) by scipy.signal.lsim, with input channel.
    from fitkit.fitting import fit_capture
    rng = np.random.default_rng(91)
    tau = 1e-6
    cap = square_wave_capture(first_order_tf(tau), period=20e-6, dt=tau / 20, n_periods=4, rng=rng,
                              noise=0.02, path="bench.csv")
    every = fit_capture(cap, model="first-order")
    averaged = fit_capture(cap, model="first-order", average=True)
    single = fit_capture(cap, model="first-order", edge_time=30e-6)
    assert every.file == "bench.csv"
    assert len(averaged.details.edges) == 2 < len(every.details.edges)  # one per direction
    assert len(single.details.edges) == 1
    for r in (every, averaged, single):
        assert r.parameters["tau"].contains(tau)
        assert r.derived["step"].value == pytest.approx(1.0, rel=0.02)  # gain x input step (1 V)


def test_an_inadequate_form_is_flagged_by_its_structured_residuals():
    # A ringing response (python-control, Q = 3) fitted with first-order on purpose.
    rng = np.random.default_rng(95)
    seg = simulated_segment(second_order_tf(10e3, 3.0), dt=1 / (10e3 * 40), n_before=60, n_after=600, rng=rng,
                            noise=0.01, simulator=step_control)
    bad = fit_segments([seg], "first-order")
    good = fit_segments([seg], "underdamped")
    assert bad.diagnostics.structured_residual and not good.diagnostics.structured_residual
    assert not bad.describes_data and good.describes_data
    assert "does not describe this capture" in bad.adequacy.finding
    assert bad.diagnostics.residual_lag1 > 0.5 > abs(good.diagnostics.residual_lag1)


@pytest.mark.parametrize("n", [1, 2, 3, 4, 7, 50, 1001])
def test_bin_rule_gives_the_discrete_mean_of_the_samples(n):
    # A bin's data value is the mean of its n samples; the 3-point rule must give
    # the same mean of the model: exact for polynomials to degree 5 (Gauss
    # quadrature of the discrete uniform measure; Golub & Welsch, Math. Comp. 23
    # (1969) 221-230) and for any bin of up to three samples.
    from fitkit.fitting.binning import discrete_mean_nodes

    dt = 0.01
    first = np.array([-0.3, 0.0, 1.7])
    samples = first[:, None] + dt * np.arange(n)[None, :]
    nodes, weights = discrete_mean_nodes(samples.mean(axis=1), np.full(3, n), dt)
    np.testing.assert_allclose(weights.sum(axis=1), 1.0, rtol=0, atol=1e-15)
    for degree in range(6):
        exact = (samples**degree).mean(axis=1)
        np.testing.assert_allclose((nodes**degree * weights).sum(axis=1), exact, rtol=1e-10, atol=1e-13)
    # a ringing component over the widest bin the fit makes (half a radian):
    # the continuous mean over the bin would be off by (omega dt)^2 / 24 (6.5e-4 for n = 4)
    omega = 0.5 / (n * dt)
    ringing = lambda t: np.exp(-0.02 * omega * t) * np.cos(omega * t)
    got = (ringing(nodes) * weights).sum(axis=1)
    assert np.max(np.abs(got - ringing(samples).mean(axis=1))) < (1e-14 if n <= 3 else 1e-6)


def test_binned_high_q_record_without_noise_gives_q_exactly():
    # Q = 30 over 200 periods at 60 samples per period: 12 000 samples, so the
    # edge is bin-averaged. Modelling a bin by the continuous mean over it
    # instead of the mean of its samples biased Q by (omega dt)^2 / 24 (about
    # 4e-4 here, far beyond the interval at high SNR).
    q, f0 = 30.0, 1e3
    dt = 1 / (60 * f0)
    seg = simulated_segment(second_order_tf(f0, q), dt=dt, n_before=600, n_after=12000,
                            rng=np.random.default_rng(5), noise=0.0)
    seg = dataclasses.replace(seg, noise_rms=1e-6)
    r = fit_segments([seg], "underdamped", intervals="covariance")
    assert r.details.bin_size > 1
    assert abs(r.parameters["Q"].value / q - 1) < 2e-6
    assert abs(r.parameters["f0"].value / f0 - 1) < 1e-8


@pytest.mark.parametrize("with_input", [True, False])
def test_the_previous_edges_tail_is_modelled_in_a_long_square_wave(with_input):
    # Edges ten time constants apart: each window starts 7.5 tau after the
    # previous edge, when e^-7.5 = 5.5e-4 of the step is still settling (the
    # first-order response, any circuit-theory text). At a noise of 1e-4 of the
    # step over 20 000 samples per edge that tail is far above the noise; left
    # out, it made the residuals structured (lag-1 autocorrelation 0.48, the
    # intervals widened x7 and tau's standard error 10-30 times larger).
    # With the input channel the bin-resolution simulation keeps a model error
    # of order (bin / tau)^2 / 100 of the step; at this extreme SNR (80 dB over
    # 120 000 samples) that is still about one standard error, so that mode is
    # held to 4 standard errors (a bias of ~1.3 sd over 8 seeds, measured).
    tau = 1e-3
    for seed in range(3):
        cap = square_wave_capture(first_order_tf(tau), period=20 * tau, dt=tau / 2000, n_periods=3,
                                  rng=np.random.default_rng(seed), noise=1e-4, with_input=with_input)
        r = fit_capture(cap, model="first-order")
        est = r.parameters["tau"]
        assert abs(est.value - tau) < (4.0 if with_input else 2.5) * est.stderr
        assert est.stderr / tau < 6e-6
        assert r.diagnostics.ci_widening < 1.5
