"""Read a delimited text capture: sniff the first lines, then parse the numeric bulk.

The layout is decided from the first few KB (:mod:`fitkit.io.sniff`,
:mod:`fitkit.io.layouts`); the numeric block is then parsed from the byte
where the data starts (:mod:`fitkit.io.bulk`: numpy's reader for a plain
block, pandas' C parser otherwise), so a million-row file reads about as fast
as ``pandas.read_csv`` alone. The checks of :mod:`fitkit.io.checks`
run on the result. The input file is only ever opened for reading.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np

from ..capture import Capture, Channel, Provenance
from ..errors import CaptureError
from . import checks
from .bulk import parse_numeric_block
from .layouts import ReadPlan, plan_read
from .sniff import MAX_SAMPLE_BYTES, TextSample, TextShape, decide_shape, is_comment, read_sample
from .stamps import read_stamp_column, stamps_to_seconds


def read_delimited(path: str | Path, *, delimiter: str | None = None, decimal: str | None = None,
                   skip_rows: int | None = None, header_rows: int | None = None,
                   encoding: str | None = None, **plan_options) -> Capture:
    """Read a delimited text capture into a Capture (time in s, values in SI units).

    ``plan_options`` are passed to :func:`fitkit.io.layouts.plan_read`
    (sample_interval, time_origin, time_column, time_unit, value_unit,
    vertical_scale, vertical_offset). Raises CaptureError on unusable input.
    """
    path = str(path)
    sample = read_sample(path, encoding=encoding, skip_lines=skip_rows or 0)
    try:
        shape = decide_shape(sample, delimiter=delimiter, decimal=decimal,
                             skip_rows=skip_rows, header_rows=header_rows)
    except CaptureError:
        if sample.whole_file:
            raise
        # a header longer than the usual window (hundreds of comment lines): look further
        sample = read_sample(path, encoding=encoding, skip_lines=skip_rows or 0, window=MAX_SAMPLE_BYTES)
        shape = decide_shape(sample, delimiter=delimiter, decimal=decimal,
                             skip_rows=skip_rows, header_rows=header_rows)
    plan = plan_read(sample, shape, **plan_options)
    # the comment option halves pandas' speed (and numpy's reader does not take it),
    # so it is used only when needed:
    # when the sample shows comment lines among the data, or when a first
    # pass without it meets rows it cannot read.
    comments_seen = any(is_comment(ln.text) for ln in sample.lines if ln.number > shape.data_line.number)
    frame = None
    if not comments_seen:
        try:
            frame = _parse_block(sample, shape, plan, comment=None)
        except CaptureError:
            frame = None
        if frame is not None and not all(np.isfinite(a).all() for a in frame.values()):
            frame = None
    if frame is None:
        frame = _parse_block(sample, shape, plan, comment="#")
    return _build_capture(sample, shape, plan, frame)


# -- bulk parse -------------------------------------------------------------------

def _parse_block(sample: TextSample, shape: TextShape, plan: ReadPlan, comment: str | None) -> dict[int, np.ndarray]:
    return parse_numeric_block(sample.path, encoding=sample.encoding, offset=shape.data_line.offset,
                               first_line=shape.data_line.number, n_fields=shape.n_fields,
                               columns=plan.columns, delimiter=shape.delimiter, decimal=shape.decimal,
                               comment=comment)


def _row_to_line(sample: TextSample, shape: TextShape, row: int) -> int | None:
    """1-based file line of data row ``row`` (0-based); slow, used only for messages."""
    count = -1
    try:
        with open(sample.path, "rb") as fh:
            fh.seek(shape.data_line.offset if not sample.encoding.startswith("utf-16") else 0)
            if sample.encoding.startswith("utf-16"):
                lines = fh.read().decode(sample.encoding, errors="replace").lstrip("\ufeff")
                lines = lines[shape.data_line.offset:].split("\n")
            else:
                lines = fh
            for i, raw in enumerate(lines):
                text = raw.decode(sample.encoding, errors="replace") if isinstance(raw, bytes) else raw
                if not text.strip() or is_comment(text):
                    continue
                count += 1
                if count == row:
                    return shape.data_line.number + i
    except OSError:
        return None
    return None


# -- from table to capture -----------------------------------------------------------

def _build_capture(sample: TextSample, shape: TextShape, plan: ReadPlan,
                   arrays: dict[int, np.ndarray]) -> Capture:
    path = sample.path
    warnings = list(plan.extra_warnings)
    decisions = list(plan.decisions)
    n = next(iter(arrays.values())).size
    if n == 0:
        raise CaptureError("no data rows", path=path, hint="export the capture again")

    # Rows that are empty in every column at the very end (spreadsheet padding) go quietly.
    finite = np.ones(n, dtype=bool)
    for a in arrays.values():
        finite &= np.isfinite(a)
    if not finite.all():
        empty_all = np.ones(n, dtype=bool)
        for a in arrays.values():
            empty_all &= np.isnan(a)
        tail = n
        while tail > 0 and empty_all[tail - 1]:
            tail -= 1
        if tail < n:
            decisions.append(f"{n - tail} empty row(s) at the end ignored")
            arrays = {j: a[:tail] for j, a in arrays.items()}
            finite, n = finite[:tail], tail
        bad = np.flatnonzero(~finite)
        msg = checks.bad_rows_policy(bad, n, path=path, what="unreadable, empty, NaN or infinite cells",
                                     line_of_row=lambda r: _row_to_line(sample, shape, r))
        if msg:
            warnings.append(msg)
            arrays = {j: a[finite] for j, a in arrays.items()}
            n = int(finite.sum())
            kept_rows = np.flatnonzero(finite)
        else:
            kept_rows = None
    else:
        kept_rows = None
    if n == 0:
        raise CaptureError("no readable data rows", path=path)

    _check_twin_time_columns(plan, arrays, path, decisions)
    time = _time_axis(sample, shape, plan, arrays, n, warnings, decisions, kept_rows)
    if plan.time_source == "column" and plan.interval and time.size > 2 and not plan.time_given:
        time = _header_interval_over_column(time, plan.interval, warnings)

    channels = []
    values = {}
    for cp in plan.channels:
        v = arrays[cp.column]
        if cp.counts is not None:
            scale, count_offset, volt_offset = cp.counts
            v = (v - count_offset) * scale + volt_offset
        elif cp.factor != 1.0:
            v = v * cp.factor
        values[cp.name] = v
        channels.append(Channel(cp.name, v, cp.unit, cp.source_unit))
    warnings.extend(checks.value_warnings(values, path=path))
    for ch in channels:
        saturated = checks.full_scale_warning(ch.name, ch.values) if ch.unit == "counts" else None
        if saturated and not any(f"channel {ch.name!r} sits at" in w for w in warnings):
            warnings.append(saturated)
    if plan.expected_length and plan.expected_length != n and kept_rows is None:
        warnings.append(f"the header states {plan.expected_length} samples but the file holds {n}"
                        + (": the file may be truncated" if n < plan.expected_length else ""))
    names = [c.name for c in channels]
    if len(set(names)) != len(names):
        channels = [Channel(f"{c.name} ({i})" if names.count(c.name) > 1 else c.name, c.values, c.unit,
                            c.source_unit) for i, c in enumerate(channels, start=1)]
    prov = Provenance(path=path, data_start_line=shape.data_line.number, layout=plan.layout,
                      decisions=tuple(decisions))
    return Capture(time=time, channels=tuple(channels), metadata=plan.metadata, provenance=prov,
                   warnings=tuple(warnings))


def _time_axis(sample: TextSample, shape: TextShape, plan: ReadPlan, arrays: dict[int, np.ndarray],
               n: int, warnings: list[str], decisions: list[str], kept_rows: np.ndarray | None) -> np.ndarray:
    """The time axis in seconds, checked: strictly increasing, (near) uniform."""
    path = sample.path
    if plan.time_source == "interval":
        k = np.arange(n, dtype=float) if kept_rows is None else kept_rows.astype(float)
        return plan.origin + k * plan.interval
    if plan.time_source == "index":
        idx = arrays[plan.index_column]
        t = plan.origin + (idx - idx[0]) * plan.interval
    elif plan.time_source == "stamps":
        cells = read_stamp_column(path, encoding=sample.encoding, offset=shape.data_line.offset,
                                  column=plan.stamp_column, delimiter=shape.delimiter)
        if kept_rows is not None and len(cells) > n:
            cells = [cells[int(r)] for r in kept_rows if r < len(cells)]
        if len(cells) != n:
            raise CaptureError(f"the time stamp column holds {len(cells)} rows but the data {n}", path=path,
                               hint="give --time-column none with --sample-interval")
        t, note = stamps_to_seconds(cells, path=path, first_line=shape.data_line.number)
        decisions.append(note)
        t = t + plan.origin
    else:
        t = arrays[plan.time_column]
        if plan.time_factor != 1.0:
            t = t * plan.time_factor
        if plan.origin_given:
            t = t - t[0] + plan.origin
    steps = np.diff(t)
    bad = checks.first_nonincreasing(t, steps)
    spread_warning = checks.nonuniform_warning(t, steps) if bad is None else None
    del steps
    if bad is not None or spread_warning:
        grid = None
        # rounding keeps the order of increasing times: a stamp that goes back is out of order
        backwards = bad is not None and bool(np.any(np.diff(t) < 0))
        if plan.time_source == "column" and plan.time_quantum is not None and kept_rows is None and not backwards:
            grid = checks.rounded_uniform_grid(t, _quantum(t, plan))
        if grid is not None:
            kind, digits = plan.time_quantum
            printed = f"{digits} significant digits" if kind == "sig" else f"{digits} decimals"
            first = f" (first repeat at line {_row_to_line(sample, shape, int(bad))})" if bad is not None else ""
            note = (f"time stamps are printed with only {printed}, so they "
                    f"{'repeat' if bad is not None else 'jitter'}{first}; using a uniform axis at "
                    f"{grid[1] - grid[0]:.6g} s fitted to the stamps")
            (warnings if bad is not None else decisions).append(note)
            return grid
        if bad is not None:
            if backwards:
                bad = int(np.argmax(np.diff(t) < 0) + 1)
            row = int(bad) if kept_rows is None else int(kept_rows[bad])
            line = _row_to_line(sample, shape, row) if plan.time_source == "column" else None
            what = "repeats the previous one" if t[bad] == t[bad - 1] else "goes back in time"
            raise CaptureError(f"time stamp {t[bad]:.9g} s {what} (time must increase)", path=path,
                               line=line, hint="remove the out-of-order rows, or use --time-column none "
                               "with --sample-interval")
        warnings.append(spread_warning)
    return t


def _check_twin_time_columns(plan: ReadPlan, arrays: dict[int, np.ndarray], path: str,
                             decisions: list[str]) -> None:
    """Further time columns (one per channel) must repeat the time column; they are then dropped."""
    if not plan.twin_time_columns:
        return
    t = arrays[plan.time_column]
    tol = 1e-6 * max(float(np.max(np.abs(np.diff(t)))) if t.size > 1 else 0.0, 1e-300)
    for j in plan.twin_time_columns:
        if not np.allclose(arrays[j], t, rtol=1e-9, atol=tol, equal_nan=True):
            raise CaptureError(f"the channels have time columns of their own (column {j + 1}) that differ "
                               "from the first: they were sampled at different times", path=path,
                               hint="export the channels on one time base, or read each pair of columns "
                               "separately with --time-column and --channel")
    decisions.append(f"{len(plan.twin_time_columns)} further time column(s) repeat the first; ignored")


def _header_interval_over_column(time: np.ndarray, interval: float, warnings: list[str]) -> np.ndarray:
    """The header's sample interval wins over a time column that steps otherwise (flagged)."""
    step = (float(time[-1]) - float(time[0])) / (time.size - 1)
    if abs(step - interval) <= 0.01 * interval:
        return time
    warnings.append(f"the header states a sample interval of {interval:.6g} s but the time column steps by "
                    f"{step:.6g} s: the header's interval is used (give --time-column to use the column)")
    return float(time[0]) + interval * np.arange(time.size, dtype=float)


def _quantum(t: np.ndarray, plan: ReadPlan) -> np.ndarray | float:
    """One unit in the last printed digit of each time stamp, in seconds.

    A full unit rather than half: scopes print a clock that is itself not an
    exact multiple of the interval (the 40 ns reference capture is off by up
    to 0.8 of the last digit from the ideal grid).
    """
    kind, digits = plan.time_quantum
    if kind == "fixed":
        return 10.0 ** (-digits) * plan.time_factor
    raw = np.abs(t / plan.time_factor)
    with np.errstate(divide="ignore"):
        exponent = np.floor(np.log10(np.where(raw > 0, raw, 1.0)))
    return 10.0 ** (exponent - digits + 1) * plan.time_factor
