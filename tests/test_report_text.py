"""The terminal table and the quiet script form of a fit."""

from __future__ import annotations

import math
import re

import pytest
from quantiphy import Quantity

from fitkit.report.text import render_fit_text
from support.report_results import FORM_NAMES, make_result


@pytest.fixture(scope="module")
def underdamped():
    return make_result("underdamped", undetermined=("zeta",),
                       components={"R1": (4.7e3, "Ohm"), "C1": (10e-9, "F")},
                       warnings=("the capture ends before the response settles",))


def test_header_names_file_form_reason_and_runner_up(underdamped):
    text = render_fit_text(underdamped)
    header = text.split("\n\n")[0]
    assert "bench/board_017.csv" in header
    assert re.search(r"form\s+underdamped", header)
    assert "lowest AICc" in header                       # selection_reason
    assert re.search(r"runner-up\s+first-order, ΔAICc \+52\.2", header)


def test_values_with_units_and_intervals_in_engineering_notation(underdamped):
    text = render_fit_text(underdamped)
    f0 = next(line for line in text.splitlines() if line.strip().startswith("f0 "))
    # engineering notation with the unit, and an interval around the value
    assert "10 kHz" in f0
    lo, hi = re.search(r"\[([^,]+), ([^\]]+)\]", f0).groups()
    # read back with quantiphy (an outside parser): the interval printed must hold the value
    assert float(Quantity(lo)) < 10e3 < float(Quantity(hi))
    assert float(Quantity(lo)) == pytest.approx(10e3 * (1 - 1.96 * 0.004), rel=1e-4)
    c1 = next(line for line in text.splitlines() if line.strip().startswith("C1 "))
    assert "10 nF" in c1 and "nF]" in c1


def test_undetermined_quantity_reads_not_determined_never_a_number(underdamped):
    text = render_fit_text(underdamped)
    zeta = next(line for line in text.splitlines() if line.strip().startswith("zeta "))
    assert "not determined" in zeta
    assert not re.search(r"\d", zeta.split("not determined")[0].replace("zeta", ""))
    assert "0.1667" not in text   # the stored value must not leak anywhere


def test_sections_in_order_and_warnings_last(underdamped):
    text = render_fit_text(underdamped)
    order = [text.index(t) for t in ("Fitted parameters", "Derived quantities", "Component values",
                                     "Candidate forms", "Diagnostics", "Warnings")]
    assert order == sorted(order)
    assert text.rstrip().splitlines()[-1].strip() == "! the capture ends before the response settles"


def test_diagnostics_show_noise_ratio_and_correction(underdamped):
    text = render_fit_text(underdamped)
    diag = text.split("Diagnostics")[1].split("Warnings")[0]
    d = underdamped.diagnostics
    assert f"ratio {d.rms_residual / d.noise_rms:.2f}" in diag
    assert "effective sample size from residual autocorrelation" in diag
    assert re.search(r"interval widening\s+x1\.35", diag)


def test_columns_are_aligned(underdamped):
    text = render_fit_text(underdamped)
    block = text.split("Fitted parameters\n")[1].split("\n\n")[0].splitlines()
    starts = {line.index("[") for line in block[1:] if "[" in line}
    assert len(starts) == 1  # every interval starts in the same column


@pytest.mark.parametrize("model", FORM_NAMES)
def test_every_form_renders_each_parameter(model):
    result = make_result(model)
    text = render_fit_text(result)
    for name in result.parameters:
        assert re.search(rf"^\s+{re.escape(name)}\s", text, re.M), name


def test_quiet_form_is_one_parseable_line_per_quantity(underdamped):
    lines = render_fit_text(underdamped, quiet=True).splitlines()
    names = [line.split()[0] for line in lines]
    assert len(names) == len(set(names))  # derived repeats of parameters are listed once
    expected = list(underdamped.parameters) + [n for n in underdamped.derived if n not in underdamped.parameters] \
        + list(underdamped.components)
    assert names == expected
    for line in lines:
        fields = line.split(" ")
        assert len(fields) == 5, line
        name, value, lo, hi, unit = fields
        est = underdamped.quantity(name)
        if name == "zeta":
            assert (value, lo, hi) == ("undetermined", "-", "-")
            continue
        assert float(value) == pytest.approx(est.value, rel=1e-9)
        assert float(lo) == pytest.approx(est.ci95[0], rel=1e-9)
        assert float(hi) == pytest.approx(est.ci95[1], rel=1e-9)
        assert unit == (est.unit or "-")
        assert math.isfinite(float(value))


def test_result_without_selection_or_diagnostics_still_renders():
    from dataclasses import replace
    bare = replace(make_result("first-order"), selection=(), diagnostics=None, selection_reason="")
    text = render_fit_text(bare)
    assert "Candidate forms" not in text and "Diagnostics" not in text
    assert "tau" in text


def test_micro_prefix_written_as_micro_sign():
    text = render_fit_text(make_result("first-order"))
    tau = next(line for line in text.splitlines() if line.strip().startswith("tau "))
    assert "10 µs" in tau   # quantiphy's Greek micro, as on the plot axes (matplotlib EngFormatter)


def test_runner_up_prefers_a_candidate_the_engine_did_not_set_aside():
    from dataclasses import replace
    from fitkit.results import CandidateScore
    base = make_result("two-real-pole")
    selection = (CandidateScore("two-real-pole", True, 5, -900.0, 0.0, 3.5e-3, "chosen"),
                 CandidateScore("underdamped", True, 5, -900.0, 0.0, 3.5e-3, "Q = 0.33 is outside this form's range"),
                 CandidateScore("first-order", True, 4, -800.0, 100.0, 17e-3, ""))
    header = render_fit_text(replace(base, selection=selection)).split("\n\n")[0]
    assert re.search(r"runner-up\s+first-order", header)
    # the candidate set aside is named with its reason before the runner-up, never as the runner-up
    assert re.search(r"set aside\s+underdamped: Q = 0.33 is outside this form's range", header)
    assert header.index("set aside") < header.index("runner-up")


def test_no_runner_up_when_every_other_candidate_was_set_aside():
    from dataclasses import replace
    from fitkit.results import CandidateScore
    base = make_result("first-order")
    selection = (CandidateScore("first-order", True, 4, -900.0, 0.0, 3.5e-3, "chosen"),
                 CandidateScore("two-real-pole", True, 5, -899.0, 1.0, 3.5e-3, "tau2 is not determined by the data"),
                 CandidateScore("underdamped", False, 5, math.nan, math.nan, math.nan, "did not converge"))
    header = render_fit_text(replace(base, selection=selection)).split("\n\n")[0]
    assert "runner-up" not in header
    assert "two-real-pole: tau2 is not determined by the data" in header
    assert "underdamped: did not converge" in header


def test_a_form_not_tried_is_not_said_to_have_failed_to_converge():
    """A form of real poles alone passed over because the response rings was never fitted: the
    header and the table say why, not "did not converge"."""
    from dataclasses import replace
    from fitkit.results import CandidateScore
    base = make_result("underdamped")
    why = "not tried: the response rings (the two-real-pole fit lies 9.0 standard errors above Q = 1/2)"
    selection = (CandidateScore("first-order", False, 0, math.nan, math.nan, math.nan, why),
                 CandidateScore("underdamped", True, 5, -900.0, 0.0, 3.5e-3, "chosen"))
    text = render_fit_text(replace(base, selection=selection))
    assert f"first-order: {why}" in text.split("\n\n")[0]
    assert "did not converge" not in text
    assert re.search(r"first-order\s+0\s+-\s+not fitted", text)


def test_a_better_runner_up_says_why_it_was_not_chosen():
    from dataclasses import replace
    from fitkit.results import CandidateScore
    base = make_result("two-real-pole")
    selection = (CandidateScore("two-real-pole", True, 5, -900.0, 0.0, 3.5e-3, "chosen"),
                 CandidateScore("three-real-pole", True, 6, -900.8, -0.8, 3.5e-3, ""))
    header = render_fit_text(replace(base, selection=selection)).split("\n\n")[0]
    # the margin of 10 is Burnham & Anderson's (2002, section 2.6), as fitkit.fitting.selection cites
    assert re.search(r"runner-up\s+three-real-pole, ΔAICc -0\.8: fits better by 0\.8, less than the 10 ", header)
    assert "two-real-pole is kept" in header
