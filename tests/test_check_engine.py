"""The board check stands on the fitting engine (issue 16) and turns a wrong
design into a verdict, not a crash (issue 19, item 1).

Truth: demo_captures/truth.json, written by demo_captures/make_demo_captures.py
(the wrong-part ladder has C22 = 9.71 nF where 100 nF belongs, C21 at
103.1 nF inside its 5 %).
"""

from __future__ import annotations

import math
from pathlib import Path

import pytest

from fitkit.check import check_capture
from fitkit.check.hypotheses import PLAUSIBLE_SPAN
from fitkit.io import load_capture

DEMO = Path(__file__).resolve().parents[1] / "demo_captures"


@pytest.fixture(scope="module")
def output_only_ladder():
    cap = load_capture(DEMO / "wrong_part_board_ladder_output.csv")
    return check_capture(cap, DEMO / "designs" / "rc_ladder.toml", envelope_trials=40)


def test_output_only_wrong_part_ladder_leads_with_c22_near_its_real_value(output_only_ladder):
    r = output_only_ladder
    assert r.verdict == "fail" and not r.measured_input
    leaders = [s for s in r.suspects if s.tied]
    c22 = next(s for s in r.suspects if s.part == "C22")
    # an equal-stage ladder: R21 x m and C22 x m give the same H(s) (a2 = m R^2 C^2,
    # a1 = RC (1 + 2m); circuit algebra), so from the output alone the honest answer is a tie
    assert c22.tied and c22 in leaders and {s.part for s in leaders} <= {"C22", "R21"}
    assert abs(c22.value / 9.71e-9 - 1) < 0.10
    assert c22.ci95[0] <= 9.71e-9 <= c22.ci95[1]
    assert "a decade low" in c22.pattern


def test_no_suspect_value_sits_at_a_search_bound(output_only_ladder):
    for s in output_only_ladder.suspects:
        if s.value is not None:
            assert abs(math.log(s.value / s.nominal)) < math.log(PLAUSIBLE_SPAN)
            assert s.ci95 is not None
        elif s.kind != "swap":
            assert not s.explains and "does not explain" in s.pattern


def test_capture_of_another_stage_gets_a_verdict_not_a_crash():
    # good_board.csv is the first-order input stage; rc_ladder.toml the second-order ladder
    cap = load_capture(DEMO / "good_board.csv")
    r = check_capture(cap, DEMO / "designs" / "rc_ladder.toml", envelope_trials=20)
    assert r.verdict in ("fail", "inconclusive")
    assert not any(s.tied and s.explains for s in r.suspects)


def test_a_part_outside_its_band_but_not_the_suspect_reads_outside_if_alone():
    # a part whose own interval lies wholly outside its tolerance is not "cannot tell" (which
    # means the interval straddles a limit); when another part explains the capture better it
    # is "outside if alone", and only a leading suspect outside its band fails the board
    from fitkit.check.design import load_design
    from fitkit.check.verdicts import CANNOT_TELL, OUTSIDE, OUTSIDE_IF_ALONE, judge_parts, overall_verdict
    from fitkit.results import Estimate
    design = load_design(DEMO / "designs" / "sallen_key_lowpass.toml")
    names = {spec.designator: name for name, spec in design.parts.items()}
    c31, r31, c32 = names["C31"], names["R31"], names["C32"]
    estimates = {c31: Estimate(c31, 13.8e-9, 0.05e-9, (13.7e-9, 13.9e-9), "F"),       # far below 22 nF +-5 %
                 r31: Estimate(r31, 8.5e3, 0.1e3, (8.3e3, 8.7e3), "Ohm"),             # below 10 kOhm +-1 %
                 c32: Estimate(c32, 10.2e-9, 0.5e-9, (9.2e-9, 11.2e-9), "F")}         # straddles 10 nF +-5 %
    parts = {p.part: p for p in judge_parts(design, estimates, leaders=[c31], undetermined=[], widening={})}
    assert parts["C31"].verdict == OUTSIDE
    assert parts["R31"].verdict == OUTSIDE_IF_ALONE and "another part" in parts["R31"].note
    assert parts["C32"].verdict == CANNOT_TELL
    assert overall_verdict([], tuple(parts.values())) == "fail"
