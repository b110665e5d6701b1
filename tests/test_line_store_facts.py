"""Board serial, capture time and fixture of a capture, and the store entry built from a result's JSON."""

from __future__ import annotations

import datetime as dt

import pytest

from fitkit.errors import OptionError
from fitkit.line_store import CaptureFacts, entry_from_result
from fitkit.line_store.capture_facts import capture_facts, compile_serial_pattern, serial_from_name


def test_serial_from_the_file_name():
    default = compile_serial_pattern(None)
    assert serial_from_name("line2/board_10025_retest1.csv", default) == "10025"
    assert serial_from_name("shift_3/SN004417.csv", default) == "004417"
    assert serial_from_name("no_digits.csv", default) is None
    named = compile_serial_pattern(r"unit-(?P<serial>[A-Z]\d+)")
    assert serial_from_name("bench2_unit-C0451_2026.csv", named) == "C0451"
    with pytest.raises(OptionError):
        compile_serial_pattern("board(")


def test_header_fields_give_serial_time_and_fixture(tmp_path):
    path = tmp_path / "capture.csv"
    path.write_text("# Serial: A-77\n# Fixture: bench 5\n# Date: 2026-11-20T07:15:00\nt,v\n0,0\n1,1\n")
    facts = capture_facts(str(path), "f" * 64, serial_field="Serial")
    assert (facts.board_serial, facts.serial_source) == ("A-77", "header field Serial")
    assert facts.captured_at == dt.datetime(2026, 11, 20, 7, 15)
    assert facts.time_source == "header field Date" and facts.fixture == "bench 5"
    plain = tmp_path / "board_0999.csv"
    plain.write_text("t,v\n0,0\n1,1\n")
    facts = capture_facts(str(plain), "f" * 64, fixture="bench 9")
    assert facts.board_serial == "0999" and facts.time_source == "file modification time"
    assert facts.fixture == "bench 9"


def test_entry_from_a_check_result_json():
    result = {"design": "demo ladder", "verdict": "fail", "summary": "fail; C22 low", "warnings": ["w1"],
              "components": {"C22": {"value": 9.7e-9, "ci95": [9.6e-9, 9.8e-9], "unit": "F",
                                     "tolerance_band": [95e-9, 105e-9], "nominal": 100e-9, "verdict": "outside"}},
              "quantities": {"f0": {"limits": [149.8, 169.0], "nominal": 159.2, "verdict": "outside"}},
              "fit": {"model": "two-real-pole",
                      "parameters": {"f0": {"value": 502.0, "ci95": [490.0, 515.0], "unit": "Hz",
                                            "determined": True}},
                      "derived": {"f0": {"value": 1.0, "ci95": [0.9, 1.1], "unit": "Hz", "determined": True},
                                  "Q": {"value": 0.257, "ci95": None, "unit": "", "determined": False}}}}
    facts = CaptureFacts("x.csv", "a" * 64, "0452", "file name", None, "unknown", "bench 2")
    entry = entry_from_result(result, facts, design_sha256="b" * 64)
    assert entry.analysis == "design " + "b" * 64 and entry.verdict == "fail" and entry.status == "fail"
    values = {(v.kind, v.name): v for v in entry.values}
    assert values[("quantity", "f0")].value == 502.0  # the parameter wins over the derived quantity
    assert values[("quantity", "f0")].limit_low == 149.8
    assert values[("quantity", "Q")].determined is False and values[("quantity", "Q")].ci_low is None
    assert values[("part", "C22")].limit_high == 105e-9 and values[("part", "C22")].verdict == "outside"
    fit_only = entry_from_result(result["fit"], facts, model_setting="auto")
    assert fit_only.analysis == "fit auto" and fit_only.status == "fitted" and fit_only.design_name is None
