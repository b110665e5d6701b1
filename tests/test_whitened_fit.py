"""Fits under band-limited noise: generalised least squares by AR prewhitening.

Band-limited noise is made as in benchmarks/_common.py: white Gaussian noise
through a 4th-order Butterworth low-pass at 0.15 of Nyquist
(scipy.signal.butter / lfilter) carrying 99 % of the variance, plus a white
floor carrying 1 %. Its exact autocorrelation is that of filtered white noise,
r[k] = 0.99 sum_i h[i] h[i+k] / sum_i h[i]^2 + 0.01 delta[k] (Papoulis &
Pillai, Probability, Random Variables and Stochastic Processes, 4th ed.,
McGraw-Hill 2002, ch. 9, chapter from memory).

The Cramer-Rao bound for a Gaussian signal in Gaussian noise of covariance C
is the inverse of the Fisher information J^T C^-1 J (Kay, Fundamentals of
Statistical Signal Processing: Estimation Theory, Prentice Hall 1993, ch. 3,
eq. 3.31), computed here with the textbook first-order step response
baseline + step (1 - exp(-(t - t0)/tau)) and its derivatives written out by
hand, and C the Toeplitz matrix of r (scipy.linalg.toeplitz).
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import linalg, signal

from fitkit.conditioning.segment import StepSegment
from fitkit.fitting import fit_segments
from fitkit.fitting.form_fit import fit_form
from fitkit.fitting.uncertainty import autoregressive_model
from fitkit.fitting.whitening import Whitener, WhitenedJointModel
from fitkit.forms import get_form
from fitkit.report.text import render_fit_text

CUTOFF, FLOOR = 0.15, 0.01
BASELINE, STEP = 0.5, 2.5
SIGMA = STEP / 100.0  # 40 dB signal-to-noise ratio, as the benchmark's base condition
TAU = 100e-6
DT = TAU / 40  # 40 samples per time constant
N_CAPTURES = 200


def _impulse(length: int = 2000) -> np.ndarray:
    b, a = signal.butter(4, CUTOFF)
    return signal.lfilter(b, a, np.eye(1, length)[0])


def band_noise(rng: np.random.Generator, n: int, sigma: float) -> np.ndarray:
    b, a = signal.butter(4, CUTOFF)
    h = _impulse()
    coloured = signal.lfilter(b, a, rng.standard_normal(n + 500))[500:] / math.sqrt(float(h @ h))
    return sigma * (math.sqrt(1 - FLOOR) * coloured + math.sqrt(FLOOR) * rng.standard_normal(n))


def band_autocorrelation(n: int) -> np.ndarray:
    h = _impulse()
    full = np.correlate(h, h, mode="full")[h.size - 1:] / float(h @ h)
    r = np.zeros(n)
    m = min(n, full.size)
    r[:m] = (1 - FLOOR) * full[:m]
    r[0] += FLOOR
    return r


def first_order_time() -> np.ndarray:
    n_after = int(round(6 * TAU / DT))
    return np.arange(-n_after // 5, n_after) * DT


def first_order_step(t: np.ndarray) -> np.ndarray:
    """Textbook RC step response (common practice, no source), edge at t = 0."""
    return BASELINE + STEP * np.where(t >= 0, 1 - np.exp(-np.clip(t, 0, None) / TAU), 0.0)


def tau_crlb(t: np.ndarray, sigma: float) -> float:
    """CRLB of tau for baseline, step, t0 and tau all unknown (Kay 1993, ch. 3, Gaussian case)."""
    after = t > 0
    decay = np.where(after, np.exp(-np.clip(t, 0, None) / TAU), 0.0)
    jac = np.column_stack([
        np.ones_like(t),                                   # d/d baseline
        np.where(after, 1 - decay, 0.0),                   # d/d step
        -STEP * decay / TAU,                               # d/d t0
        -STEP * np.where(after, t, 0.0) * decay / TAU**2,  # d/d tau
    ])
    cov = sigma**2 * linalg.toeplitz(band_autocorrelation(t.size))
    fisher = jac.T @ linalg.solve(cov, jac, assume_a="pos")
    return float(np.linalg.inv(fisher)[3, 3])


def segment(t: np.ndarray, y: np.ndarray, sigma: float) -> StepSegment:
    return StepSegment(0, t.size, t, y, None, 0.0, 1, float(y[t < 0].mean()), float(y[-t.size // 10:].mean()),
                       noise_rms=sigma)


@pytest.fixture(scope="module")
def first_order_study():
    """N_CAPTURES band-limited captures, each fitted with whitening (default) and without any correction."""
    t = first_order_time()
    clean = first_order_step(t)
    rng = np.random.default_rng(20261202)
    rows = []
    for _ in range(N_CAPTURES):
        seg = segment(t, clean + band_noise(rng, t.size, SIGMA), SIGMA)
        gls = fit_segments([seg], "first-order", intervals="covariance", derived=False)
        ols = fit_segments([seg], "first-order", intervals="covariance", derived=False, correlation="off")
        tau = gls.parameters["tau"]
        rows.append((tau.value, ols.parameters["tau"].value, tau.contains(TAU), gls.diagnostics.correction))
    return t, rows


@pytest.mark.slow
def test_whitened_fit_reaches_the_cramer_rao_bound(first_order_study):
    t, rows = first_order_study
    gls = np.array([r[0] for r in rows])
    ols = np.array([r[1] for r in rows])
    crlb = tau_crlb(t, SIGMA)
    mse_gls = float(np.mean((gls - TAU) ** 2))
    mse_ols = float(np.mean((ols - TAU) ** 2))
    # every capture was whitened (the noise is strongly correlated)
    assert all("generalised least squares" in r[3] for r in rows)
    assert mse_gls <= 1.25 * crlb, (mse_gls / crlb, mse_ols / crlb)
    # and the ordinary fit is clearly worse on the same captures (asymptotic efficiency
    # about 0.6 here: the OLS sandwich variance, Kay 1993, ch. 6)
    assert mse_ols > 1.4 * mse_gls


@pytest.mark.slow
def test_whitened_fit_intervals_cover(first_order_study):
    _, rows = first_order_study
    coverage = float(np.mean([r[2] for r in rows]))
    # 95 % intervals, 200 captures: binomial standard error 1.5 %
    assert 0.88 <= coverage <= 0.99, coverage


@pytest.mark.slow
def test_underdamped_coverage_and_the_stated_correction():
    """Underdamped f0 = 10 kHz, Q = 5 (the accuracy benchmark's cell), 10 samples per
    1/(2 pi f0). The response is the textbook second-order step response
    1 - e^(-zeta w t) (cos(wd t) + zeta w / wd sin(wd t)), zeta = 1/(2Q), wd = w sqrt(1 - zeta^2)
    (common practice, no source). The output names the whitening and its AR order
    in the diagnostics, the JSON and the text report."""
    f0, q = 10e3, 5.0
    w = 2 * math.pi * f0
    zeta = 1 / (2 * q)
    wd = w * math.sqrt(1 - zeta**2)
    dt = 1 / (10 * w)
    n_after = int(math.ceil(6 * (2 * q / w) / dt))
    t = np.arange(-n_after // 5, n_after) * dt
    tp = np.clip(t, 0, None)
    unit = np.where(t >= 0, 1 - np.exp(-zeta * w * tp) * (np.cos(wd * tp) + zeta * w / wd * np.sin(wd * tp)), 0.0)
    clean = BASELINE + STEP * unit
    rng = np.random.default_rng(31)
    hits = {"f0": 0, "Q": 0}
    for i in range(N_CAPTURES):
        seg = segment(t, clean + band_noise(rng, t.size, SIGMA), SIGMA)
        r = fit_segments([seg], "underdamped", intervals="covariance", derived=False)
        hits["f0"] += r.parameters["f0"].contains(f0)
        hits["Q"] += r.parameters["Q"].contains(q)
        if i == 0:
            text = r.diagnostics.correction
            assert "generalised least squares" in text and "order-" in text and "autoregressive" in text
            assert "order-" in r.to_dict()["diagnostics"]["correction"]
            assert "generalised least squares" in render_fit_text(r)
    for name, h in hits.items():
        assert 0.88 <= h / N_CAPTURES <= 0.99, (name, h / N_CAPTURES)


def test_white_noise_result_is_the_ordinary_fit():
    """White noise: the Ljung-Box test (1 % level) rarely fires, and then nothing changes."""
    t = first_order_time()
    clean = first_order_step(t)
    rng = np.random.default_rng(5)
    form = get_form("first-order")
    whitened = 0
    for _ in range(40):
        seg = segment(t, clean + rng.normal(0.0, SIGMA, t.size), SIGMA)
        auto = fit_form([seg], form)
        off = fit_form([seg], form, correlation="off")
        if "generalised least squares" in auto.correction.description:
            whitened += 1
            continue
        assert auto.fit.values == off.fit.values
        np.testing.assert_array_equal(auto.correction.covariance, off.correction.covariance)
    assert whitened <= 2  # a 1 % test over 40 captures


def test_whitening_filter_is_the_inverse_cholesky_factor_of_an_ar2_covariance():
    """For an AR(2) process with phi = (1.2, -0.5): rho(1) = phi1 / (1 - phi2),
    rho(k) = phi1 rho(k-1) + phi2 rho(k-2) (Yule-Walker equations; Box & Jenkins,
    Time Series Analysis, 1976, ch. 3, from memory). Whitening must turn the
    Toeplitz correlation matrix into (innovation variance) x identity, first
    points included (no points dropped)."""
    phi1, phi2 = 1.2, -0.5
    n = 30
    rho = np.zeros(n)
    rho[0], rho[1] = 1.0, phi1 / (1 - phi2)
    for k in range(2, n):
        rho[k] = phi1 * rho[k - 1] + phi2 * rho[k - 2]
    model = autoregressive_model(rho, 10**6, max_order=6)
    assert model.order == 2  # AIC picks the true order when the autocorrelation is exact
    np.testing.assert_allclose(model.coefficients, [phi1, phi2], atol=1e-12)
    # coefficients of every order agree with scipy's Toeplitz solver (Yule-Walker)
    np.testing.assert_allclose(model.partial[1], linalg.solve_toeplitz(rho[:1], rho[1:2]), atol=1e-12)
    w = Whitener(model, rho[1]).apply(np.eye(n), [0, n])
    white = w @ linalg.toeplitz(rho) @ w.T
    np.testing.assert_allclose(white, model.innovation[2] * np.eye(n), atol=1e-12)


def test_whitening_stays_within_each_edge():
    rng = np.random.default_rng(3)
    rho = 0.9 ** np.arange(10)
    w = Whitener(autoregressive_model(rho, 10**6, max_order=4), rho[1])
    x = rng.standard_normal((50, 2))
    bounds = [0, 20, 50]
    both = w.apply(x, bounds)
    np.testing.assert_allclose(both[:20], w.apply(x[:20], [0, 20]))
    np.testing.assert_allclose(both[20:], w.apply(x[20:], [0, 30]))


def test_prediction_error_filter_is_scipy_lfilter():
    """Past each piece's first p points the whitened series is the FIR filter
    [1, -phi_1, ..., -phi_p] as scipy.signal.lfilter runs it within the piece."""
    rng = np.random.default_rng(4)
    rho = 0.8 ** np.arange(12)
    w = Whitener(autoregressive_model(rho, 10**6, max_order=4), rho[1])
    p = w.order
    x = rng.standard_normal((70, 3))
    bounds = [0, 2, 40, 70]  # a piece shorter than p, and two longer ones
    out = w.apply(x, bounds)
    b = np.concatenate([[1.0], -w.model.coefficients])
    for lo, hi in zip(bounds[:-1], bounds[1:]):
        ref = signal.lfilter(b, [1.0], x[lo:hi], axis=0)
        np.testing.assert_allclose(out[lo + p:hi], ref[p:], atol=1e-13)


def test_not_applied_to_binned_records_or_measured_input():
    """A long record is fitted on bin averages, and a measured input is propagated
    separately: neither is whitened; the sandwich correction applies as before."""
    rng = np.random.default_rng(8)
    t = np.arange(-2000, 10000) * (TAU / 400)
    seg = segment(t, first_order_step(t) + band_noise(rng, t.size, SIGMA), SIGMA)
    r = fit_segments([seg], "first-order", derived=False)
    assert "sandwich" in r.diagnostics.correction
    assert "generalised least squares" not in r.diagnostics.correction
    # measured-input mode keeps the ordinary fit (the input-noise propagation assumes it)
    t = first_order_time()
    drive = np.where(t >= 0, 1.0, 0.0) + band_noise(rng, t.size, 0.002)
    seg = StepSegment(0, t.size, t, first_order_step(t) + band_noise(rng, t.size, SIGMA), drive, 0.0, 1,
                      BASELINE, BASELINE + STEP, input_before=0.0, input_after=1.0, noise_rms=SIGMA)
    ff = fit_form([seg], get_form("first-order"))
    assert ff.joint.measured_input and ff.correction.applied
    assert "generalised least squares" not in ff.correction.description


def test_the_objective_seen_after_the_fit_is_the_one_minimised():
    """Interval code after the fit (symmetry check, profile likelihood) reads the
    objective from the fit's joint model: after a whitened fit it must be the
    whitened sum of squares, stationary at the estimate and equal to the ordinary
    sum of squares there (so the fit's s2 holds for both). The edge falls between
    samples here: the first-order response has a kink at the edge, and with the
    edge exactly on a sample the objective is not differentiable in t0 there."""
    t = first_order_time() + 0.37 * DT
    rng = np.random.default_rng(17)
    seg = segment(t, first_order_step(t) + band_noise(rng, t.size, SIGMA), SIGMA)
    ff = fit_form([seg], get_form("first-order"))
    assert isinstance(ff.joint, WhitenedJointModel)

    def rss(values):
        r = ff.joint.weights * (ff.joint.y - ff.joint.evaluate(None, **values))
        return float(r @ r)

    best = rss(ff.fit.values)
    assert best == pytest.approx(ff.fit.rss, rel=1e-9)
    for j, name in enumerate(ff.fit.names):
        h = 0.3 * math.sqrt(ff.fit.covariance[j, j])
        up = rss({**ff.fit.values, name: ff.fit.values[name] + h}) - best
        down = rss({**ff.fit.values, name: ff.fit.values[name] - h}) - best
        # a minimum: both sides rise, by nearly the same amount (no linear term)
        assert up > 0 and down > 0, name
        assert up == pytest.approx(down, rel=0.2), name


def test_whitened_levels_carry_the_previous_edges_tail():
    # Two consecutive edges ten time constants apart (a square wave): the second
    # window starts while the first response is still settling. The whitened
    # projected model must be the whitened full model (JointModel.evaluate, which
    # holds that tail), or the whitened search minimises a different objective.
    # Simulator: the first-order response 1 - exp(-t/tau) (any circuit text).
    from fitkit.conditioning import analyse_steps
    from fitkit.capture import Capture
    from fitkit.fitting.joint_model import JointModel
    from fitkit.fitting.form_fit import make_scaling
    from fitkit.fitting.whitening import _whitened_levels

    tau, dt = 1e-3, 2.5e-5
    t = np.arange(0, 0.05, dt)
    edges = [0.01, 0.02, 0.03, 0.04]
    y = np.zeros_like(t)
    for k, e in enumerate(edges):
        y += (-1) ** k * np.where(t > e, 1 - np.exp(-np.clip(t - e, 0, None) / tau), 0.0)
    y += np.random.default_rng(2).normal(0, 1e-3, t.size)
    segments = analyse_steps(Capture.from_arrays(t, {"vout": y}, path="square.csv")).segments
    form = get_form("first-order")
    joint = JointModel(form, segments, make_scaling(segments, form, False), measured_input=False, free_t0=True)
    assert any(p is not None for p in joint.previous_steps)
    values = {"log_tau": 0.3, **{f"t0_{i}": -0.2 for i in range(len(segments))}}
    rho = 0.8 ** np.arange(10)
    whitener = Whitener(autoregressive_model(rho, 10**6, max_order=3), rho[1])
    w, bounds = joint.weights, list(joint.bounds)
    levels, model_w = _whitened_levels(joint, values, whitener, whitener.apply(w * joint.y, bounds),
                                       whitener.apply(w, bounds))
    full = whitener.apply(w * joint.evaluate(None, **values, **levels), bounds)
    np.testing.assert_allclose(model_w, full, rtol=0, atol=1e-12)
