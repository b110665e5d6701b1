"""`fitkit fit` on simulated capture files: text, --json, and one-line errors.

Captures are simulated with scipy.signal.lsim (test_fitting_support) and
written as CSV to tmp_path; exit statuses are those documented in
fitkit.exitcodes.
"""

from __future__ import annotations

import json

import numpy as np
import pytest

from fitkit import exitcodes
from fitkit.cli import cli
from fitkit.cli.errors_to_exit import run_with_error_handling

from support.fitting_sims import first_order_tf, second_order_tf, square_wave_capture


def _write(cap, path, names):
    cols = [cap.time] + [cap.channel(n).values for n in names]
    np.savetxt(path, np.column_stack(cols), delimiter=",", header=",".join(["time"] + names), comments="")
    return str(path)


def _run(capsys, *args):
    status = run_with_error_handling(cli, ["fit", *args])
    out, err = capsys.readouterr()
    return status, out, err


@pytest.fixture(scope="module")
def rc_files(tmp_path_factory):
    rng = np.random.default_rng(101)
    tau = 4.7e-6
    cap = square_wave_capture(first_order_tf(tau), period=100e-6, dt=0.1e-6, n_periods=2, rng=rng,
                              noise=0.01, amplitude=3.3)
    d = tmp_path_factory.mktemp("fitcli")
    return tau, _write(cap, d / "rc.csv", ["vin", "vout"]), _write(cap, d / "rc_out.csv", ["vout"])


def test_text_output_shows_parameters_intervals_and_choice(capsys, rc_files):
    tau, both, _ = rc_files
    status, out, err = _run(capsys, both)
    assert status == exitcodes.OK, err
    tau_line = next(line for line in out.splitlines() if line.strip().startswith("tau "))
    assert "time constant" in tau_line and "95 % interval" in out
    assert "first-order" in out and "why" in out and "Candidate forms" in out
    assert "measured input" in out  # the file has an input channel
    lines = out.splitlines()
    if "Warnings" in lines:  # warnings, when there are any, come last
        last = lines.index("Warnings")
        assert all(line.startswith("  ! ") for line in lines[last + 1:])
    assert "Traceback" not in out + err


def test_json_output_is_one_object_of_the_documented_shape(capsys, rc_files):
    tau, _, out_only = rc_files
    status, out, err = _run(capsys, out_only, "--json")
    assert status == exitcodes.OK, err
    doc = json.loads(out)  # exactly one JSON object on stdout
    assert set(doc) >= {"file", "model", "parameters", "derived", "selection", "warnings"}
    assert doc["file"] == out_only and doc["model"] == "first-order"
    t = doc["parameters"]["tau"]
    assert set(t) >= {"value", "stderr", "ci95", "unit"} and t["unit"] == "s"
    assert t["ci95"][0] <= tau <= t["ci95"][1]
    assert isinstance(doc["selection"], list) and isinstance(doc["warnings"], list)


def test_json_of_a_ringing_capture_holds_f0_and_q_in_derived(capsys, tmp_path):
    rng = np.random.default_rng(102)
    cap = square_wave_capture(second_order_tf(20e3, 5.0), period=1e-3, dt=1e-6, n_periods=1, rng=rng,
                              noise=0.01, with_input=False)
    path = _write(cap, tmp_path / "ring.csv", ["vout"])
    status, out, err = _run(capsys, path, "--json", "--form", "underdamped")
    assert status == exitcodes.OK, err
    doc = json.loads(out)
    assert doc["model"] == "underdamped"
    for name, truth in (("f0", 20e3), ("Q", 5.0)):
        assert doc["derived"][name]["ci95"][0] <= truth <= doc["derived"][name]["ci95"][1]


def test_flat_trace_gives_one_line_error_and_unusable_input_status(capsys, tmp_path):
    rng = np.random.default_rng(103)
    t = np.arange(2000) * 1e-6
    path = tmp_path / "flat.csv"
    np.savetxt(path, np.column_stack([t, rng.normal(0, 0.01, t.size)]), delimiter=",", header="time,vout",
               comments="")
    status, out, err = _run(capsys, str(path))
    assert status == exitcodes.UNUSABLE_INPUT
    assert out == "" and len(err.strip().splitlines()) == 1 and "Traceback" not in err
    assert "flat.csv" in err


def test_fit_that_cannot_succeed_gives_one_line_error_and_status_5(capsys, rc_files):
    # A first-order response has no ringing: the underdamped form cannot describe it.
    _, _, out_only = rc_files
    status, out, err = _run(capsys, out_only, "--form", "underdamped")
    assert status == exitcodes.ANALYSIS_FAILED
    assert out == "" and len(err.strip().splitlines()) == 1 and "Traceback" not in err


def test_unknown_model_name_is_a_usage_error(capsys, rc_files):
    _, both, _ = rc_files
    status, out, err = _run(capsys, both, "--form", "no-such-form")
    assert status == exitcodes.USAGE and len(err.strip().splitlines()) == 1


def test_model_is_a_hidden_older_spelling_of_form(capsys, rc_files):
    # --form is the option's name (the word the outputs use); --model still works and is not in --help
    _, _, out_only = rc_files
    status, out, err = _run(capsys, out_only, "--quiet", "--model", "first-order")
    assert status == exitcodes.OK, err
    assert out.startswith("tau ")
    status, out, err = _run(capsys, out_only, "--model", "first-order", "--form", "underdamped")
    assert status == exitcodes.USAGE and "--form" in err and "--model" in err
    status, out, err = _run(capsys, "--help")
    assert "--form" in out and "--model" not in out
