"""check_capture end to end: demo boards, the real RL capture, good boards, boards just outside.

Verdict rules the tests hold the check to (fitkit.check.verdicts):
* a good board at nominal passes;
* a good board at a tolerance corner that is not extreme for a judged
  quantity passes; at a corner that is extreme for a quantity (tau of an RC
  at R and C both high) the board sits exactly on the allowed range's limit,
  so its interval straddles it: pass or inconclusive, never fail;
* a board just outside tolerance (every part 1.3 x its tolerance beyond the
  corner that is extreme for the main quantity) fails or is inconclusive,
  never passes, in 100 % of the seeds tried.
"""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pytest

from support.check_simulator import RC_DESIGN_TOML, SK_DESIGN_TOML, simulate_board
from fitkit.check import check_capture, loads_design
from fitkit.io import load_capture
from support.reference_paths import REAL_CAPTURES, needs_real_captures

ROOT = Path(__file__).resolve().parents[1]
DEMO = ROOT / "demo_captures"
REAL_RL = REAL_CAPTURES / "rl-square-scope.csv"

RC = RC_DESIGN_TOML
SK = SK_DESIGN_TOML


def check(capture, design, **kw):
    return check_capture(capture, design, input="input", output="output", envelope_trials=40, **kw)


# -- the demo boards get the verdicts demo_captures/README.md gives ------------------------------

DEMO_CASES = [
    ("good_board.csv", None, "input_rc_lowpass", {}, "pass"),
    ("good_board_ladder.csv", None, "rc_ladder", {}, "pass"),
    ("good_board_sallen_key.csv", None, "sallen_key_lowpass", {}, "pass"),
    ("drifted_board_ladder.csv", None, "rc_ladder", {}, "pass"),
    ("wrong_part_board_sallen_key.txt", None, "sallen_key_lowpass", {"sample_interval": "1u"}, "pass"),
    ("drifted_board_sallen_key.csv", None, "sallen_key_lowpass", {}, "fail"),
    ("wrong_part_board_ladder_input.csv", "wrong_part_board_ladder_output.csv", "rc_ladder", {}, "fail"),
]


@pytest.fixture(scope="module")
def demo_results():
    out = {}
    for name, second, design, kw, _ in DEMO_CASES:
        cap = load_capture(DEMO / name, second_path=None if second is None else DEMO / second, **kw)
        out[name] = check_capture(cap, DEMO / "designs" / f"{design}.toml", envelope_trials=40)
    return out


@pytest.mark.parametrize("name,expected", [(c[0], c[4]) for c in DEMO_CASES])
def test_demo_board_verdicts(demo_results, name, expected):
    assert demo_results[name].verdict == expected, demo_results[name].summary


@pytest.mark.parametrize("name", [c[0] for c in DEMO_CASES])
def test_fit_and_check_report_the_same_behaviour(demo_results, name):
    # one engine: `fitkit fit --form FORM` on the same capture gives the check's tau / f0 / Q
    # and intervals, to rounding (the check's own fit must not drift from the fit command's)
    from fitkit.fitting import fit_capture
    case = next(c for c in DEMO_CASES if c[0] == name)
    cap = load_capture(DEMO / name, second_path=None if case[1] is None else DEMO / case[1], **case[3])
    r = demo_results[name]
    fit = fit_capture(cap, model=r.fit.model)
    judged = [q.name for q in r.quantities if q.name in ("tau", "f0", "Q")]
    assert judged
    for q in judged:
        a, b = fit.quantity(q), r.fit.quantity(q)
        assert a.value == pytest.approx(b.value, rel=1e-9)
        assert a.ci95 == pytest.approx(b.ci95, rel=1e-9)
        verdict = next(v for v in r.quantities if v.name == q)
        assert verdict.value == pytest.approx(a.value, rel=1e-12)


def test_a_passing_board_is_quiet(demo_results):
    from fitkit.report.check_text import render_check_text
    r = demo_results["good_board_ladder.csv"]
    assert r.verdict == "pass" and r.suspects              # still in the result and the JSON
    text = render_check_text(r)
    assert "suspects" not in text and "drifted" not in text and "does not explain" not in text


def test_envelope_holds_a_nominal_board(demo_results):
    # aligned on the fitted edge time, baseline and step: a good board sits inside its own envelope
    for name in ("good_board.csv", "good_board_ladder.csv", "good_board_sallen_key.csv"):
        assert demo_results[name].envelope_comparison.fraction_outside < 0.05, name


def test_drifted_sallen_key_names_c31_drifted(demo_results):
    # README: C31 13.86 nF where 22 nF belongs, 6.6 % from the nearest E24 value: drifted
    r = demo_results["drifted_board_sallen_key.csv"]
    lead = r.suspects[0]
    assert lead.part == "C31" and lead.tied
    assert "drifted" in lead.pattern
    assert 12.5e-9 < lead.value < 15.5e-9
    assert {q.name: q.verdict for q in r.quantities} == {"f0": "outside", "Q": "outside"}
    assert next(c for c in r.components if c.part == "C31").verdict == "outside"


def test_wrong_part_ladder_names_c22_or_r21_a_decade_low(demo_results):
    # README: C22 is 9.71 nF where 100 nF belongs; from the output alone R21 and C22 are suspects
    r = demo_results["wrong_part_board_ladder_input.csv"]
    leaders = [s for s in r.suspects if s.tied]
    assert {s.part for s in leaders} <= {"C22", "R21"} and leaders
    assert all("a decade low" in s.pattern for s in leaders)


def test_good_board_result_shape(demo_results):
    r = demo_results["good_board_sallen_key.csv"]
    d = json.loads(json.dumps(r.to_dict(), allow_nan=False))
    assert {"verdict", "components", "quantities", "suspects", "envelope", "resolve", "warnings"} <= set(d)
    assert set(d["components"]) == {"R31", "R32", "C31", "C32"}
    for c in d["components"].values():
        assert {"value", "ci95", "nominal", "tolerance", "verdict"} <= set(c)
    for s in d["suspects"]:
        assert {"part", "value", "ci95", "delta_aicc", "pattern"} <= set(s)
    assert d["envelope"]["trials"] == 40 and d["envelope"]["corners"] == 16
    assert r.summary.startswith("pass")
    assert r.fit.model == "second-order"


# -- the real RL capture against its stated design ----------------------------------------------

@needs_real_captures
def test_real_rl_capture_fails_against_its_stated_design():
    # SOURCE.md: stated 10 kOhm and 10 mH (L/R = 1 us); the capture decays with about 9 us
    design = loads_design('name = "series RL as stated"\ndrive = "in"\nmeasure = "out"\n[circuit]\ntopology = "rl"\n'
                          '[parts.R1]\nvalue = "10k"\ntolerance = "5%"\n[parts.L1]\nvalue = "10m"\ntolerance = "10%"\n')
    r = check_capture(load_capture(REAL_RL), design, envelope_trials=40)
    assert r.verdict == "fail"
    tau = next(q for q in r.quantities if q.name == "tau")
    assert tau.verdict == "outside" and 6e-6 < tau.value < 12e-6
    assert r.summary.startswith("fail; tau")
    assert any("decade" in s.pattern for s in r.suspects if s.tied)


# -- good boards, corners and boards just outside ----------------------------------------------

def test_good_boards_at_nominal_pass():
    for text, topo, values in ((RC, "rc-low-pass", {"R1": 10e3, "C1": 100e-9}),
                               (SK, "sallen-key-low-pass", {"R1": 10e3, "R2": 10e3, "C1": 22e-9, "C2": 10e-9})):
        r = check(simulate_board(topo, values, n=1200, seed=11), loads_design(text))
        assert r.verdict == "pass", r.summary


def test_rc_boards_at_the_corners_pass_or_sit_on_the_limit():
    design = loads_design(RC)
    outcomes = {}
    for r_side in (-1, 1):
        for c_side in (-1, 1):
            values = {"R1": 10e3 * (1 + 0.01 * r_side), "C1": 100e-9 * (1 + 0.05 * c_side)}
            outcomes[(r_side, c_side)] = check(simulate_board("rc-low-pass", values, n=1200, seed=21),
                                               design).verdict
    assert outcomes[(1, -1)] == "pass" and outcomes[(-1, 1)] == "pass"   # tau inside the range
    assert "fail" not in outcomes.values()                                 # extreme corners: on the limit


def test_sallen_key_interior_corners_pass():
    design = loads_design(SK)
    # corners with Q at nominal (R1 = R2 and C1, C2 moved alike; TI SLOA049: Q = sqrt(R1 R2 C1 C2) / (C2 (R1 + R2)))
    # and f0 2 % inside its allowed range
    for signs in ((-1, -1, 1, 1), (1, 1, -1, -1)):
        values = {p: v * (1 + s * t) for (p, v, t), s in
                  zip((("R1", 10e3, 0.01), ("R2", 10e3, 0.01), ("C1", 22e-9, 0.05), ("C2", 10e-9, 0.05)), signs)}
        r = check(simulate_board("sallen-key-low-pass", values, n=1200, seed=31), design)
        assert r.verdict == "pass", (signs, r.summary)


@pytest.mark.parametrize("seed", [41, 42])
def test_boards_just_outside_tolerance_never_pass(seed):
    rc = {"R1": 10e3 * (1 + 1.3 * 0.01), "C1": 100e-9 * (1 + 1.3 * 0.05)}          # tau beyond its maximum
    sk = {"R1": 10e3 * (1 - 1.3 * 0.01), "R2": 10e3 * (1 - 1.3 * 0.01),            # f0 beyond its maximum
          "C1": 22e-9 * (1 - 1.3 * 0.05), "C2": 10e-9 * (1 - 1.3 * 0.05)}
    for text, topo, values in ((RC, "rc-low-pass", rc), (SK, "sallen-key-low-pass", sk)):
        r = check(simulate_board(topo, values, n=1200, seed=seed), loads_design(text))
        assert r.verdict in ("fail", "inconclusive"), r.summary


def test_inconclusive_board_says_what_would_resolve_it():
    # design limit tau within +-5 %; the board's tau is 5 % high, on the limit, with a noisy 8-bit capture
    design = loads_design(RC + '[limits]\ntau = "+-5%"\n')
    capture = simulate_board("rc-low-pass", {"R1": 10e3, "C1": 105e-9}, n=1000, noise=20e-3, bits=8, seed=5)
    r = check(capture, design)
    assert r.verdict == "inconclusive", r.summary
    tau = next(q for q in r.quantities if q.name == "tau")
    assert tau.verdict == "cannot tell" and tau.limit_source == "design file"
    assert tau.low == pytest.approx(0.95e-3) and tau.high == pytest.approx(1.05e-3)
    assert r.resolve and any("average" in h or "longer" in h or "finer" in h for h in r.resolve)


def test_envelope_volts_follow_the_capture():
    capture = simulate_board("rc-low-pass", {"R1": 10e3, "C1": 100e-9}, n=1200, seed=13)
    r = check(capture, loads_design(RC))
    t, lo, hi = r.envelope_volts
    assert np.all(lo <= hi) and abs(hi[-1] - 1.0) < 0.05
    assert r.envelope_comparison.fraction_outside < 0.05


def test_check_result_notebook_views():
    # to_frame() and the notebook HTML view of a board check (issue 7: Python API for notebooks)
    from fitkit import load_capture
    from fitkit.check import check_capture
    root = Path(__file__).resolve().parents[1] / "demo_captures"
    result = check_capture(load_capture(str(root / "drifted_board_sallen_key.csv")),
                           str(root / "designs" / "sallen_key_lowpass.toml"), envelope_trials=40)
    frame = result.to_frame()
    assert {"kind", "name", "value", "verdict"} <= set(frame.columns)
    assert "C1" in set(frame["name"]) or "C31" in set(frame["name"])
    html = result._repr_html_()
    assert "Board check" in html and "<table" in html and "data:image/png;base64" in html
