"""PartFamily: H(s) as unknown parts vary, from 2^n nodal analyses, against the full
nodal analysis each time, and the count of analyses a fit needs (the speed regression,
not timed).

Reference for the property used: the matrix determinant lemma, det(A + u v^T) =
det(A) (1 + v^T A^-1 u), so det(G + s C) is affine in each rank-one part stamp
(Horn and Johnson, Matrix Analysis, 2nd ed., 2013, sec. 0.8.5 -- from memory).
The full nodal analysis itself is checked against lcapy and handbook forms in
test_circuits_lcapy.py and test_circuits_closed_forms.py.
"""

from __future__ import annotations

import numpy as np
import pytest

import fitkit.circuits.parametric as parametric
from fitkit.circuits import probe_chain, topology, transfer_function
from fitkit.circuits.parametric import PartFamily

CASES = [
    ("rc-low-pass", ("C1",)),
    ("rc-high-pass", ("R1",)),
    ("rl", ("L1",)),
    ("rc-ladder-2", ("C1", "C2")),
    ("rlc-series-c", ("R1", "L1", "C1")),
    ("rlc-series-r", ("L1",)),
    ("sallen-key-low-pass", ("C1",)),
    ("sallen-key-low-pass", ("R1", "R2", "C1", "C2")),
    ("mfb-low-pass", ("R2", "C2")),
]


def _relative_difference(a: np.ndarray, b: np.ndarray) -> float:
    assert a.shape == b.shape
    assert np.all((a == 0) == (b == 0))
    nz = b != 0
    return float(np.max(np.abs(a[nz] - b[nz]) / np.abs(b[nz]), initial=0.0))


@pytest.mark.parametrize("name,unknowns", CASES)
def test_family_equals_full_nodal_analysis_over_two_decades(name, unknowns):
    circuit = topology(name, unknown=unknowns)
    start = {n: circuit.part(n).design for n in unknowns}
    family = PartFamily(circuit, unknowns, start)
    assert family.exact
    rng = np.random.default_rng(len(name) + len(unknowns))
    for _ in range(12):
        values = {n: v * 10 ** rng.uniform(-1, 1) for n, v in start.items()}
        fast, full = family.transfer_function(values), transfer_function(circuit, values)
        assert _relative_difference(fast.numerator, full.numerator) < 1e-9
        assert _relative_difference(fast.denominator, full.denominator) < 1e-9


def test_family_with_probe_and_source_resistance():
    circuit = topology("rc-ladder-2", unknown=("C1", "C2")).with_chain(probe_chain("10x-passive", 50.0))
    start = {"C1": 10e-9, "C2": 22e-9}
    family = PartFamily(circuit, ("C1", "C2"), start)
    assert family.exact
    values = {"C1": 33e-9, "C2": 4.7e-9}
    fast, full = family.transfer_function(values), transfer_function(circuit, values)
    assert _relative_difference(fast.denominator, full.denominator) < 1e-9
    assert _relative_difference(fast.numerator, full.numerator) < 1e-9


def test_cancelled_pole_zero_pair_falls_back_to_the_full_analysis():
    # rc-buffered-2 measured at n1, before the buffer: the second stage's pole 1/(R2 C2)
    # is invisible there, the nodal analysis cancels it (H = 1/(1 + s R1 C1), textbook
    # first-order RC), and the corner route (degree not reduced) must not be used.
    from dataclasses import replace
    circuit = replace(topology("rc-buffered-2", unknown=("C1", "C2")), measure="n1")
    family = PartFamily(circuit, ("C1", "C2"), {"C1": 10e-9, "C2": 10e-9})
    assert family.reference.cancelled == 1 and not family.exact
    tf = family.transfer_function({"C1": 22e-9, "C2": 4.7e-9})
    assert tf.order == 1
    assert tf.quantities()["tau"] == pytest.approx(10e3 * 22e-9, rel=1e-9)


def test_a_fit_sized_sweep_runs_few_nodal_analyses(monkeypatch):
    # The speed regression, counted rather than timed: 200 transfer functions for a
    # two-part fit cost 1 + 4 corners + 2 self-check analyses, not 200.
    calls = {"n": 0}
    real = parametric.transfer_function

    def counting(*args, **kwargs):
        calls["n"] += 1
        return real(*args, **kwargs)

    monkeypatch.setattr(parametric, "transfer_function", counting)
    built = {"n": 0}
    real_build = parametric.build_mna

    def counting_build(*args, **kwargs):
        built["n"] += 1
        return real_build(*args, **kwargs)

    monkeypatch.setattr(parametric, "build_mna", counting_build)
    circuit = topology("rc-ladder-2", unknown=("C1", "C2"))
    family = PartFamily(circuit, ("C1", "C2"), {"C1": 10e-9, "C2": 22e-9})
    rng = np.random.default_rng(5)
    for _ in range(200):
        family.transfer_function({"C1": 10e-9 * np.exp(rng.normal()), "C2": 22e-9 * np.exp(rng.normal())})
    assert family.exact
    assert calls["n"] == 3                       # reference + two self-check points
    assert built["n"] == 1 + 4                   # scale system + 2^2 corners
    assert family.evaluations == 200 and family.analyses == 3


def test_non_finite_or_non_positive_values_take_the_full_route():
    circuit = topology("rc-low-pass", unknown=("C1",))
    family = PartFamily(circuit, ("C1",), {"C1": 100e-9})
    before = family.analyses
    tf = family.transfer_function({"C1": 47e-9})
    assert family.analyses == before
    assert tf.quantities()["tau"] == pytest.approx(circuit.part("R1").value * 47e-9, rel=1e-10)  # tau = R C
    with pytest.raises(ValueError):
        family.transfer_function({"C1": -1e-9})
    assert family.analyses == before + 1
