"""Step responses at unevenly spaced times (the engine's binned and Gauss-node times) of a
transfer function with repeated poles, which takes the matrix-exponential route.

Reference: scipy.linalg.expm evaluated at every time on its own (the exact
solution of x' = A x + B for a step), against the cubic-spline read-off of
fitkit.circuits.transfer._propagate through its own even grid.
"""

from __future__ import annotations

import numpy as np
from scipy import linalg, signal

from fitkit.circuits.transfer import TransferFunction


def _reference(num, den, t: np.ndarray) -> np.ndarray:
    A, B, C, D = signal.tf2ss(num, den)
    n = A.shape[0]
    M = np.zeros((n + 1, n + 1))
    M[:n, :n], M[:n, n] = A, B[:, 0]
    return np.array([linalg.expm(M * ti)[:n, n] @ C[0] + D[0, 0] for ti in t])


def test_repeated_poles_at_uneven_times_match_the_matrix_exponential():
    rng = np.random.default_rng(7)
    for order in (2, 3, 4):
        pole = -1.0 / 1e-3
        den = np.real(np.poly([pole] * order))
        num = [den[-1]]                              # unit DC gain
        tf = TransferFunction(tuple(num), tuple(den))
        t = np.sort(rng.uniform(0.0, 12e-3, 700))
        y = tf.step_response(t)
        assert np.max(np.abs(y - _reference(num, den, t))) < 1e-9


def test_times_far_beyond_the_time_scale_do_not_build_a_huge_grid():
    # a response 1e6 times faster than its record: the grid would need 1e10 points; the
    # per-time matrix exponential is used instead and the settled value is 1
    den = np.real(np.poly([-1e6, -1e6]))
    tf = TransferFunction((den[-1],), tuple(den))
    t = np.sort(np.random.default_rng(1).uniform(1e-3, 10.0, 100))
    y = tf.step_response(t)
    assert np.allclose(y, 1.0, atol=1e-9)
