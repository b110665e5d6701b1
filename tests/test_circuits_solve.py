"""Solving unknown parts from target coefficients: every physical solution, ranked."""

from __future__ import annotations

import math

import pytest

from fitkit.circuits.solve import solve_parts
from fitkit.circuits.topologies import topology
from fitkit.circuits.transfer import transfer_function
from fitkit.errors import CircuitError


def test_ladder_quadratic_gives_both_solutions():
    # Textbook ladder coefficients with R1, R2 known: C1 C2 = a2 / (R1 R2) and
    # R1 C1 + (R1 + R2) C2 = a1, a quadratic in C2 with two positive roots here.
    R1 = R2 = 10e3
    c = topology("rc-ladder-2", R1=R1, R2=R2, unknown=("C1", "C2"))
    tf = transfer_function(c, {"C1": 100e-9, "C2": 200e-9})
    a2, a1 = tf.den[0], tf.den[1]
    disc = a1 ** 2 - 4 * (R1 + R2) * R1 * a2 / (R1 * R2)
    roots_c2 = sorted([(a1 + sgn * math.sqrt(disc)) / (2 * (R1 + R2)) for sgn in (1, -1)])
    sols = solve_parts(c, ("C1", "C2"), tf.num, tf.den, design={"C1": 100e-9, "C2": 200e-9})
    assert len(sols) == 2
    assert sols[0].values["C1"] == pytest.approx(100e-9, rel=1e-8)   # nearest to design first
    assert sols[0].values["C2"] == pytest.approx(200e-9, rel=1e-8)
    assert sorted(s.values["C2"] for s in sols) == pytest.approx(roots_c2, rel=1e-8)
    for s in sols:
        assert s.values["C1"] * s.values["C2"] == pytest.approx(a2 / (R1 * R2), rel=1e-8)
        assert s.residual < 1e-9
    assert sols[0].design_distance < sols[1].design_distance


def test_buffered_stages_can_swap():
    # Common practice, no source: buffered stages multiply, (1 + s R1 C1)(1 + s R2 C2), so with
    # equal resistors the two capacitors can be exchanged; both orders are listed, design first.
    c = topology("rc-buffered-2", unknown=("C1", "C2"))
    tf = transfer_function(c, {"C1": 100e-9, "C2": 22e-9})
    sols = solve_parts(c, ("C1", "C2"), tf.num, tf.den, design={"C1": 82e-9, "C2": 27e-9})
    assert len(sols) == 2
    assert sols[0].values == pytest.approx({"C1": 100e-9, "C2": 22e-9}, rel=1e-8)
    assert sols[1].values == pytest.approx({"C1": 22e-9, "C2": 100e-9}, rel=1e-8)


def test_sallen_key_unique_and_scaled_target():
    # Texas Instruments SLOA024 (unity-gain Sallen-Key): den = 1 + s C2 (R1 + R2) + s^2 R1 R2 C1 C2,
    # linear in C2 then C1, so one solution. A target scaled by any constant is normalised first.
    c = topology("sallen-key-low-pass", unknown=("C1", "C2"))
    tf = transfer_function(c, {"C1": 33e-9, "C2": 15e-9})
    sols = solve_parts(c, ("C1", "C2"), 7 * tf.numerator, 7 * tf.denominator)
    assert len(sols) == 1
    assert sols[0].values == pytest.approx({"C1": 33e-9, "C2": 15e-9}, rel=1e-8)
    assert sols[0].design_distance is not None       # library defaults act as design values


def test_rlc_inductor_and_capacitor():
    # Textbook series RLC across C: den = 1 + s R C + s^2 L C; with R known, C then L follow uniquely.
    c = topology("rlc-series-c", R1=100.0, unknown=("L1", "C1"))
    tf = transfer_function(c, {"L1": 4.7e-3, "C1": 220e-9})
    sols = solve_parts(c, ("L1", "C1"), tf.num, tf.den, design=None)
    assert len(sols) == 1
    assert sols[0].values["L1"] == pytest.approx(4.7e-3, rel=1e-8)
    assert sols[0].units == {"L1": "H", "C1": "F"}


def test_undetermined_unknowns_are_refused():
    # Textbook RC: only R C appears in H(s), so R and C cannot both be solved.
    c = topology("rc-low-pass", unknown=("R1", "C1"))
    tf = transfer_function(c)
    with pytest.raises(CircuitError, match="cannot determine") as err:
        solve_parts(c, ("R1", "C1"), tf.num, tf.den)
    assert "R1" in err.value.hint


def test_impossible_target_gives_no_solution():
    # The unbuffered ladder cannot have complex poles (Q <= 1/2): no physical solution.
    c = topology("rc-ladder-2", unknown=("C1", "C2"))
    q = 0.7
    w0 = 2 * math.pi * 1e3
    sols = solve_parts(c, ("C1", "C2"), [1.0], [1 / w0 ** 2, 1 / (q * w0), 1.0])
    assert sols == []
    with pytest.raises(CircuitError, match="does not fit"):
        solve_parts(c, ("C1", "C2"), [1.0], [1e-12, 1e-8, 1e-4, 1.0])


def test_real_ladder_capture_time_constants():
    # ../shared/reference/real-captures/SOURCE.md (rc-ladder-adc-step.csv): stated parts
    # R1 = R2 = 10 kOhm, C1 = 100 nF, C2 = 200 nF predict time constants of about 4.56 ms and
    # 0.44 ms (the repository's own prediction); a quick two-pole fit of the capture saw about
    # 5.5 ms and 0.36 ms. Given R1 and R2, those fitted time constants map back to capacitor pairs.
    c = topology("rc-ladder-2", R1="10k", R2="10k", unknown=("C1", "C2"))
    q = transfer_function(c, {"C1": 100e-9, "C2": 200e-9}).quantities()
    assert q["tau1"] == pytest.approx(4.56e-3, abs=0.005e-3)
    assert q["tau2"] == pytest.approx(0.44e-3, abs=0.005e-3)
    t1, t2 = 5.5e-3, 0.36e-3
    sols = solve_parts(c, ("C1", "C2"), [1.0], [t1 * t2, t1 + t2, 1.0], design={"C1": 100e-9, "C2": 200e-9})
    assert len(sols) == 2                         # the quadratic has two positive roots here
    for s in sols:
        back = transfer_function(c, s.values).quantities()
        assert back["tau1"] == pytest.approx(t1, rel=1e-8)
        assert back["tau2"] == pytest.approx(t2, rel=1e-8)
    assert all(a.design_distance <= b.design_distance for a, b in zip(sols, sols[1:]))
