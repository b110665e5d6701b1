"""The batch summary: one row per input, always exactly as many rows as inputs.

Files written under the output folder (each atomically):

  summary.csv, summary.parquet
      one row per input, in input order: file, status, reason, model,
      verdict, duplicate_of, resumed, sha256, n_warnings, warnings,
      elapsed_s, then for each quantity NAME three columns NAME,
      NAME_ci95_low, NAME_ci95_high (SI units; the unit of each is in
      summary.json); in check mode also NAME_verdict for each judged
      quantity and part (within / outside / cannot tell). A quantity the
      data do not determine is left empty (its warning says so); the
      per-capture JSON files keep every detail.
  summary.json
      counts by status, exit status, units, check limits, the spread of
      every quantity across the captures, the problems and the rows.
  problems.csv
      every input that is not a clean result (failing, inconclusive, no step,
      fit failed, unreadable, missing, error, or a duplicate of an earlier
      input) with the reason for each.
"""

from __future__ import annotations

import io
import json
import math
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from .. import exitcodes
from ..atomic import write_bytes_atomic, write_text_atomic
from .runner import BatchRun
from .worker import MEASURED_STATUSES, STATUSES

BASE_COLUMNS = ["file", "status", "reason", "model", "verdict", "duplicate_of", "resumed", "sha256",
                "n_warnings", "warnings", "elapsed_s"]
TEXT_COLUMNS = ("file", "status", "reason", "model", "verdict", "duplicate_of", "sha256", "warnings")
#: Columns that depend on when and how fast the batch ran, not on the captures.
TIMING_COLUMNS = ("elapsed_s", "resumed")
#: Statuses that are a clean outcome (not listed in problems.csv unless duplicated).
CLEAN_STATUSES = ("fitted", "pass")


def summary_frame(run: BatchRun) -> tuple[pd.DataFrame, dict[str, str]]:
    """The summary table (one row per input, input order) and the SI unit of each quantity."""
    rows: list[dict[str, Any]] = []
    units: dict[str, str] = {}
    judged: dict[str, None] = {}
    for rec in run.records:
        warnings = list(rec.get("warnings") or [])
        row = {"file": rec["file"], "status": rec["status"], "reason": rec.get("reason") or "",
               "model": rec.get("model"), "verdict": rec.get("verdict"),
               "duplicate_of": rec.get("duplicate_of"), "resumed": bool(rec.get("resumed")),
               "sha256": rec.get("sha256"), "n_warnings": len(warnings), "warnings": "; ".join(warnings),
               "elapsed_s": rec.get("elapsed_s")}
        for name, q in (rec.get("quantities") or {}).items():
            units.setdefault(name, q.get("unit") or "")
            determined = q.get("determined", True)
            ci = q.get("ci95") or [None, None]
            row[name] = q.get("value") if determined else None
            row[f"{name}_ci95_low"] = ci[0] if determined else None
            row[f"{name}_ci95_high"] = ci[1] if determined else None
        for name, verdict in (rec.get("verdicts") or {}).items():
            judged.setdefault(name, None)
            row[f"{name}_verdict"] = verdict
        rows.append(row)
    quantity_columns = [c for n in units for c in (n, f"{n}_ci95_low", f"{n}_ci95_high")]
    verdict_columns = [f"{n}_verdict" for n in judged]
    frame = pd.DataFrame(rows, columns=BASE_COLUMNS + quantity_columns + verdict_columns)
    for column in quantity_columns + ["elapsed_s"]:
        frame[column] = pd.to_numeric(frame[column], errors="coerce").astype("float64")
    frame["n_warnings"] = frame["n_warnings"].astype("int64")
    frame["resumed"] = frame["resumed"].astype(bool)
    for column in list(TEXT_COLUMNS) + verdict_columns:
        frame[column] = frame[column].astype("string")
    return frame, units


def batch_limits(run: BatchRun) -> dict[str, tuple[float | None, float | None]]:
    """Check mode: the limits each quantity and part was judged against (SI units),
    from the first capture that has them (one design for the whole batch); {} in fit mode."""
    for rec in run.records:
        if rec.get("limits"):
            return {name: (lo, hi) for name, (lo, hi) in rec["limits"].items()}
    return {}


def status_counts(run: BatchRun) -> dict[str, int]:
    """Number of inputs with each status (statuses that occur only)."""
    return {s: run.count(s) for s in STATUSES if run.count(s)}


def batch_exit_status(run: BatchRun) -> int:
    """The batch's exit status (fitkit.exitcodes), by the first rule that applies:

    1 (FAIL)             some board failed its design check;
    70 (INTERNAL)        some capture hit a bug in fitkit or its worker died;
    4 (UNUSABLE_INPUT)   some input is missing, unreadable or holds no usable step;
    5 (ANALYSIS_FAILED)  some fit did not converge or determines nothing;
    6 (NOT_DESCRIBED)    some capture's best fit does not describe it;
    3 (INCONCLUSIVE)     some board's check was inconclusive;
    0 (OK)               every capture was fitted (fit mode) or passed (check mode).

    Duplicates take the status of the capture they repeat and do not change it.
    """
    counts = status_counts(run)
    if counts.get("fail"):
        return exitcodes.FAIL
    if counts.get("error"):
        return exitcodes.INTERNAL
    if counts.get("unreadable") or counts.get("missing") or counts.get("no-step"):
        return exitcodes.UNUSABLE_INPUT
    if counts.get("fit-failed"):
        return exitcodes.ANALYSIS_FAILED
    if counts.get("not-described"):
        return exitcodes.NOT_DESCRIBED
    if counts.get("inconclusive"):
        return exitcodes.INCONCLUSIVE
    return exitcodes.OK


def duplicate_reason(file: str, duplicate_of: str, reason: str = "") -> str:
    """Plain words for a duplicate input, followed by the reason of the capture it repeats."""
    same = Path(file).resolve() == Path(duplicate_of).resolve()
    text = "the same file was given again" if same else f"same content as {duplicate_of}"
    return text + (f"; {reason}" if reason else "")


def problems_frame(frame: pd.DataFrame) -> pd.DataFrame:
    """The rows that need a look (file, status, reason, duplicate_of): any status
    other than fitted/pass, and duplicates of an earlier input."""
    duplicate = frame["duplicate_of"].notna()
    bad = ~frame["status"].isin(CLEAN_STATUSES) | duplicate
    problems = frame.loc[bad, ["file", "status", "reason", "duplicate_of"]].copy()
    for i in problems.index[duplicate[bad]]:
        problems.loc[i, "reason"] = duplicate_reason(problems.loc[i, "file"], problems.loc[i, "duplicate_of"],
                                                     problems.loc[i, "reason"])
    return problems


def quantity_spread(frame: pd.DataFrame, units: dict[str, str]) -> dict[str, dict[str, Any]]:
    """For each quantity, its spread across the measured captures (duplicates left out):
    n, mean, std (sample), min, median, max and the median 95 % interval width, in SI units."""
    measured = frame[frame["status"].isin(MEASURED_STATUSES) & frame["duplicate_of"].isna()]
    spread: dict[str, dict[str, Any]] = {}
    for name, unit in units.items():
        values = measured[name].to_numpy(dtype=float)
        ok = np.isfinite(values)
        widths = (measured[f"{name}_ci95_high"] - measured[f"{name}_ci95_low"]).to_numpy(dtype=float)
        widths = widths[np.isfinite(widths)]
        v = values[ok]
        spread[name] = {"unit": unit, "n": int(v.size),
                        "mean": _num(v.mean()) if v.size else None,
                        "std": _num(v.std(ddof=1)) if v.size > 1 else None,
                        "min": _num(v.min()) if v.size else None,
                        "median": _num(np.median(v)) if v.size else None,
                        "max": _num(v.max()) if v.size else None,
                        "median_ci95_width": _num(np.median(widths)) if widths.size else None}
    return spread


def _num(x: float) -> float | None:
    x = float(x)
    return x if math.isfinite(x) else None


def write_summary(run: BatchRun, out_dir: str | Path) -> dict[str, Path]:
    """Write summary.csv, summary.parquet, summary.json and problems.csv; return their paths
    (keys "csv", "parquet", "json", "problems")."""
    out = Path(out_dir)
    frame, units = summary_frame(run)
    paths = {"csv": out / "summary.csv", "parquet": out / "summary.parquet",
             "json": out / "summary.json", "problems": out / "problems.csv"}
    write_text_atomic(paths["csv"], frame.to_csv(index=False))
    buffer = io.BytesIO()
    frame.to_parquet(buffer, index=False)
    write_bytes_atomic(paths["parquet"], buffer.getvalue())
    problems = problems_frame(frame)
    write_text_atomic(paths["problems"], problems.to_csv(index=False))
    doc = {"n_inputs": len(run.records), "counts": status_counts(run), "computed": run.computed,
           "resumed": run.resumed, "duplicates": run.duplicates, "exit_status": batch_exit_status(run),
           "settings": run.settings.to_dict(), "units": units, "limits": batch_limits(run),
           "spread": quantity_spread(frame, units),
           "problems": json.loads(problems.to_json(orient="records")),
           "rows": json.loads(frame.to_json(orient="records"))}
    write_text_atomic(paths["json"], json.dumps(doc, indent=1, default=str))
    return paths
