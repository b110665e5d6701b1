"""CSV for spreadsheets, and pandas tables of one fit and of many."""

from __future__ import annotations

import csv
import io
import math

import pandas as pd
import pytest

from fitkit.report.csv_out import CSV_COLUMNS, fit_result_csv, results_table
from support.report_results import make_result


@pytest.fixture(scope="module")
def result():
    return make_result("two-real-pole", undetermined=("tau2",), components={"R1": (10e3, "Ohm")})


def test_csv_has_one_row_per_quantity_with_exact_numbers(result):
    rows = list(csv.DictReader(io.StringIO(fit_result_csv(result))))
    assert tuple(rows[0]) == CSV_COLUMNS
    # each quantity once: a derived quantity repeating a parameter (tau1, tau2) is not listed again
    repeated = set(result.derived) & set(result.parameters)
    assert repeated
    assert len(rows) == len(result.parameters) + len(result.derived) - len(repeated) + len(result.components)
    assert len({(r["name"]) for r in rows if r["kind"] != "component"}) == len(rows) - len(result.components)
    by_key = {(r["kind"], r["name"]): r for r in rows}
    tau1 = by_key[("parameter", "tau1")]
    est = result.parameters["tau1"]
    assert float(tau1["value"]) == est.value            # repr round-trips exactly
    assert float(tau1["ci95_low"]) == est.ci95[0]
    assert float(tau1["ci95_high"]) == est.ci95[1]
    assert float(tau1["stderr"]) == est.stderr
    assert tau1["unit"] == "s" and tau1["determined"] == "true"
    assert by_key[("component", "R1")]["unit"] == "Ohm"


def test_undetermined_rows_have_no_numbers(result):
    rows = list(csv.DictReader(io.StringIO(fit_result_csv(result))))
    tau2 = next(r for r in rows if r["name"] == "tau2" and r["kind"] == "parameter")
    assert tau2["determined"] == "false"
    assert tau2["value"] == tau2["stderr"] == tau2["ci95_low"] == tau2["ci95_high"] == ""


def test_csv_reads_into_pandas_as_numbers(result):
    frame = pd.read_csv(io.StringIO(fit_result_csv(result)))
    assert frame["value"].dtype == float
    assert frame.loc[frame["name"] == "Q", "value"].iloc[0] == pytest.approx(1 / 3, rel=1e-5)


def test_to_frame_matches_csv(result):
    frame = result.to_frame()
    assert list(frame.columns) == list(CSV_COLUMNS)
    assert frame.attrs["model"] == "two-real-pole"
    row = frame[(frame["kind"] == "parameter") & (frame["name"] == "tau2")].iloc[0]
    assert not row["determined"] and math.isnan(row["value"])
    assert frame["determined"].dtype == bool


def test_results_table_one_row_per_capture():
    fits = [make_result("first-order", file=f"line/board_{k:03d}.csv", seed=k) for k in range(3)]
    fits.append(make_result("underdamped", file="line/board_odd.csv", undetermined=("Q",)))
    table = results_table(fits)
    assert list(table["file"]) == [f.file for f in fits]
    assert table.attrs["units"]["tau"] == "s" and table.attrs["units"]["f0"] == "Hz"
    assert table.loc[0, "tau"] == fits[0].parameters["tau"].value
    assert table.loc[0, "tau_ci95_low"] == fits[0].parameters["tau"].ci95[0]
    assert math.isnan(table.loc[3, "tau"])          # not in this form
    assert math.isnan(table.loc[3, "Q"])            # not determined
    assert table.loc[3, "f0"] == 10e3
    assert table["rms_residual"].notna().all()
