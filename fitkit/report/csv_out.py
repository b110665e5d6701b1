"""Fits as tables for spreadsheets and pandas.

* ``fit_result_csv(result)``: one row per quantity of one fit, columns
  kind, name, value, stderr, ci95_low, ci95_high, unit, determined (a
  derived quantity that repeats a parameter, such as tau, is listed once).
* ``quantity_frame(result)``: the same rows as a pandas DataFrame
  (``FitResult.to_frame()``).
* ``results_table(results)``: one row per capture, one column per quantity
  and its interval, for a batch (distributions and limits come with batch).

Numbers are plain SI floats (no prefixes) so a spreadsheet can compute with
them. A quantity the data do not determine has empty value, stderr and
interval cells and determined = false: it is never written as a number.
"""

from __future__ import annotations

import csv
import io
import math
from typing import Iterable

from ..results import FitResult
from .quantities import is_reportable, quantity_rows

CSV_COLUMNS = ("kind", "name", "value", "stderr", "ci95_low", "ci95_high", "unit", "determined")


def _number(x: float | None) -> float | None:
    if x is None:
        return None
    x = float(x)
    return x if math.isfinite(x) else None


def _quantity_records(result: FitResult) -> list[dict]:
    records = []
    for row in quantity_rows(result, skip_repeated=True):
        est = row.estimate
        shown = is_reportable(est)
        lo, hi = est.ci95 if (shown and est.ci95 is not None) else (None, None)
        records.append({
            "kind": row.kind, "name": row.name,
            "value": _number(est.value) if shown else None,
            "stderr": _number(est.stderr) if shown else None,
            "ci95_low": _number(lo), "ci95_high": _number(hi),
            "unit": est.unit, "determined": shown,
        })
    return records


def fit_result_csv(result: FitResult) -> str:
    """One fit as CSV text (header line, then one row per quantity).

    Floats are written with ``repr`` precision; empty cells mean "not
    available" (or not determined, see the determined column).
    """
    buffer = io.StringIO()
    writer = csv.writer(buffer, lineterminator="\n")
    writer.writerow(CSV_COLUMNS)
    for rec in _quantity_records(result):
        cells = []
        for col in CSV_COLUMNS:
            value = rec[col]
            if col == "determined":
                cells.append("true" if value else "false")
            elif value is None:
                cells.append("")
            elif isinstance(value, float):
                cells.append(repr(value))
            else:
                cells.append(value)
        writer.writerow(cells)
    return buffer.getvalue()


def quantity_frame(result: FitResult):
    """One fit as a pandas DataFrame, one row per quantity (columns as the CSV).

    Missing or undetermined numbers are NaN; ``determined`` is boolean.
    """
    import pandas as pd

    frame = pd.DataFrame.from_records(_quantity_records(result), columns=list(CSV_COLUMNS))
    for col in ("value", "stderr", "ci95_low", "ci95_high"):
        frame[col] = frame[col].astype(float)
    frame["determined"] = frame["determined"].astype(bool)
    frame.attrs["file"] = result.file
    frame.attrs["model"] = result.model
    return frame


def results_table(results: Iterable[FitResult]):
    """Many fits as a pandas DataFrame, one row per capture.

    Columns: ``file``, ``model``, ``rms_residual`` (V), ``n_warnings``,
    ``warnings`` (joined with "; "), then for each quantity name found in any
    fit (parameters, derived, components, in order of first appearance):
    ``NAME``, ``NAME_ci95_low``, ``NAME_ci95_high`` in SI units. A quantity
    that a fit lacks or does not determine is NaN. ``frame.attrs["units"]``
    maps each quantity name to its SI unit.
    """
    import pandas as pd

    rows, units, order = [], {}, []
    for result in results:
        row: dict = {
            "file": result.file, "model": result.model,
            "rms_residual": (_number(result.diagnostics.rms_residual)
                             if result.diagnostics is not None else None),
            "n_warnings": len(result.warnings), "warnings": "; ".join(result.warnings),
        }
        for q in quantity_rows(result, skip_repeated=True):
            if q.name not in units:
                units[q.name] = q.estimate.unit
                order.append(q.name)
            shown = is_reportable(q.estimate)
            lo, hi = q.estimate.ci95 if (shown and q.estimate.ci95 is not None) else (None, None)
            row[q.name] = _number(q.estimate.value) if shown else None
            row[f"{q.name}_ci95_low"] = _number(lo)
            row[f"{q.name}_ci95_high"] = _number(hi)
        rows.append(row)
    columns = ["file", "model", "rms_residual", "n_warnings", "warnings"]
    for name in order:
        columns += [name, f"{name}_ci95_low", f"{name}_ci95_high"]
    frame = pd.DataFrame.from_records(rows, columns=columns)
    for col in columns[5:] + ["rms_residual"]:
        frame[col] = frame[col].astype(float)
    frame.attrs["units"] = units
    return frame
