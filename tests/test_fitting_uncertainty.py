"""Intervals: profile likelihood against a brute-force profile, and the delta method.

The profile-likelihood interval (lmfit's conf_interval inside fitkit) is
checked against an independent profile computed here: for the NIST BoxBOD data
(y = b1 (1 - exp(-b2 x)), NIST StRD), b1 is solved in closed form for each
fixed b2 and the 95 % limits are where the residual sum of squares rises by
the factor 1 + F(0.95; 1, n - 2)/(n - 2) (the F-test profile definition,
Bates & Watts, Nonlinear Regression Analysis and Its Applications, Wiley
1988, sec. 6.1, from memory).
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import optimize, stats

from fitkit.conditioning.segment import StepSegment
from fitkit.fitting import fit_segments

from support.fitting_sims import first_order_tf, simulated_segment
from support.nist_strd import read_strd
from support.reference_paths import needs_nist_strd


def _boxbod_profile_limits() -> tuple[float, float, float]:
    params, x, y = read_strd("BoxBOD")

    def rss_at(b2: float) -> float:
        f = 1 - np.exp(-b2 * x)
        b1 = float(f @ y / (f @ f))  # closed-form least squares for b1
        return float(np.sum((y - b1 * f) ** 2))

    best = optimize.minimize_scalar(rss_at, bracket=(0.3, 0.5, 0.8), tol=1e-12)
    n, p = x.size, 2
    level = best.fun * (1 + stats.f.ppf(0.95, 1, n - p) / (n - p))
    lo = optimize.brentq(lambda b: rss_at(b) - level, 0.05, best.x)
    hi = optimize.brentq(lambda b: rss_at(b) - level, best.x, 50.0)
    return best.x, lo, hi


@needs_nist_strd
def test_profile_interval_matches_an_independent_profile_on_boxbod():
    params, x, y = read_strd("BoxBOD")
    seg = StepSegment(0, x.size, x, y, None, 0.0, 1, 0.0, float(y.max()))
    r = fit_segments([seg], "first-order", fixed={"baseline": 0.0, "t0": 0.0}, intervals="profile",
                     correlation="off")
    tau = r.parameters["tau"]
    assert tau.interval_method.startswith("profile likelihood")
    b2, b2_lo, b2_hi = _boxbod_profile_limits()
    # tau = 1/b2, so the limits swap
    assert tau.value == pytest.approx(1 / b2, rel=1e-6)
    assert tau.ci95[0] == pytest.approx(1 / b2_hi, rel=2e-3)
    assert tau.ci95[1] == pytest.approx(1 / b2_lo, rel=2e-3)
    # and it is visibly asymmetric about the estimate (why profiles are needed)
    below, above = tau.value - tau.ci95[0], tau.ci95[1] - tau.value
    assert above / below > 1.3 or below / above > 1.3


@needs_nist_strd
def test_auto_intervals_pick_the_profile_where_the_objective_is_asymmetric():
    params, x, y = read_strd("BoxBOD")
    seg = StepSegment(0, x.size, x, y, None, 0.0, 1, 0.0, float(y.max()))
    auto = fit_segments([seg], "first-order", fixed={"baseline": 0.0, "t0": 0.0}, correlation="off")
    assert auto.parameters["tau"].interval_method.startswith("profile likelihood")
    # a well-determined fit keeps the covariance interval, which then equals the profile closely
    rng = np.random.default_rng(9)
    seg = simulated_segment(first_order_tf(1e-3), dt=2e-5, n_before=50, n_after=500, rng=rng, noise=0.01)
    cov = fit_segments([seg], "first-order").parameters["tau"]
    prof = fit_segments([seg], "first-order", intervals="profile").parameters["tau"]
    assert cov.interval_method.startswith("covariance")
    assert prof.ci95 == pytest.approx(cov.ci95, rel=2e-3)


def test_delta_method_matches_closed_form_propagation_for_first_order():
    # Textbook first order: bandwidth = 1/(2 pi tau), so its relative standard
    # error equals tau's (first-order propagation).
    rng = np.random.default_rng(10)
    seg = simulated_segment(first_order_tf(2e-6), dt=5e-8, n_before=50, n_after=400, rng=rng, noise=0.02)
    r = fit_segments([seg], "first-order")
    tau, bw = r.parameters["tau"], r.derived["bandwidth_3db"]
    assert bw.value == pytest.approx(1 / (2 * math.pi * tau.value), rel=1e-9)
    assert bw.stderr / bw.value == pytest.approx(tau.stderr / tau.value, rel=1e-3)
    assert bw.ci95[0] == pytest.approx(1 / (2 * math.pi * tau.ci95[1]), rel=1e-3)


def test_correlated_noise_correction_is_stated_with_its_factor():
    rng = np.random.default_rng(12)
    seg = simulated_segment(first_order_tf(1e-3), dt=2e-5, n_before=50, n_after=500, rng=rng, noise=0.01,
                            band=0.1)
    r = fit_segments([seg], "first-order")
    d = r.diagnostics
    assert d.ci_widening > 1.5 and "sandwich" in d.correction and f"x{d.ci_widening:.2f}" in d.correction
    assert d.effective_samples < 0.5 * d.n_samples
    assert "widened" in r.parameters["tau"].interval_method


def test_correlated_residuals_whose_sandwich_cannot_be_evaluated_are_not_called_white():
    """Residuals from a first-order autoregressive process (phi = 0.8; Box & Jenkins, 1994,
    section 3.2, from memory) are correlated; when the sandwich covariance cannot be evaluated
    (here a plain covariance whose second variance is not positive, as rounding leaves it for a
    parameter combination the data do not determine) the correction is not applied and says so,
    instead of calling the residuals white noise."""
    from fitkit.fitting.uncertainty import NOT_EVALUATED, correlated_residual_correction

    rng = np.random.default_rng(5)
    e = rng.normal(0.0, 1.0, 600)
    r = np.zeros_like(e)
    for k in range(1, e.size):
        r[k] = 0.8 * r[k - 1] + e[k]
    t = np.linspace(0.0, 1.0, r.size)
    jacobian = np.column_stack([np.exp(-t), np.ones_like(t)])
    covariance = np.array([[1e-3, 0.0], [0.0, -1e-9]])
    out = correlated_residual_correction(jacobian, [r], [0, r.size], covariance, 1.0)
    assert not out.applied
    assert out.description.startswith(NOT_EVALUATED) and "white noise" not in out.description
    assert out.lag1 > 0.6
