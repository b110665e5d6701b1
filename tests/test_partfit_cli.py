"""`fitkit fit FILE --circuit / --topology --known`: component values in text and --json.

Captures are simulated by scipy.signal.lsim on handbook closed forms
(test_partfit_support) and written as CSV to tmp_path.
"""

from __future__ import annotations

import json

import numpy as np
import pytest

from fitkit import exitcodes
from fitkit.cli import cli
from fitkit.cli.errors_to_exit import run_with_error_handling
from support.circuit_sims import rc_ladder_tf, rc_low_pass_tf, step_capture

LADDER_TOML = """
name = "ladder board"
drive = "in"
measure = "out"

[parts.R1]
kind = "resistor"
between = ["in", "n1"]
value = "10k"

[parts.C1]
kind = "capacitor"
between = ["n1", "0"]
solve = true
design = "10n"

[parts.R2]
kind = "resistor"
between = ["n1", "out"]
value = "10k"

[parts.C2]
kind = "capacitor"
between = ["out", "0"]
solve = true
design = "22n"

[measurement]
probe = "10x-passive"
"""


def _write(cap, path):
    np.savetxt(path, np.column_stack([cap.time, cap.channels[0].values]), delimiter=",",
               header="time,out", comments="")
    return str(path)


def _run(capsys, *args):
    status = run_with_error_handling(cli, ["fit", *args])
    out, err = capsys.readouterr()
    return status, out, err


@pytest.fixture(scope="module")
def files(tmp_path_factory):
    d = tmp_path_factory.mktemp("partfit_cli")
    rc = _write(step_capture(rc_low_pass_tf(10e3, 4.7e-9), t_end=0.4e-3, n=400, noise=0.004, seed=1),
                d / "rc.csv")
    ladder = _write(step_capture(rc_ladder_tf(10e3, 10e-9, 10e3, 22e-9), t_end=3e-3, n=800, noise=0.003,
                                 bits=12, seed=2), d / "ladder.csv")
    toml = d / "ladder.toml"
    toml.write_text(LADDER_TOML)
    return {"rc": rc, "ladder": ladder, "toml": str(toml)}


def test_topology_known_text_lists_part_interval_and_preferred_value(files, capsys):
    status, out, err = _run(capsys, files["rc"], "--topology", "rc-low-pass", "--known", "R1=10k")
    assert status == exitcodes.OK, err
    assert "Component values" in out
    line = next(l for l in out.splitlines() if l.strip().startswith("C1 "))
    assert "nF" in line and "4.7 nF (" in line and "well determined" in line
    assert "Warnings" not in out or out.index("Component values") < out.index("Warnings")


def test_topology_known_json_has_components(files, capsys):
    status, out, err = _run(capsys, files["rc"], "--topology", "rc-low-pass", "--known", "R1=10k", "--json")
    assert status == exitcodes.OK, err
    d = json.loads(out)
    c1 = d["components"]["C1"]
    assert set(c1) >= {"value", "stderr", "ci95", "unit"} and c1["unit"] == "F"
    assert c1["ci95"][0] < 4.7e-9 * 1.1 and c1["ci95"][1] > 4.7e-9 * 0.9
    assert d["model"] == "circuit:rc-low-pass"
    assert d["extra"]["preferred"]["C1"]["E24"] == pytest.approx(4.7e-9)


def test_circuit_file_with_probe_ranks_design_root_first(files, capsys):
    status, out, err = _run(capsys, files["ladder"], "--circuit", files["toml"], "--json")
    assert status == exitcodes.OK, err
    d = json.loads(out)
    assert d["components"]["C1"]["value"] == pytest.approx(10e-9, rel=0.1)
    assert d["components"]["C2"]["value"] == pytest.approx(22e-9, rel=0.1)
    assert len(d["extra"]["solutions"]) == 2
    assert d["extra"]["chain_effect"]["chain"]["probe_name"] == "10x-passive"


def test_design_values_option_picks_the_other_root(files, capsys):
    # --source-resistance takes a required value; placed right before FILE it must not swallow the file name
    status, out, err = _run(capsys, "--topology", "rc-ladder-2", "--known", "R1=10k,R2=10k",
                            "--design-values", "C1=47n,C2=4.7n", "--json", "--source-resistance", "50",
                            files["ladder"])
    assert status == exitcodes.OK, err
    d = json.loads(out)
    assert d["components"]["C1"]["value"] > 30e-9        # the large-C1 root ranked first
    assert d["extra"]["measurement_chain"]["source_resistance"] == 50.0


def test_undetermined_pair_is_one_line_error_naming_the_product(files, capsys):
    status, out, err = _run(capsys, files["rc"], "--topology", "rc-low-pass")
    assert status != exitcodes.OK and status != exitcodes.INTERNAL
    assert "R1*C1" in err and len(err.strip().splitlines()) == 1
    assert "Traceback" not in err


def test_bad_options_are_one_line_errors(files, capsys):
    status, _, err = _run(capsys, files["rc"], "--known", "R1=10k")
    assert status not in (exitcodes.OK, exitcodes.INTERNAL) and "needs a circuit" in err
    status, _, err = _run(capsys, files["rc"], "--topology", "rc-low-pass", "--known", "R9=1k")
    assert status not in (exitcodes.OK, exitcodes.INTERNAL) and "R9" in err
    status, _, err = _run(capsys, files["rc"], "--topology", "rc-low-pass", "--known", "R1=10k",
                          "--form", "first-order")
    assert status not in (exitcodes.OK, exitcodes.INTERNAL) and "--form" in err
    assert "Traceback" not in err


def test_report_layer_table_shows_nearest_e24_for_components(files):
    # the report layer's own table (fitkit.report.text) gets a nearest-E24 column for parts
    from fitkit.circuits import topology
    from fitkit.io import load_capture
    from fitkit.part_values import fit_circuit
    from fitkit.report.text import render_fit_text
    res = fit_circuit(load_capture(files["rc"]), topology("rc-low-pass", R1="10k", C1="?"))
    text = render_fit_text(res)
    block = text[text.index("Component values"):]
    assert "nearest E24" in block.splitlines()[1]
    assert "4.7 nF" in block.splitlines()[2]


def test_known_overrides_a_file_unknown_and_unknown_option_picks_parts(files, capsys):
    # --known C1=10n makes the file's unknown C1 known: only C2 is solved
    status, out, err = _run(capsys, files["ladder"], "--circuit", files["toml"], "--known", "C1=10n", "--json")
    assert status == exitcodes.OK, err
    d = json.loads(out)
    assert set(d["components"]) == {"C2"}
    assert d["components"]["C2"]["value"] == pytest.approx(22e-9, rel=0.05)
    # --unknown on a topology: only the listed parts are solved, the rest must be --known
    status, out, err = _run(capsys, files["ladder"], "--topology", "rc-ladder-2", "--known",
                            "R1=10k,R2=10k,C1=10n", "--unknown", "C2", "--json")
    assert status == exitcodes.OK, err
    assert set(json.loads(out)["components"]) == {"C2"}


def test_circuit_fit_names_its_time_constants_like_the_forms(tmp_path):
    # tau1 / tau2 as the two-real-pole form names them, and the circuit's DC gain apart from the
    # measured gain; the names of earlier releases still find them (FitResult.quantity)
    from pathlib import Path

    from fitkit import load_capture
    from fitkit.circuits import topology
    from fitkit.part_values import fit_circuit
    demo = Path(__file__).resolve().parents[1] / "demo_captures"
    capture = load_capture(demo / "good_board_ladder.csv")
    result = fit_circuit(capture, topology("rc-ladder-2", R1="10k", R2="10k", C1="?", C2="?"))
    assert {"tau1", "tau2", "circuit_dc_gain"} <= set(result.derived)
    assert not {"tau_slow", "tau_fast", "dc_gain"} & set(result.derived)
    assert result.quantity("tau_slow") is result.quantity("tau1")
    assert result.quantity("dc_gain") is result.quantity("circuit_dc_gain")
    # demo_captures/truth.json: the ladder's slower time constant is 2.589 ms (within 1 %)
    assert result.derived["tau1"].value == pytest.approx(2.589e-3, rel=0.01)
