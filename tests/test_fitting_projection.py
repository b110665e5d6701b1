"""Variable projection and the fast lagged sums give the same answers as the direct routes.

References: the full fit over every parameter (fitkit's own MINPACK route
through lmfit, itself checked against NIST StRD in test_nist_strd.py);
numpy.correlate for lagged sums; Golub & Pereyra, SIAM J. Numer. Anal. 10
(1973) 413-432, for the claim that the projected problem has the same
minimiser. Responses from scipy.signal.step and lsim (independent simulators).
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy import signal

from fitkit.conditioning.segment import StepSegment
from fitkit.fitting.least_squares import fit_model
from fitkit.fitting.form_fit import fit_form, make_scaling
from fitkit.fitting.joint_model import JointModel
from fitkit.fitting.projection import finish_projected, nonlinear_names, search_projected
from fitkit.fitting.uncertainty import autoregressive_autocorrelation, residual_autocorrelation
from fitkit.forms import FORMS


def _square_segments(rng, with_input: bool) -> list[StepSegment]:
    """Two edges (rise, fall) of a 1 / (1 + s tau) response, scipy.signal.lsim; tau = 1 ms."""
    tau, dt = 1e-3, 2e-5
    t = np.arange(0, 2000) * dt
    u = np.where((t >= 2e-3) & (t < 22e-3), 1.0, 0.0)
    _, y, _ = signal.lsim(([1.0], [tau, 1.0]), u, t)
    y = 0.1 + 0.8 * y + rng.normal(0, 0.005, t.size)
    vin = u + rng.normal(0, 0.002, t.size) if with_input else None
    segs = []
    for lo, hi, edge, direction in ((0, 1000, 2e-3, 1), (1000, 2000, 22e-3, -1)):
        before, after = (0.1, 0.9) if direction > 0 else (0.9, 0.1)
        segs.append(StepSegment(lo, hi, t[lo:hi], y[lo:hi], None if vin is None else vin[lo:hi],
                                edge - 0.5 * dt, direction, before, after,
                                input_before=None if vin is None else (before - 0.1) / 0.8,
                                input_after=None if vin is None else (after - 0.1) / 0.8, noise_rms=0.005))
    return segs


@pytest.mark.parametrize("with_input", [False, True])
def test_projected_fit_matches_the_full_fit(with_input):
    rng = np.random.default_rng(11)
    segs = _square_segments(rng, with_input)
    form = FORMS["first-order"]
    joint = JointModel(form, segs, make_scaling(segs, form, with_input), measured_input=with_input,
                       free_t0=not with_input)
    start = {n: 0.0 for n in joint.names}
    start["log_tau"] = np.log(0.7)  # a start 30 % off in tau
    if not with_input:
        for i in range(2):
            start[f"step_{i}"] = 1.0 if i == 0 else -1.0
    projected = finish_projected(joint, search_projected(joint, start, {}, tol=1e-12, max_nfev=2000), {})
    full = fit_model(joint.evaluate, start, None, joint.y, weights=joint.weights, tol=1e-12)
    assert projected.converged and full.converged
    assert projected.names == full.names
    assert len(nonlinear_names(joint)) < len(joint.names)  # the search space is smaller
    for name in full.names:  # the same optimum, to 1 % of a standard error (both stop on MINPACK tolerances)
        assert abs(projected.values[name] - full.values[name]) < 1e-2 * full.stderr[name], name
    # the covariance of the full parameter set, from the full Jacobian at the optimum
    assert np.allclose(projected.covariance, full.covariance, rtol=1e-4,
                       atol=1e-6 * np.max(np.abs(full.covariance)))
    assert projected.rss == pytest.approx(full.rss, rel=1e-9)


def test_engine_recovers_tau_with_the_projection():
    # scipy.signal.lsim truth: tau = 1 ms; intervals from the full covariance.
    rng = np.random.default_rng(12)
    ff = fit_form(_square_segments(rng, False), FORMS["first-order"])
    tau = np.exp(ff.fit.values["log_tau"]) * ff.joint.scaling.time_unit
    assert tau == pytest.approx(1e-3, rel=0.02)
    assert "step_1" in ff.fit.names and "baseline_0" in ff.fit.names  # levels in the covariance


def test_fft_lagged_sums_match_numpy_correlate():
    # numpy.correlate is the reference for the pooled residual autocorrelation.
    rng = np.random.default_rng(13)
    pieces = [signal.lfilter([1.0], [1.0, -0.6], rng.normal(size=n)) for n in (700, 300, 40)]
    max_lag = 60
    n = sum(p.size for p in pieces)
    gamma0 = sum(float(p @ p) for p in pieces) / n
    ref = np.zeros(max_lag + 1)
    for p in pieces:
        full = np.correlate(p, p, mode="full")[p.size - 1:]
        m = min(max_lag + 1, full.size)
        ref[:m] += full[:m]
    ref = ref / n / gamma0
    assert np.allclose(residual_autocorrelation(pieces, max_lag), ref, atol=1e-12)
    # an AR(1) model of phi = 0.6 has rho(k) = 0.6^k (textbook, e.g. Box & Jenkins, Time Series Analysis)
    rho = 0.6 ** np.arange(40)
    model, order = autoregressive_autocorrelation(rho, 10_000, max_lag=39)
    assert order == 1
    assert np.allclose(model, rho, atol=1e-9)


def test_ar_autocovariance_is_the_impulse_response_lag_sums():
    """The autocovariance of a stationary AR model from its power spectrum equals
    the lag sums of its impulse response as scipy.signal.lfilter runs it, for
    models up to order 24 with poles up to 0.995 from the origin."""
    from scipy import signal

    from fitkit.fitting.uncertainty import ar_autocovariance

    rng = np.random.default_rng(0)
    for _ in range(40):
        p = int(rng.integers(1, 13))
        roots = rng.uniform(0.0, 0.995, p) * np.exp(1j * rng.uniform(0.0, np.pi, p))
        phi = -np.poly(np.concatenate([roots, roots.conj()]))[1:].real
        h = signal.lfilter([1.0], np.concatenate([[1.0], -phi]), np.r_[1.0, np.zeros(100_000)])
        expected = np.array([h[:h.size - k] @ h[k:] for k in range(40)])
        np.testing.assert_allclose(ar_autocovariance(phi, 39), expected, rtol=0, atol=1e-6 * expected[0])
