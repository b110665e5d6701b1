"""Sums over the edges of a joint fit's Jacobian, batched (fitkit/fitting/edge_blocks.py),
and the white-noise allowance of the test for correlated residuals.

The correlated-residual correction (fitkit/fitting/uncertainty.py) works on
each edge's block of the Jacobian; the batched computation must give the
numbers of the definitions, written here with dense matrices:

* the projection bias (1/n) sum_t [P S + S P - P S P]_(t, t+k), P the hat
  matrix J (J^T J)^-1 J^T and S the noise covariance (Toeplitz within an edge),
  from r = (I - P) e (Seber & Lee, Linear Regression Analysis, 2nd ed., 2003,
  chapter 3, from memory);
* the sandwich meat sum over edges of J_e^T S_e J_e;
* the white-noise shortfall sum_t P[t, t+k] / (n - p), the expected pooled
  residual autocorrelation at lag k of white noise, less than zero.

and, by Monte Carlo with fixed seeds, the Ljung-Box test (Ljung & Box,
Biometrika 65 (1978) 297-303) with that allowance keeps its 1 % level on
white noise fitted with three parameters per edge, where without it it fires
far more often.
"""

from __future__ import annotations

import numpy as np
from scipy import linalg

from fitkit.fitting.edge_blocks import edge_batches
from fitkit.fitting.uncertainty import (ljung_box_correlated, projection_bias, residual_autocorrelation,
                                        white_noise_shortfall)


def joint_like_jacobian(lengths, seed=3):
    """Two global columns, three per edge (the third also on the next edge's first
    rows, as an edge delay reaches the next window's tail); smooth columns, as a
    fitted response's are."""
    rng = np.random.default_rng(seed)
    n, m = sum(lengths), len(lengths)
    jac = np.zeros((n, 2 + 3 * m))
    bounds = np.cumsum([0] + list(lengths))
    for i, (lo, hi) in enumerate(zip(bounds[:-1], bounds[1:])):
        x = np.linspace(0.0, 1.0, hi - lo)
        jac[lo:hi, 0] = np.exp(-3 * x) * (1 + 0.1 * rng.normal())
        jac[lo:hi, 1] = x * np.exp(-2 * x) * (1 + 0.1 * rng.normal())
        jac[lo:hi, 2 + 3 * i] = 1.0
        jac[lo:hi, 3 + 3 * i] = 1.0 - np.exp(-4 * x)
        jac[lo:hi, 4 + 3 * i] = x * np.exp(-4 * x)
        if i + 1 < m:
            jac[hi:hi + 5, 4 + 3 * i] = 1e-3 * rng.normal(size=5)
    return jac, list(bounds)


def lag_sums(matrix, bounds, max_lag):
    """sum over edges and rows t of matrix[t, t+k] within each edge, k = 0..max_lag."""
    out = np.zeros(max_lag + 1)
    for lo, hi in zip(bounds[:-1], bounds[1:]):
        block = matrix[lo:hi, lo:hi]
        for k in range(min(max_lag, hi - lo - 1) + 1):
            out[k] += np.trace(block, offset=k)
    return out


def test_projection_bias_is_its_dense_definition():
    lengths = [50, 60, 61, 200, 30, 45, 120, 47]  # unequal: several batches, padding
    jac, bounds = joint_like_jacobian(lengths)
    n = jac.shape[0]
    bread = np.linalg.inv(jac.T @ jac)
    gamma = 0.8 ** np.arange(60)
    sigma = np.zeros((n, n))
    for lo, hi in zip(bounds[:-1], bounds[1:]):
        sigma[lo:hi, lo:hi] = linalg.toeplitz(np.pad(gamma, (0, max(0, hi - lo - gamma.size)))[:hi - lo])
    hat = jac @ bread @ jac.T
    dense = lag_sums(hat @ sigma + sigma @ hat - hat @ sigma @ hat, bounds, 25) / n
    np.testing.assert_allclose(projection_bias(gamma, jac, bounds, bread, 25), dense, rtol=1e-7, atol=1e-12)


def test_batched_meat_is_the_sum_of_edge_products():
    jac, bounds = joint_like_jacobian([40, 90, 41, 39, 200])
    gamma = 0.5 ** np.arange(30)
    meat = np.zeros((jac.shape[1],) * 2)
    for batch in edge_batches(jac, bounds):
        batch.add_inner_products(batch.toeplitz_times(gamma), meat)
    dense = np.zeros_like(meat)
    for lo, hi in zip(bounds[:-1], bounds[1:]):
        s = linalg.toeplitz(np.pad(gamma, (0, max(0, hi - lo - gamma.size)))[:hi - lo])
        dense += jac[lo:hi].T @ s @ jac[lo:hi]
    np.testing.assert_allclose(meat, dense, rtol=1e-10, atol=1e-12)


def test_white_noise_shortfall_is_the_hat_matrix_lag_sums():
    jac, bounds = joint_like_jacobian([80, 81, 79, 80, 150])
    n, p = jac.shape
    bread = np.linalg.inv(jac.T @ jac)
    expected = lag_sums(jac @ bread @ jac.T, bounds, 10) / (n - p)
    got = white_noise_shortfall(jac, bounds, bread, 40)
    np.testing.assert_allclose(got[1:11], expected[1:], rtol=1e-9)
    assert got[0] == 0.0 and not np.any(got[11:])
    # a covariance that is not the Jacobian's inverse claims nothing
    assert not np.any(white_noise_shortfall(jac, bounds, 3.0 * bread, 40))


def test_ljung_box_keeps_its_level_on_white_noise_with_many_edge_parameters():
    """200 white-noise records of 60 edges x 40 points fitted with three parameters
    per edge: the residuals' negative autocorrelation from the fit alone makes the
    plain test fire in most trials; with the allowance it fires near its 1 % level."""
    jac, bounds = joint_like_jacobian([40] * 60)
    n, p = jac.shape
    bread = np.linalg.inv(jac.T @ jac)
    shortfall = white_noise_shortfall(jac, bounds, bread, 20)
    rng = np.random.default_rng(2024)
    plain = corrected = 0
    trials = 200
    for _ in range(trials):
        e = rng.normal(size=n)
        r = e - jac @ (bread @ (jac.T @ e))
        rho = residual_autocorrelation([r[lo:hi] for lo, hi in zip(bounds[:-1], bounds[1:])], 20)
        plain += ljung_box_correlated(rho, n)
        corrected += ljung_box_correlated(rho + shortfall, n)
    assert plain > 0.5 * trials
    assert corrected <= 0.04 * trials  # binomial(200, 0.01): P(more than 8) < 1e-3
