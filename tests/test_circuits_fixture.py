"""Measurement-chain effects: source resistance and probe loading."""

from __future__ import annotations

import json
import math

import pytest

from fitkit.circuits.description import MeasurementChain, probe_chain
from fitkit.circuits.fixture import measurement_chain_effect
from fitkit.circuits.topologies import topology
from fitkit.circuits.transfer import transfer_function
from fitkit.errors import CircuitError


@pytest.mark.parametrize("R,C,preset", [(100e3, 100e-12, "10x-passive"), (1e6, 1e-9, "1x-direct"),
                                        (1e3, 1e-6, "10x-passive")])
def test_probe_and_source_shift_rc_tau_by_the_closed_form(R, C, preset):
    # Thevenin equivalent seen by the capacitor (textbook): the source resistance Rs adds to R,
    # the probe's Rp is in parallel and its Cp adds to C, so
    # tau = ((R + Rs) || Rp) (C + Cp) and DC gain = Rp / (R + Rs + Rp).
    Rs = 50.0
    chain = probe_chain(preset, Rs)
    Rp, Cp = chain.probe_resistance, chain.probe_capacitance
    effect = measurement_chain_effect(topology("rc-low-pass", R1=R, C1=C), chain)
    tau = ((R + Rs) * Rp / (R + Rs + Rp)) * (C + Cp)
    assert effect.both["tau"] == pytest.approx(tau, rel=1e-10)
    assert effect.both["dc_gain"] == pytest.approx(Rp / (R + Rs + Rp), rel=1e-10)
    assert effect.alone["tau"] == pytest.approx(R * C, rel=1e-10)
    assert effect.shifts["source"]["tau"] == pytest.approx(Rs / R, rel=1e-8)
    probe_tau = (R * Rp / (R + Rp)) * (C + Cp)
    assert effect.shifts["probe"]["tau"] == pytest.approx(probe_tau / (R * C) - 1, rel=1e-8)
    assert effect.shifts["both"]["tau"] == pytest.approx(tau / (R * C) - 1, rel=1e-8)
    assert any("raises tau" in m or "lowers tau" in m for m in effect.messages)
    json.dumps(effect.to_dict())


def test_source_resistance_lowers_rlc_q():
    # Series RLC across C: Q = sqrt(L/C) / R (textbook); the source adds to R, f0 unchanged.
    R, L, C, Rs = 100.0, 10e-3, 100e-9, 50.0
    effect = measurement_chain_effect(topology("rlc-series-c", R1=R, L1=L, C1=C), MeasurementChain(Rs))
    assert effect.both["Q"] == pytest.approx(math.sqrt(L / C) / (R + Rs), rel=1e-9)
    assert effect.shifts["source"]["f0"] == 0.0
    assert "lowers Q by 33.3 %" in effect.messages[0]


def test_probe_capacitance_adds_a_pole_across_an_inductor():
    effect = measurement_chain_effect(topology("rl"), probe_chain("1x-direct"))
    assert (effect.order_alone, effect.order_both) == (1, 2)
    assert any("from 1 to 2 poles" in m for m in effect.messages)


def test_chain_is_included_in_the_transfer_function_and_validated():
    c = topology("rc-low-pass", R1=1e3, C1=1e-9).with_chain(MeasurementChain(None, None, 1e-9))
    assert transfer_function(c).quantities()["tau"] == pytest.approx(1e3 * 2e-9, rel=1e-10)
    with pytest.raises(CircuitError, match="preset"):
        probe_chain("20x")
    assert measurement_chain_effect(topology("rc-low-pass")).messages[-1].startswith("no measurement chain")
