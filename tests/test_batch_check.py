"""`fitkit batch --design`: every board checked against its design, verdicts in the
summary, limits on the distribution plots, a bad design refused once."""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from fitkit import exitcodes
from fitkit.cli import cli
from fitkit.cli.errors_to_exit import run_with_error_handling
from support.batch_captures import first_order


DESIGN = Path(__file__).resolve().parents[1] / "demo_captures" / "designs" / "input_rc_lowpass.toml"
N = 1500


def _board(path: Path, tau: float, seed: int) -> Path:
    """A 10 ms capture of the drive (a 1 V step) and the response: the textbook
    first-order step response of an RC low-pass (tau = RC), DC gain 0.999
    (10 MOhm probe on 10 kOhm; voltage divider formula)."""
    rng = np.random.default_rng(seed)
    t = np.arange(N) * (10e-3 / N) - 2e-3
    drive = np.where(t > 0, 1.0, 0.0) + rng.normal(0.0, 0.004, N)
    response = 0.999 * first_order(t, tau) + rng.normal(0.0, 0.004, N)
    path.parent.mkdir(parents=True, exist_ok=True)
    np.savetxt(path, np.column_stack([t, drive, response]), delimiter=",", header="time,in,out",
               comments="", fmt="%.9g")
    return path


def test_good_and_drifted_boards_get_their_verdicts(tmp_path, capsys):
    # design: R11 = 10 kOhm 1 %, C11 = 100 nF 5 %, so tau = RC = 1 ms nominal (plus the fixture)
    good = _board(tmp_path / "line" / "good.csv", 0.99e-3, seed=1)
    drifted = _board(tmp_path / "line" / "drifted.csv", 1.5e-3, seed=2)   # C11 half as large again
    out = tmp_path / "out"
    status = run_with_error_handling(cli, ["batch", str(tmp_path / "line"), "--design", str(DESIGN),
                                           "--out", str(out), "--workers", "1"])
    capsys.readouterr()
    frame = pd.read_csv(out / "summary.csv").set_index("file")
    assert frame.loc[str(good), "status"] == "pass"
    assert frame.loc[str(drifted), "status"] == "fail"
    assert status == exitcodes.FAIL
    assert frame.loc[str(drifted), "tau_verdict"] == "outside"
    assert frame.loc[str(drifted), "tau"] == pytest.approx(1.5e-3, rel=0.02)
    doc = json.loads((out / "summary.json").read_text())
    low, high = doc["limits"]["tau"]
    assert low < 1.0e-3 < high < 1.5e-3
    assert (out / "distributions" / "tau.png").exists()
    problems = pd.read_csv(out / "problems.csv")
    assert list(problems["file"]) == [str(drifted)] and problems["reason"].str.startswith("fail").all()


def test_a_bad_design_is_one_error_before_any_work(tmp_path, capsys):
    _board(tmp_path / "line" / "good.csv", 1.0e-3, seed=1)
    design = tmp_path / "design.toml"
    design.write_text("[x]\n")
    status = run_with_error_handling(cli, ["batch", str(tmp_path / "line"), "--design", str(design),
                                           "--out", str(tmp_path / "out"), "--workers", "1"])
    err = capsys.readouterr().err
    assert status != exitcodes.OK and len(err.strip().splitlines()) == 1 and "design.toml" in err
    assert not (tmp_path / "out").exists()
