"""Control charts, drift detection, capability, projection and repeatability against published
worked examples and tables (each source named beside its check)."""

from __future__ import annotations

import math

import numpy as np
import pytest

from fitkit.trends.capability import (capability, capability_index, potential_index, projection, repeatability,
                                      standard_uncertainty)
from fitkit.trends.charts import (D2, cusum, cusum_signals, ewma, ewma_signals, first_signal, process_baseline)
from fitkit.trends.phases import ChartSettings, watch

# NIST/SEMATECH e-Handbook of Statistical Methods, section 6.3.2.2 (individuals control
# chart example: flow rate of the first ten batches of a new process). Data and results from memory.
FLOW_RATE = [49.6, 47.6, 49.9, 51.3, 47.8, 51.2, 52.6, 52.4, 53.6, 52.1]


def test_individuals_chart_nist_example():
    base = process_baseline(np.array(FLOW_RATE), len(FLOW_RATE))
    # e-Handbook 6.3.2.2 (from memory): mean 50.81, MRbar 1.8778, UCL 55.8041, LCL 45.8159, MR UCL 6.1352
    assert base.centre == pytest.approx(50.81, abs=1e-9)
    assert base.mean_moving_range == pytest.approx(1.8778, abs=1e-4)
    lo, hi = base.individuals_limits
    assert hi == pytest.approx(55.8041, abs=2e-4)
    assert lo == pytest.approx(45.8159, abs=2e-4)
    assert base.moving_range_limit == pytest.approx(6.1352, abs=1e-3)  # D4 = 3.267 rounded
    # 3/d2 = 2.66 (the textbook's multiplier of MRbar; e-Handbook 6.3.2.2)
    assert 3 / D2 == pytest.approx(2.66, abs=0.001)


# e-Handbook section 6.3.2.4 (EWMA example): 20 observations, target 50, s = 2.0539,
# lambda = 0.3, L = 3; from memory.
EWMA_DATA = [52.0, 47.0, 53.0, 49.3, 50.1, 47.0, 51.0, 50.1, 51.2, 50.5, 49.6, 47.6, 49.9, 51.3, 47.8, 51.2, 52.6,
             52.4, 53.6, 52.1]
# (the 15th EWMA value, recalled as 49.34, is taken as 49.38: 49.34 does not lead to the
# recalled 16th value 49.92 from the 16th observation 51.2, while 49.38 does)
EWMA_PUBLISHED = [50.60, 49.52, 50.56, 50.18, 50.16, 49.21, 49.75, 49.85, 50.26, 50.33, 50.11, 49.36, 49.52, 50.05,
                  49.38, 49.92, 50.73, 51.23, 51.94, 51.99]


def test_ewma_nist_example():
    z, half_width = ewma(np.array(EWMA_DATA), 50.0, 2.0539, lam=0.3, width=3.0)
    np.testing.assert_allclose(z, EWMA_PUBLISHED, atol=0.006)
    # e-Handbook 6.3.2.4 (from memory): UCL 52.5884, LCL 47.4115; the process stays in control
    assert 50 + half_width == pytest.approx(52.5884, abs=2e-3)
    assert 50 - half_width == pytest.approx(47.4115, abs=2e-3)
    assert first_signal(ewma_signals(np.array(EWMA_DATA), 50.0, 2.0539, 0.3, 3.0)) is None


# e-Handbook section 6.3.2.3 (tabular CUSUM example): target 325, k = 0.3175, h = 4.1959
# (in the data's units, i.e. sigma = 1 here); the upper sum first exceeds h at the 14th
# observation (4.95). From memory.
CUSUM_DATA = [324.93, 324.68, 324.73, 324.35, 325.35, 325.23, 324.13, 324.53, 325.23, 324.60, 324.63, 325.15,
              328.33, 327.25, 327.83, 328.50, 326.68, 327.78, 326.88, 328.35]


def test_cusum_nist_example():
    upper, lower = cusum(np.array(CUSUM_DATA), 325.0, 1.0, k=0.3175)
    assert upper[12] == pytest.approx(3.0125, abs=1e-9)  # 328.33 - 325 - 0.3175
    assert upper[13] == pytest.approx(4.945, abs=1e-3)   # e-Handbook's 4.95, the first above h
    assert first_signal(cusum_signals(np.array(CUSUM_DATA), 325.0, 1.0, k=0.3175, h=4.1959)) == 13
    assert np.all(lower <= 4.1959)  # no downward signal


def _run_lengths(detector, shift: float, runs: int, length: int, seed: int) -> np.ndarray:
    """Run lengths (boards until the first signal) of ``runs`` independent N(shift, 1) series."""
    rng = np.random.default_rng(seed)
    out = []
    for _ in range(runs // 500):
        x = rng.standard_normal((500, length)) + shift
        first = first_signal(detector(x))
        assert np.all(first >= 0), "a run without a signal: make the series longer"
        out.append(first + 1)
    return np.concatenate(out)


@pytest.mark.parametrize("h, shift, published, tolerance", [
    # Montgomery, Introduction to Statistical Quality Control, table of ARLs of the tabular
    # CUSUM with k = 1/2 (from memory): h = 4: 168 in control, 8.38 at a 1-sigma shift;
    # h = 5: 465 in control, 10.4 at 1 sigma.
    (4.0, 0.0, 168.0, 0.08), (4.0, 1.0, 8.38, 0.05), (5.0, 0.0, 465.0, 0.08), (5.0, 1.0, 10.4, 0.05)])
def test_cusum_average_run_lengths(h, shift, published, tolerance):
    length = 6000 if shift == 0 else 200
    rl = _run_lengths(lambda x: cusum_signals(x, 0.0, 1.0, 0.5, h), shift, 2000, length, seed=17)
    assert rl.mean() == pytest.approx(published, rel=tolerance)


@pytest.mark.parametrize("lam, width, shift, published, tolerance", [
    # Lucas and Saccucci (1990), Technometrics 32(1), EWMA ARL tables, reproduced in Montgomery's
    # Introduction to Statistical Quality Control (from memory): lambda 0.2, L 2.962: ARL 500 in
    # control, 10.2 at a 1-sigma shift; lambda 0.1, L 2.814: 500 and 10.3.
    (0.2, 2.962, 0.0, 500.0, 0.08), (0.2, 2.962, 1.0, 10.2, 0.05), (0.1, 2.814, 1.0, 10.3, 0.05)])
def test_ewma_average_run_lengths(lam, width, shift, published, tolerance):
    length = 6000 if shift == 0 else 200
    rl = _run_lengths(lambda x: ewma_signals(x, 0.0, 1.0, lam, width), shift, 2000, length, seed=29)
    assert rl.mean() == pytest.approx(published, rel=tolerance)


def test_capability_nist_example():
    # e-Handbook section 6.1.6 (from memory): USL 20, LSL 8, mean 16, sigma 2:
    # Cp = 1.0, Cpk = min(0.667, 1.333) = 0.667
    assert potential_index(2.0, 8.0, 20.0) == pytest.approx(1.0)
    assert capability_index(16.0, 2.0, 8.0, 20.0) == pytest.approx(2 / 3)
    assert capability_index(16.0, 2.0, 8.0, None) == pytest.approx(4 / 3)  # one-sided: Cpl
    assert capability_index(16.0, 2.0, None, None) is None


def test_ppk_uses_the_overall_spread_and_cpk_the_within_spread():
    """ISO 22514-2: Cpk from the short-term (moving-range) sigma, Ppk from the sample standard
    deviation; a drifting process has Ppk < Cpk."""
    rng = np.random.default_rng(3)
    x = 100 + rng.standard_normal(400) + np.linspace(0, 6, 400)
    cap = capability(x, 90.0, 110.0)
    assert cap.sigma_overall == pytest.approx(np.std(x, ddof=1))
    assert cap.sigma_within == pytest.approx(np.mean(np.abs(np.diff(x))) / 1.128)
    assert cap.ppk < cap.cpk
    assert cap.ppk == pytest.approx(min(110 - x.mean(), x.mean() - 90) / (3 * np.std(x, ddof=1)))


def test_projection_of_a_straight_drift():
    values = 100.0 - 0.1 * np.arange(50) + np.tile([0.01, -0.01], 25)
    hours = np.arange(50) * 0.5
    p = projection(values, hours, 95.0, 105.0)
    assert p.significant and p.limit == 95.0
    assert p.slope_per_board == pytest.approx(-0.1, rel=1e-3)
    now = 100.0 - 0.1 * 49
    assert p.boards_to_limit == pytest.approx((now - 95.0) / 0.1, rel=1e-2)
    assert p.hours_to_limit == pytest.approx(p.boards_to_limit * 0.5, rel=1e-2)
    flat = projection(100 + np.tile([0.01, -0.01], 25), hours, 95.0, 105.0)
    assert not flat.significant and flat.boards_to_limit is None


def test_repeatability_chi_square():
    rng = np.random.default_rng(5)
    honest, too_narrow = [], []
    for board in range(200):
        u = rng.uniform(0.5, 2.0, size=3)
        x = 10 + rng.standard_normal(3) * u
        honest.append((x, u))
        too_narrow.append((x, u / 2))  # intervals half as wide as the scatter
    r = repeatability(honest)
    assert r.degrees_of_freedom == 400 and r.captures == 600
    assert r.ratio == pytest.approx(1.0, abs=0.15)
    from scipy.stats import chi2  # the distribution's survival function, an outside reference
    assert r.p_value == pytest.approx(chi2.sf(r.chi_square, r.degrees_of_freedom), rel=1e-9)
    assert repeatability(too_narrow).p_value < 1e-12
    assert repeatability([(np.array([1.0]), np.array([0.1]))]) is None
    assert standard_uncertainty(np.array([-1.96]), np.array([1.96]))[0] == pytest.approx(1.0, rel=1e-4)


def test_watch_finds_a_step_and_restarts_after_it():
    rng = np.random.default_rng(11)
    x = rng.standard_normal(200)
    x[120:] += 2.0  # a 2-sigma step at board 121
    phases = watch(x, None, ChartSettings(baseline=30))
    found = [p.detection for p in phases if p.detection is not None]
    assert found and 120 <= found[0].index <= 130 and found[0].direction == "up"
    assert phases[0].baseline.boards == 30
    assert phases[1].start == found[0].index + 1  # a new baseline after the drift


def test_watch_restarts_where_the_recorded_fixture_changes():
    x = np.concatenate([np.zeros(40) + np.tile([0.1, -0.1], 20), np.ones(40) * 5 + np.tile([0.1, -0.1], 20)])
    fixtures = ["bench 2"] * 40 + ["bench 3"] * 40
    phases = watch(x, fixtures, ChartSettings(baseline=30))
    assert [p.ended_by for p in phases] == ["fixture change", "end of data"]
    assert all(p.detection is None for p in phases)
    assert math.isclose(phases[1].baseline.centre, 5.0, abs_tol=0.02)
