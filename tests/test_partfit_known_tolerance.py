"""Known parts given with a tolerance carry it into the solved parts' intervals
(`fitkit fit ... --known C1=100n+-5%`).

Reference: for an RC low-pass, R = tau / C (textbook first-order low-pass), so
d ln R / d ln C = -1 and a known C of tolerance +-t adds a rectangular
uncertainty of half width ln(1 + t) to ln R, standard uncertainty
ln(1 + t)/sqrt(3) (JCGM 100:2008, the GUM, 4.3.7); each side of R's 95 %
interval on the log scale grows in quadrature by 1.96 times that.
"""

from __future__ import annotations

import json
import math

import numpy as np
import pytest

from fitkit.circuits import topology
from fitkit.cli import cli
from fitkit.cli.errors_to_exit import run_with_error_handling
from fitkit.part_values import fit_circuit
from support.circuit_sims import rc_ladder_tf, rc_low_pass_tf, step_capture


@pytest.fixture(scope="module")
def rc_capture():
    return step_capture(rc_low_pass_tf(10e3, 4.7e-9), t_end=0.4e-3, n=400, noise=0.004, seed=3)


def test_rc_resistor_interval_widens_by_the_capacitors_tolerance(rc_capture):
    circuit = topology("rc-low-pass", R1="?", C1="4.7n")
    plain = fit_circuit(rc_capture, circuit).components["R1"]
    toleranced = fit_circuit(rc_capture, circuit, known_tolerances={"C1": 0.05}).components["R1"]
    assert toleranced.value == pytest.approx(plain.value, rel=1e-12)
    add = 1.959964 * math.log(1.05) / math.sqrt(3)      # GUM 4.3.7, sensitivity -1 (R = tau / C)
    for side, (a, b) in (("low", (plain.value / plain.ci95[0], toleranced.value / toleranced.ci95[0])),
                         ("high", (plain.ci95[1] / plain.value, toleranced.ci95[1] / toleranced.value))):
        assert math.log(b) == pytest.approx(math.hypot(math.log(a), add), rel=0.02), side
    assert "tolerance" in toleranced.interval_method
    # the truth (10 kOhm) stays inside when C is really 5 % off: the capture was made with
    # C = 4.7 nF, so a known C given as 4.935 nF +-5 % must still cover R = 10 kOhm
    off = fit_circuit(rc_capture, topology("rc-low-pass", R1="?", C1="4.935n"),
                      known_tolerances={"C1": 0.05}).components["R1"]
    assert off.ci95[0] <= 10e3 <= off.ci95[1]


def test_ladder_parts_widen_only_by_their_sensitivity():
    cap = step_capture(rc_ladder_tf(10e3, 10e-9, 10e3, 22e-9), t_end=3e-3, n=800, noise=0.003, seed=4)
    circuit = topology("rc-ladder-2", R1="10k", C1="?", R2="10k", C2="?")
    plain = fit_circuit(cap, circuit, design_values={"C1": 10e-9, "C2": 22e-9}).components
    wide = fit_circuit(cap, circuit, design_values={"C1": 10e-9, "C2": 22e-9},
                       known_tolerances={"R1": 0.01}).components
    for part in ("C1", "C2"):
        assert wide[part].ci95[0] <= plain[part].ci95[0] and wide[part].ci95[1] >= plain[part].ci95[1]
        # at most the full 1 % (rectangular, 95 %) on each side: sensitivities of the ladder are <= 1
        grow = math.log(wide[part].ci95[1] / wide[part].value) - math.log(plain[part].ci95[1] / plain[part].value)
        assert 0 < grow <= 1.96 * math.log(1.01) / math.sqrt(3) + 1e-9


def test_cli_known_with_tolerance(tmp_path, capsys, rc_capture):
    path = tmp_path / "rc.csv"
    np.savetxt(path, np.column_stack([rc_capture.time, rc_capture.channels[0].values]), delimiter=",",
               header="time,out", comments="")
    status = run_with_error_handling(cli, ["fit", str(path), "--topology", "rc-low-pass",
                                           "--known", "C1=4.7n+-5%", "--json"])
    assert status == 0
    out = json.loads(capsys.readouterr().out)
    assert "tolerance" in out["components"]["R1"]["interval_method"]
    status = run_with_error_handling(cli, ["fit", str(path), "--topology", "rc-low-pass",
                                           "--known", "C1=4.7n+-lots"])
    assert status == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and "C1" in err[0] and "tolerance" in err[0]
