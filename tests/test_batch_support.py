"""Tests of the shared helpers in tests/support/batch_captures.py against outside references."""

from __future__ import annotations

import numpy as np
import scipy.signal

from support.batch_captures import first_order, two_real_pole, write_good_first_order


def test_first_order_formula_matches_scipy_step():
    # Reference: scipy.signal.step of 1/(tau s + 1).
    tau = 100e-6
    t = np.linspace(0, 5 * tau, 400)
    _, ref = scipy.signal.step(([1.0], [tau, 1.0]), T=t)
    assert np.max(np.abs(first_order(t + 1e-15, tau) - ref)) < 1e-9


def test_two_real_pole_formula_matches_scipy_step():
    # Reference: scipy.signal.step of 1/((tau1 s + 1)(tau2 s + 1)).
    tau1, tau2 = 300e-6, 50e-6
    t = np.linspace(0, 5 * tau1, 400)
    _, ref = scipy.signal.step(([1.0], np.polymul([tau1, 1.0], [tau2, 1.0])), T=t)
    assert np.max(np.abs(two_real_pole(t + 1e-15, tau1, tau2) - ref)) < 1e-9


def test_captures_are_reproducible(tmp_path):
    a = write_good_first_order(tmp_path / "a.csv", 1e-4, seed=1)
    b = write_good_first_order(tmp_path / "b.csv", 1e-4, seed=1)
    c = write_good_first_order(tmp_path / "c.csv", 1e-4, seed=2)
    assert a.read_bytes() == b.read_bytes() != c.read_bytes()
