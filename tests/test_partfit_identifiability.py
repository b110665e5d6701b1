"""Identifiability first: what fit_circuit does when one capture cannot fix every unknown."""

from __future__ import annotations

import math

import numpy as np
import pytest

from fitkit.circuits import topology
from fitkit.errors import CircuitError
from fitkit.part_values import fit_circuit, prepare_problem
from support.circuit_sims import rc_ladder_tf, rc_low_pass_tf, step_capture


def test_rc_with_both_parts_unknown_names_the_product_and_asks_for_one():
    # an RC low-pass step response depends on R and C only through tau = RC
    # (textbook first-order circuit), so neither part alone can be found
    cap = step_capture(rc_low_pass_tf(10e3, 10e-9), t_end=1e-3, n=300, seed=1)
    circuit = topology("rc-low-pass", R1="?", C1="?")
    with pytest.raises(CircuitError) as info:
        fit_circuit(cap, circuit)
    text = info.value.one_line()
    assert "R1*C1" in text
    assert "R1" in info.value.hint and "--known" in info.value.hint


def test_partly_determined_fits_what_it_can_and_never_reports_the_rest():
    # buffered two-stage RC: H = 1 / ((1 + s R1 C1)(1 + s R2 C2)) (two independent first-order
    # stages, textbook). With C2 known, R2 follows from tau2 = R2 C2; R1 and C1 only as R1*C1.
    R1, C1, R2, C2 = 10e3, 10e-9, 10e3, 47e-9
    tf = ([1.0], list(np.polymul([R1 * C1, 1.0], [R2 * C2, 1.0])))
    cap = step_capture(tf, t_end=4e-3, n=800, noise=0.003, bits=12, seed=3)
    circuit = topology("rc-buffered-2", R1="?", C1="?", R2="?", C2="47n")
    res = fit_circuit(cap, circuit, design_values={"R1": 10e3, "C1": 10e-9, "R2": 10e3})
    r2 = res.components["R2"]
    assert r2.determined and r2.unit == "Ohm"
    assert abs(math.log(R2 / r2.value)) < 3 * r2.stderr / r2.value
    for part in ("R1", "C1"):
        est = res.components[part]
        assert not est.determined and math.isnan(est.value) and est.ci95 is None
    assert any("supply the value of R1" in w for w in res.warnings)
    assert res.circuit.identifiability["combinations"] == ["R1*C1"]
    assert set(res.circuit.preferred) == {"R2"}     # no preferred value for an unmeasured part


def test_rc_ladder_with_r1_unknown_too_holds_one_part_and_marks_it():
    # R1, C1 unknown in an RC low-pass with a series source resistance known: still only the product
    circuit = topology("rc-low-pass", R1="?", C1="10n")
    problem = prepare_problem(circuit)
    assert problem.fitted == ("R1",) and not problem.held


def test_a_part_without_value_left_out_of_the_unknowns_is_a_clear_error():
    circuit = topology("rc-ladder-2", R1="10k", R2="10k", C1="?", C2="?")
    with pytest.raises(CircuitError) as info:
        prepare_problem(circuit, ["C1"])
    assert "C2" in info.value.one_line() and "--known C2=" in info.value.hint


def test_where_the_two_ladder_roots_merge_the_error_says_so():
    # R1 = R2, C1 = 100 nF, C2 = 47 nF: discriminant (C1 + 2 C2)^2 - 8 C1 C2 = 0.0036 (nF)^2 x 1e4
    # is almost zero (hand algebra on the ladder's quadratic), so the two roots merge and the
    # linearised fit cannot separate C1 from C2: a clear FitError, not a false measurement
    from fitkit.errors import FitError
    from support.circuit_sims import square_capture
    cap = square_capture(rc_ladder_tf(10e3, 100e-9, 10e3, 47e-9), period=40e-3, cycles=1, n_per_period=800,
                         noise=0.003, bits=12, seed=4, with_input=True)
    circuit = topology("rc-ladder-2", R1="10k", R2="10k", C1="?", C2="?")
    with pytest.raises(FitError) as info:
        fit_circuit(cap, circuit, design_values={"C1": 100e-9, "C2": 47e-9})
    assert "C1, C2" in info.value.message and "--known" in info.value.hint
