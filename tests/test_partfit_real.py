"""The real RC-ladder capture (../shared/reference/real-captures/rc-ladder-adc-step.csv,
MIT licensed, see SOURCE.md there): an unbuffered two-stage RC ladder driven by a
DAC and sampled by an ADC at 1 kHz, 51 rising edges of 100 samples.

Given R1 = R2 = 10 kOhm (stated), fitkit reports C1 and C2 and says how well each
is determined. The stated C1 = 100 nF, C2 = 200 nF are what the authors wrote,
not truth, so nothing here asserts that the result matches them. What is known
(SOURCE.md): the 1 ms sampling barely resolves the fast pole (about 0.4-0.9 ms),
so the part that sets it must come out with a wide interval and be called
poorly determined.
"""

from __future__ import annotations

import json

import pytest

from fitkit.circuits import topology
from fitkit.io import load_capture
from fitkit.part_values import POORLY_DETERMINED, fit_circuit
from support.reference_paths import REAL_CAPTURES, needs_real_captures

CAPTURE = REAL_CAPTURES / "rc-ladder-adc-step.csv"
pytestmark = needs_real_captures


@pytest.fixture(scope="module")
def result():
    capture = load_capture(str(CAPTURE))
    circuit = topology("rc-ladder-2", R1="10k", R2="10k", C1="?", C2="?")
    return fit_circuit(capture, circuit, average=True, design_values={"C1": 100e-9, "C2": 200e-9})


def test_reports_both_capacitors_with_intervals(result):
    for part in ("C1", "C2"):
        est = result.components[part]
        assert est.unit == "F" and est.determined
        assert est.ci95[0] < est.value < est.ci95[1]
        assert 10e-9 < est.value < 2e-6          # a plausible capacitor, not a runaway fit
    json.dumps(result.to_dict(), allow_nan=False)


def test_the_fast_pole_is_poorly_determined_and_said_so(result):
    fast, slow = result.derived["tau2"], result.derived["tau1"]
    width = lambda e: (e.ci95[1] - e.ci95[0]) / e.value
    assert width(fast) > 3 * width(slow)          # the fast time constant is the weak one
    poor = [p for p, d in result.circuit.determination.items() if d["status"] == "poorly determined"]
    assert poor, result.circuit.determination
    for part in poor:
        est = result.components[part]
        assert est.stderr / est.value > POORLY_DETERMINED
        assert est.ci95[1] / est.ci95[0] > 1.3    # a wide interval, not a measurement to 1 %
        assert any(w.startswith(f"{part} is poorly determined") for w in result.warnings)


def test_both_quadratic_roots_listed_and_routes_agree(result):
    sols = result.circuit.solutions
    assert len(sols) == 2
    assert sols[0]["design_distance"] <= sols[1]["design_distance"]
    assert result.circuit.routes_agree is True
    assert result.details.mode == "measured input"   # the DAC channel drives the model
