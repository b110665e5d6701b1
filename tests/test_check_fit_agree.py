"""`fitkit fit` and `fitkit check` report the same tau / f0 / Q and intervals on the same
capture (issue 16: one engine), compared through the two commands' JSON outputs.

The check fits the form its design's order calls for; `fitkit fit --model FORM` on the
same capture, with the same options, must give the same numbers to rounding. The
reference is fitkit's own fit command (the check must not drift from it).
"""

from __future__ import annotations

import json
from pathlib import Path

import pytest

from fitkit.cli import cli
from fitkit.cli.errors_to_exit import run_with_error_handling

DEMO = Path(__file__).resolve().parents[1] / "demo_captures"

CASES = [
    ("good_board.csv", (), "input_rc_lowpass"),
    ("good_board_ladder.csv", (), "rc_ladder"),
    ("good_board_sallen_key.csv", (), "sallen_key_lowpass"),
    ("good_board_sallen_key_square.csv", (), "sallen_key_lowpass"),
    ("drifted_board_ladder.csv", (), "rc_ladder"),
    ("drifted_board_sallen_key.csv", (), "sallen_key_lowpass"),
    ("wrong_part_board_sallen_key.txt", ("--sample-interval", "1u"), "sallen_key_lowpass"),
    ("wrong_part_board_ladder_input.csv", (str(DEMO / "wrong_part_board_ladder_output.csv"),), "rc_ladder"),
    ("wrong_part_board_ladder_output.csv", (), "rc_ladder"),
]


def _json(capsys, *args) -> dict:
    run_with_error_handling(cli, list(map(str, args)))
    return json.loads(capsys.readouterr().out)


def _positional_and_options(extra):
    files = [a for a in extra if not a.startswith("--") and Path(a).suffix]
    options = [a for a in extra if a not in files]
    return files, options


@pytest.mark.parametrize("name,extra,design", CASES, ids=[c[0] for c in CASES])
def test_fit_and_check_give_the_same_behaviour_through_the_cli(capsys, name, extra, design):
    files, options = _positional_and_options(extra)
    check = _json(capsys, "check", DEMO / name, *files, "--design", DEMO / "designs" / f"{design}.toml",
                  "--trials", "20", "--json", *options)
    model = check["fit"]["model"]
    fit = _json(capsys, "fit", DEMO / name, *files, "--model", model, "--json", *options)
    judged = [q for q in ("tau", "f0", "Q") if q in check["quantities"]]
    assert judged, check["quantities"]
    for q in judged:
        from_fit = fit["parameters"].get(q) or fit["derived"][q]
        from_check = check["quantities"][q]
        assert from_check["value"] == pytest.approx(from_fit["value"], rel=1e-9), q
        if from_fit.get("ci95") is None:
            assert from_check["ci95"] is None
        else:
            assert from_check["ci95"] == pytest.approx(from_fit["ci95"], rel=1e-9), q
