"""Round trips: simulate a capture from known parts with an independent simulator
(closed-form handbook transfer functions through scipy.signal / python-control,
see test_partfit_support.py), solve the unknown parts with fitkit.part_values, and
find the truth inside the 95 % intervals; both solving routes agree."""

from __future__ import annotations

import json
import math

import eseries
import pytest

from fitkit.circuits import probe_chain, topology
from fitkit.part_values import fit_circuit
from support.circuit_sims import (rc_ladder_tf, rc_low_pass_tf, sallen_key_unity_tf, series_rlc_across_c_tf,
                                  square_capture, step_capture)


def near_truth(est, truth, k=3.0):
    """True when ``truth`` is within k standard errors (log scale) of the estimate.

    One seed is one draw, so single round trips use 3 standard errors (99.7 %);
    the 95 % coverage rate itself is checked over many trials in test_partfit_coverage.py.
    """
    return est.determined and abs(math.log(truth / est.value)) < k * est.stderr / est.value


def routes_agree_within_intervals(result):
    """Each route's value inside the other's 95 % interval, checked here from the raw numbers."""
    r1 = result.circuit.behavioural_route["solutions"]
    for part, est in result.components.items():
        if not est.determined:
            continue
        nearest = min(r1, key=lambda s: abs(math.log(s["values"][part] / est.value)))
        lo1, hi1 = nearest["ci95"][part]
        assert lo1 <= est.value <= hi1, part
        assert est.ci95[0] <= nearest["values"][part] <= est.ci95[1], part


def test_rc_low_pass_with_probe_loading_gives_c():
    # truth: R1 = 10 kOhm known, C1 = 4.7 nF; probe 10 MOhm || 12 pF at the output,
    # simulated with the Thevenin closed form (rc_low_pass_tf) by scipy.signal.lsim
    R, C, Rp, Cp = 10e3, 4.7e-9, 10e6, 12e-12
    cap = step_capture(rc_low_pass_tf(R, C, Rp, Cp), t_end=0.4e-3, n=500, noise=0.004, bits=10, seed=11)
    circuit = topology("rc-low-pass", R1="10k", C1="?").with_chain(probe_chain("10x-passive"))
    res = fit_circuit(cap, circuit)
    c1 = res.components["C1"]
    assert res.model == "circuit:rc-low-pass"
    assert c1.unit == "F" and near_truth(c1, C)
    assert c1.ci95[1] / c1.ci95[0] < 1.05          # a clean capture pins C to a few %
    # tau of the fitted circuit including the probe: R || Rp (C + Cp) (Thevenin, as in the simulator)
    tau_true = R * Rp / (R + Rp) * (C + Cp)
    assert near_truth(res.derived["tau"], tau_true)
    routes_agree_within_intervals(res)
    assert res.circuit.routes_agree is True
    # the probe's 12 pF on 4.7 nF raises tau by 12/4700 = 0.26 %, its 10 MOhm lowers the gain 0.1 %
    shifts = res.circuit.chain_effect["shifts"]["probe"]
    assert shifts["tau"] == pytest.approx((C + Cp) / C * Rp / (R + Rp) - 1, rel=1e-3)
    # nearest preferred values against the eseries package (IEC 60063)
    pref = res.circuit.preferred["C1"]
    for series, es in (("E12", eseries.E12), ("E24", eseries.E24), ("E96", eseries.E96)):
        assert pref[series] == pytest.approx(eseries.find_nearest(es, c1.value), rel=1e-9)
    json.dumps(res.to_dict(), allow_nan=False)


def test_series_rlc_with_l_known_gives_r_and_c():
    # truth: R1 = 47 Ohm, L1 = 10 mH known, C1 = 100 nF: f0 = 5.03 kHz, Q = sqrt(L/C)/R = 6.7;
    # simulated by python-control's forced_response on 1/(LC s^2 + RC s + 1)
    R, L, C = 47.0, 10e-3, 100e-9
    cap = step_capture(series_rlc_across_c_tf(R, L, C), t_end=3e-3, n=1500, noise=0.01, bits=10, seed=5,
                       simulator="control")
    circuit = topology("rlc-series-c", L1="10m", R1="?", C1="?")
    res = fit_circuit(cap, circuit)
    assert res.components["R1"].unit == "Ohm" and res.components["C1"].unit == "F"
    assert near_truth(res.components["R1"], R)
    assert near_truth(res.components["C1"], C)
    # handbook: omega0 = 1/sqrt(LC), Q = sqrt(L/C)/R
    assert near_truth(res.derived["f0"], 1 / (2 * math.pi * math.sqrt(L * C)))
    assert near_truth(res.derived["Q"], math.sqrt(L / C) / R)
    routes_agree_within_intervals(res)


def test_ladder_reports_both_roots_and_ranks_by_design():
    # truth: R1 = R2 = 10 kOhm known, C1 = 10 nF, C2 = 22 nF. The coefficient equations
    # R1 R2 C1 C2 = a2, R1 C1 + R2 C2 + R1 C2 = a1 are a quadratic in C1: two physical roots
    R, C1, C2 = 10e3, 10e-9, 22e-9
    cap = step_capture(rc_ladder_tf(R, C1, R, C2), t_end=3e-3, n=1200, noise=0.003, bits=12, seed=2)
    circuit = topology("rc-ladder-2", R1="10k", R2="10k", C1="?", C2="?")
    res = fit_circuit(cap, circuit, design_values={"C1": 10e-9, "C2": 22e-9})
    assert near_truth(res.components["C1"], C1) and near_truth(res.components["C2"], C2)
    sols = res.circuit.solutions
    assert len(sols) == 2
    # the other root of the quadratic (same a1, a2): C2' = a2 / (R^2 C1'), with
    # R C1' + 2 R C2' = a1 solved by hand for the truth's a1, a2
    a2, a1 = R * R * C1 * C2, R * C1 + R * C2 + R * C2
    disc = math.sqrt(a1 ** 2 - 8 * a2)
    roots_c1 = sorted([(a1 + disc) / (2 * R), (a1 - disc) / (2 * R)])
    other = sols[1]["values"]
    assert other["C1"] == pytest.approx(roots_c1[1], rel=0.05)     # the large-C1 root
    assert other["C2"] == pytest.approx(a2 / (R * R * roots_c1[1]), rel=0.05)
    assert sols[0]["design_distance"] < sols[1]["design_distance"]
    assert sols[0]["rss"] == pytest.approx(sols[1]["rss"], rel=1e-6)   # the data cannot tell them apart
    assert any("equally well" in w for w in res.warnings)
    routes_agree_within_intervals(res)
    # design values pointing at the other root rank it first
    swapped = fit_circuit(cap, circuit, design_values={"C1": 47e-9, "C2": 4.7e-9})
    assert swapped.components["C1"].value == pytest.approx(roots_c1[1], rel=0.05)


def test_sallen_key_with_resistors_known_gives_capacitors():
    # truth: R1 = R2 = 10 kOhm, C1 = 22 nF, C2 = 10 nF: Q = sqrt(R1 R2 C1 C2)/(C2 (R1 + R2)) = 0.74
    R1, R2, C1, C2 = 10e3, 10e3, 22e-9, 10e-9
    cap = step_capture(sallen_key_unity_tf(R1, R2, C1, C2), t_end=1.5e-3, n=1000, noise=0.004, bits=10,
                       seed=8)
    circuit = topology("sallen-key-low-pass", R1="10k", R2="10k", C1="?", C2="?")
    res = fit_circuit(cap, circuit)
    assert near_truth(res.components["C1"], C1) and near_truth(res.components["C2"], C2)
    assert len(res.circuit.solutions) == 1          # a2 and a1 fix C2, then C1: one solution
    q = res.derived["Q"]
    assert abs(q.value - math.sqrt(R1 * R2 * C1 * C2) / (C2 * (R1 + R2))) < 3 * q.stderr
    routes_agree_within_intervals(res)


def test_ladder_driven_by_measured_input():
    # square wave with the drive recorded: the model is driven by the measured input
    R, C1, C2 = 10e3, 100e-9, 10e-9
    cap = square_capture(rc_ladder_tf(R, C1, R, C2), period=40e-3, cycles=1, n_per_period=800,
                         noise=0.003, bits=12, seed=4, with_input=True)
    circuit = topology("rc-ladder-2", R1="10k", R2="10k", C1="?", C2="?")
    res = fit_circuit(cap, circuit, design_values={"C1": 100e-9, "C2": 10e-9})
    assert res.details.mode == "measured input"
    assert "gain" in res.parameters
    assert near_truth(res.components["C1"], C1) and near_truth(res.components["C2"], C2)


def test_more_coefficients_than_unknowns_uses_weighted_least_squares():
    # ladder with C1 known too: two coefficients (a2, a1) for one unknown C2; route 1 takes the
    # closest physical C2 in the metric of the coefficients' covariance, route 2 fits C2 directly
    R, C1, C2 = 10e3, 10e-9, 22e-9
    cap = step_capture(rc_ladder_tf(R, C1, R, C2), t_end=3e-3, n=800, noise=0.003, bits=12, seed=6)
    res = fit_circuit(cap, topology("rc-ladder-2", R1="10k", R2="10k", C1="10n", C2="?"))
    assert near_truth(res.components["C2"], C2)
    assert "weighted least squares" in res.circuit.behavioural_route["method"]
    routes_agree_within_intervals(res)


def test_source_resistance_is_in_the_model_and_its_shift_reported():
    # a 600 Ohm generator in series with R1 = 10 kOhm: tau = (R1 + Rs) C (series resistors add,
    # textbook), so ignoring it would read C 6 % high; with it in the model C comes out right
    from fitkit.circuits import MeasurementChain
    R, Rs, C = 10e3, 600.0, 10e-9
    cap = step_capture(([1.0], [(R + Rs) * C, 1.0]), t_end=0.8e-3, n=500, noise=0.004, bits=10, seed=9)
    circuit = topology("rc-low-pass", R1="10k", C1="?").with_chain(MeasurementChain(source_resistance=Rs))
    res = fit_circuit(cap, circuit)
    assert near_truth(res.components["C1"], C)
    assert res.circuit.chain_effect["shifts"]["source"]["tau"] == pytest.approx(Rs / R, rel=1e-6)
    bare = fit_circuit(cap, topology("rc-low-pass", R1="10k", C1="?"))
    assert bare.components["C1"].value == pytest.approx(C * (R + Rs) / R, rel=0.01)
