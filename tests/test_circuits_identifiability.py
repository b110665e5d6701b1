"""Which unknown parts one step capture determines, and the coefficient Jacobian."""

from __future__ import annotations

import json
import math

import numpy as np
import pytest

from fitkit.circuits.coefficients import coefficient_jacobian, coefficients
from fitkit.circuits.identifiability import identifiability
from fitkit.circuits.topologies import topology


def test_rc_with_both_unknown_has_rank_one():
    # Textbook: H = 1 / (1 + s R C) depends on R and C only through R C.
    r = identifiability(topology("rc-low-pass", unknown=("R1", "C1")))
    assert r.rank == 1
    assert r.determined == () and set(r.undetermined) == {"R1", "C1"}
    assert r.must_supply == ("R1",)                 # resistors asked for first
    assert r.combinations == ("R1*C1",)
    assert any("R1*C1" in m for m in r.messages)
    assert json.loads(json.dumps(r.to_dict()))["all_determined"] is False


def test_rc_with_one_unknown_is_determined():
    r = identifiability(topology("rc-low-pass", unknown=("C1",)))
    assert r.rank == 1 and r.all_determined and r.determined == ("C1",)


def test_ladder_with_resistors_known_determines_both_capacitors():
    # Den = 1 + s (R1 C1 + R1 C2 + R2 C2) + s^2 R1 R2 C1 C2: two equations, two unknowns.
    r = identifiability(topology("rc-ladder-2", R1="10k", R2="10k", unknown=("C1", "C2")))
    assert r.rank == 2 and r.determined == ("C1", "C2")


def test_ladder_all_unknown_needs_two_parts():
    # Textbook impedance scaling: R x k, C / k leaves each stage's R C unchanged, and only two
    # denominator coefficients exist, so two of the four parts must be supplied.
    r = identifiability(topology("rc-ladder-2", unknown=("R1", "C1", "R2", "C2")))
    assert r.rank == 2 and len(r.must_supply) == 2
    assert set(r.must_supply) == {"R1", "R2"}


def test_series_rlc_all_unknown():
    # Textbook: H = 1 / (1 + s R C + s^2 L C): R C and L C only; rank 2 of 3.
    r = identifiability(topology("rlc-series-c", unknown=("R1", "L1", "C1")))
    assert r.rank == 2 and r.must_supply == ("R1",)


def test_gain_information():
    # MFB low-pass: DC gain -R2/R1. With the gain measured, R2/R1 is extra information.
    unknown = ("R1", "R2", "R3", "C1", "C2")
    with_gain = identifiability(topology("mfb-low-pass", unknown=unknown))
    without = identifiability(topology("mfb-low-pass", unknown=unknown), gain_known=False)
    assert with_gain.rank == without.rank + 1
    assert any("amplitude is not measured" in m for m in without.messages)


def test_buffered_equal_stages_are_flagged():
    # Equal stage time constants make the stages interchangeable: locally rank deficient.
    r = identifiability(topology("rc-buffered-2", unknown=("C1", "C2")))
    assert r.all_determined
    assert any("cannot be told apart" in m for m in r.messages)
    r2 = identifiability(topology("rc-buffered-2", C2="47n", unknown=("C1", "C2")))
    assert r2.all_determined and not any("told apart" in m for m in r2.messages)


def test_coefficient_jacobian_matches_closed_form():
    # Ladder den coefficients: a1 = R1 C1 + R1 C2 + R2 C2, a2 = R1 R2 C1 C2 (textbook nodal analysis).
    R1, R2, C1, C2 = 10e3, 22e3, 100e-9, 47e-9
    c = topology("rc-ladder-2", R1=R1, R2=R2)
    cj = coefficient_jacobian(c, ("C1", "C2"), {"C1": C1, "C2": C2})
    assert cj.labels == ("num s^0", "den s^2", "den s^1")
    np.testing.assert_allclose(cj.values, [1.0, R1 * R2 * C1 * C2, R1 * C1 + R1 * C2 + R2 * C2], rtol=1e-10)
    # d a / d ln C = C * d a / d C
    expected = np.array([[0.0, 0.0],
                         [R1 * R2 * C1 * C2, R1 * R2 * C1 * C2],
                         [R1 * C1, (R1 + R2) * C2]])
    assert np.max(np.abs(cj.jacobian[0])) < 1e-9            # the numerator 1 does not depend on C
    np.testing.assert_allclose(cj.jacobian[1:], expected[1:], rtol=1e-7)
    num, den = coefficients(c, ("C1", "C2"), [C1, C2])
    assert den[-1] == 1.0 and math.isclose(num[-1], 1.0, rel_tol=1e-12)


def test_log_part_covariance_first_order_propagation():
    # First-order (delta-method) propagation: for an RC low-pass with C unknown, tau = R C, so
    # sd(ln C) = sd(tau) / tau; for the ladder (square case) cov = J^-1 S J^-T.
    from fitkit.circuits.coefficients import log_part_covariance
    c = topology("rc-low-pass", R1=10e3)
    cj = coefficient_jacobian(c, ("C1",), {"C1": 10e-9})
    tau = 10e3 * 10e-9
    S = np.diag([0.0, (0.02 * tau) ** 2])          # num s^0 exact, tau known to 2 %
    cov = log_part_covariance(cj, S)
    assert math.sqrt(cov[0, 0]) == pytest.approx(0.02, rel=1e-6)
    lad = coefficient_jacobian(topology("rc-ladder-2"), ("C1", "C2"), {"C1": 100e-9, "C2": 47e-9})
    S2 = np.diag([0.0, (0.01 * lad.values[1]) ** 2, (0.03 * lad.values[2]) ** 2])
    J = lad.jacobian[1:]
    expected = np.linalg.inv(J) @ S2[1:, 1:] @ np.linalg.inv(J).T
    np.testing.assert_allclose(log_part_covariance(lad, S2), expected, rtol=1e-6)
