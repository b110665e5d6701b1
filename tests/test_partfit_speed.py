"""Speed of the component fit, checked by counting work rather than by timing it.

A direct fit evaluates the circuit's step response hundreds of times; each
evaluation used to run a full nodal analysis (milliseconds) and a matrix
exponential per call. Now the transfer function comes from a PartFamily
(circuits/parametric.py: a few nodal analyses in all) and the step response by
partial fractions. The captures come from the independent simulator in
test_partfit_support (closed-form transfer functions through scipy.signal.lsim).
"""

from __future__ import annotations

import numpy as np
import pytest

import fitkit.circuits.mna as mna
import fitkit.circuits.transfer as transfer
from fitkit.circuits import topology
from fitkit.part_values import fit_circuit
from fitkit.part_values.circuit_form import circuit_form
from support.circuit_sims import rc_ladder_tf, step_capture


def _count(monkeypatch, module, name):
    calls = {"n": 0}
    real = getattr(module, name)

    def counting(*args, **kwargs):
        calls["n"] += 1
        return real(*args, **kwargs)

    monkeypatch.setattr(module, name, counting)
    return calls


def test_ladder_fit_runs_few_nodal_analyses_and_no_matrix_exponential(monkeypatch):
    # Two-stage ladder R = 10k, C1 = 10n, C2 = 22n (rc_ladder_tf: common practice, no source).
    cap = step_capture(rc_ladder_tf(10e3, 10e-9, 10e3, 22e-9), t_end=3e-3, n=1200, noise=0.003, bits=12,
                       seed=2)
    analyses = _count(monkeypatch, mna, "build_mna")
    exponentials = _count(monkeypatch, transfer.TransferFunction, "matrix_exponential_step_response")
    circuit = topology("rc-ladder-2", R1=10e3, R2=10e3, C1="?", C2="?")
    res = fit_circuit(cap, circuit, design_values={"C1": 10e-9, "C2": 22e-9})
    assert res.components["C1"].value == pytest.approx(10e-9, rel=0.05)
    assert res.components["C2"].value == pytest.approx(22e-9, rel=0.05)
    # Both routes, every solution, identifiability and intervals: a few dozen nodal
    # analyses at most (42 now; 602 with one per model evaluation before), and the
    # step response never needs the matrix exponential for these distinct poles.
    assert analyses["n"] < 80
    assert exponentials["n"] == 0


def test_circuit_form_reuses_responses_for_repeated_times(monkeypatch):
    # A joint fit asks for the same times once per edge: the form computes each once.
    circuit = topology("rc-ladder-2", R1=10e3, R2=10e3, C1="?", C2="?")
    form = circuit_form(circuit, ("C1", "C2"), 1e-4, [{"C1": 10e-9, "C2": 22e-9}], "circuit:rc-ladder-2")
    computed = _count(monkeypatch, transfer, "modal_step_response")
    t = np.linspace(0, 10, 500)
    first = form.unit_step(t, C1=10e-9, C2=22e-9)
    for _ in range(20):
        np.testing.assert_array_equal(form.unit_step(t.copy(), C1=10e-9, C2=22e-9), first)
    assert computed["n"] == 1
    first[:] = 0.0          # the caller's copy: mutating it must not change what the form returns
    assert form.unit_step(t, C1=10e-9, C2=22e-9)[-1] > 0.5
    form.unit_step(t, C1=12e-9, C2=22e-9)
    assert computed["n"] == 2
