"""`fitkit check`: text, --json keys, exit statuses (fitkit/exitcodes.py), --plot and --report files."""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np

from support.check_simulator import RC_DESIGN_TOML, simulate_board
from fitkit import exitcodes
from fitkit.cli import cli
from fitkit.cli.errors_to_exit import run_with_error_handling

DEMO = Path(__file__).resolve().parents[1] / "demo_captures"
SK_DESIGN = str(DEMO / "designs" / "sallen_key_lowpass.toml")
RC = RC_DESIGN_TOML + '[limits]\ntau = "+-5%"\n'


def run(capsys, *args):
    status = run_with_error_handling(cli, ["check", *map(str, args), "--trials", "20"])
    out = capsys.readouterr()
    return status, out.out, out.err


def write_csv(capture, path: Path) -> Path:
    data = np.column_stack([capture.time] + [c.values for c in capture.channels])
    np.savetxt(path, data, delimiter=",", header="time (s),input (V),output (V)", comments="")
    return path


def test_failing_board_text_and_exit_status(capsys, tmp_path):
    png = tmp_path / "check.png"
    status, out, err = run(capsys, DEMO / "drifted_board_sallen_key.csv", "--design", SK_DESIGN, "--plot", png)
    assert status == exitcodes.FAIL == 1
    assert "FAIL - the board does not match its design" in out
    assert "suspects, most likely first" in out and "C31" in out and "drifted" in out
    assert png.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    assert err == ""


def test_passing_board_json(capsys, tmp_path):
    html = tmp_path / "check.html"
    status, out, _ = run(capsys, DEMO / "good_board_sallen_key.csv", "--design", SK_DESIGN, "--json",
                         "--report", html)
    assert status == exitcodes.OK == 0
    d = json.loads(out)
    assert d["verdict"] == "pass"
    assert {"verdict", "components", "quantities", "suspects", "envelope", "resolve", "warnings"} <= set(d)
    assert {"value", "ci95", "nominal", "tolerance", "verdict"} <= set(d["components"]["C31"])
    assert all({"part", "value", "ci95", "delta_aicc"} <= set(s) for s in d["suspects"])
    assert "Board check" in html.read_text(encoding="utf-8")


def test_inconclusive_board_exit_status(capsys, tmp_path):
    design = tmp_path / "rc.toml"
    design.write_text(RC, encoding="utf-8")
    capture = simulate_board("rc-low-pass", {"R1": 10e3, "C1": 105e-9}, n=1000, noise=20e-3, bits=8, seed=5)
    csv = write_csv(capture, tmp_path / "board.csv")
    status, out, _ = run(capsys, csv, "--design", design, "--input", "input", "--output", "output")
    assert status == exitcodes.INCONCLUSIVE == 3
    assert "INCONCLUSIVE" in out and "to resolve:" in out


def test_unusable_inputs_give_one_line_and_status_4(capsys, tmp_path):
    bad_design = tmp_path / "bad.toml"
    bad_design.write_text(RC.replace('tolerance = "1%"\n', ""), encoding="utf-8")
    status, out, err = run(capsys, DEMO / "good_board.csv", "--design", bad_design)
    assert status == exitcodes.UNUSABLE_INPUT == 4
    assert err.count("\n") == 1 and "part R1: has no tolerance" in err and str(bad_design) in err
    status, _, err = run(capsys, tmp_path / "missing.csv", "--design", SK_DESIGN)
    assert status == exitcodes.UNUSABLE_INPUT and err.count("\n") == 1


def test_help_documents_the_exit_statuses(capsys):
    status = run_with_error_handling(cli, ["check", "--help"])
    out = capsys.readouterr().out
    assert status == 0
    for line in ("0  pass", "1  fail", "3  inconclusive", "4  unusable input"):
        assert line in out
