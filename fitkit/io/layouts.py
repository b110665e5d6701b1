"""What the columns of a text capture mean: names, units, the time axis.

Given the shape decided by :mod:`fitkit.io.sniff`, this module decides which
column is time (or that there is none, or that it holds a sample index or
wall-clock stamps), the name and unit of every channel, where the sample
interval and first-sample time come from, and whether raw ADC counts must be
converted to volts. The result is a ReadPlan: everything the bulk reader needs,
with each decision written down in plain words.
"""

from __future__ import annotations

import re
from dataclasses import dataclass, field

from ..errors import CaptureError, OptionError
from ..units import unit_scale
from . import metadata as md
from .sniff import TextSample, TextShape, is_comment
from .unit_cells import COUNT_WORDS, INDEX_WORDS, clean_unit, looks_like_unit

TIME_NAMES = {"time", "t", "zeit", "temps", "tiempo", "seconds", "sec", "timestamp", "time stamp",
              "elapsed time", "relative time", "x axis", "horizontal"}
_NAME_UNIT = re.compile(r"^(.*?)\s*[\(\[]\s*([^\)\]]*?)\s*[\)\]]\s*$")
_NAME_SLASH = re.compile(r"^(.*?)\s*/\s*([A-Za-zµμΩ]+)$")
_NAME_TIME_SUFFIX = re.compile(r"^(time|t)_(s|ms|us|µs|ns)$", re.I)
#: Seconds per unit tried when a time column's steps contradict the header's sample interval.
_TIME_FACTORS = {"s": 1.0, "ms": 1e-3, "us": 1e-6, "ns": 1e-9}
#: A time column with no unit stepping by at least this much could as well be in
#: milliseconds (a logger sampling at 1 us or slower): the seconds reading is then a
#: warning, not a quiet decision (finer steps read as ms would be a logger faster than 1 MS/s).
PLAUSIBLY_MS_STEP = 1e-3


def split_name_unit(name: str) -> tuple[str, str]:
    """('Time', 's') from 'Time (s)', 'Time [s]' or 'Time/s'; the unit is '' when none is written."""
    m = _NAME_UNIT.match(name)
    if m and m.group(1):
        return m.group(1).strip(), clean_unit(m.group(2))
    m = _NAME_TIME_SUFFIX.match(name.strip())
    if m:
        return m.group(1), m.group(2)
    m = _NAME_SLASH.match(name)
    if m and m.group(1) and looks_like_unit(m.group(2)):
        return m.group(1).strip(), clean_unit(m.group(2))
    return name.strip(), ""


def time_factor(unit: str) -> float | None:
    """Seconds per unit of a time column ('ms' -> 1e-3), None if not a time unit."""
    u = clean_unit(unit)
    if not u:
        return None
    factor, si = unit_scale(u)
    return factor if si == "s" else None


@dataclass(frozen=True)
class ChannelPlan:
    """How to turn one file column into a channel."""

    column: int
    name: str
    source_unit: str
    factor: float
    unit: str
    counts: tuple[float, float, float] | None = None  # (volts per count, count offset, volt offset)


@dataclass(frozen=True)
class ReadPlan:
    """Everything the bulk reader needs, and why.

    time_source: "column" (time column, scaled by time_factor), "index"
    (sample-index column times the interval), "stamps" (date and time text in
    ``stamp_column``, read as seconds from the first) or "interval" (origin + k * interval).
    twin_time_columns: further columns whose name says time (one per channel in
    some exports); the reader checks that they repeat the time column.
    time_given: the time column was named by the user (its steps are then trusted
    over the header's sample interval).
    time_quantum: ("sig", n) when time stamps are printed with n significant
    digits, ("fixed", n) with n decimals, or None.
    """

    time_column: int | None
    index_column: int | None
    channels: tuple[ChannelPlan, ...]
    time_source: str
    time_factor: float
    interval: float | None
    origin: float
    origin_given: bool
    metadata: dict[str, str]
    layout: str
    decisions: tuple[str, ...]
    expected_length: int | None
    time_quantum: tuple[str, int] | None
    time_name: str = "time"
    extra_warnings: tuple[str, ...] = field(default=())
    twin_time_columns: tuple[int, ...] = field(default=())
    time_given: bool = False
    stamp_column: int | None = None

    @property
    def columns(self) -> list[int]:
        cols = [c.column for c in self.channels] + list(self.twin_time_columns)
        for extra in (self.time_column, self.index_column):
            if extra is not None:
                cols.append(extra)
        return sorted(set(cols))


def plan_read(sample: TextSample, shape: TextShape, *, sample_interval: float | None = None,
              time_origin: float | None = None, time_column: str | int | None = None,
              time_unit: str | None = None, value_unit: str | None = None,
              vertical_scale: float | None = None, vertical_offset: float | None = None) -> ReadPlan:
    """Decide the meaning of each column of a sniffed text capture (see module doc)."""
    path = sample.path
    decisions = list(shape.decisions)
    warnings: list[str] = []

    comment_lines = [ln for ln in shape.metadata_lines if is_comment(ln.text)]
    block_lines = [ln for ln in shape.metadata_lines if not is_comment(ln.text)]
    meta = md.parse_metadata_lines([ln.text for ln in shape.metadata_lines], shape.delimiter)
    side = md.side_metadata(shape.side_cells)
    meta.update({k: v for k, v in side.items() if k not in meta})
    names, units = _names_and_units(shape, meta)

    if sample_interval is not None:
        if not sample_interval > 0:
            raise OptionError(f"--sample-interval must be positive, got {sample_interval!r}")
        interval, interval_src = float(sample_interval), "given"
    else:
        found = md.sample_interval(meta)
        interval, interval_src = (found[0], f"from {found[1]!r}") if found else (None, None)

    bad_interval = md.nonpositive_interval(meta) if interval is None else None
    time_col, index_col, time_source = _choose_time_axis(shape, names, units, meta, interval,
                                                         time_column, decisions, path, bad_interval)
    if bad_interval:
        warnings.append(f"the header's sample interval {bad_interval[0]} = {bad_interval[1]} is not positive: "
                        "ignored, the time column is used")
    tfactor, numbered = 1.0, False
    if time_col is not None:
        tfactor, numbered = _time_column_factor(shape, time_col, time_unit or units.get(time_col)
                                                or meta.get("Horizontal Units", ""), bool(time_unit),
                                                interval if interval_src != "given" else None,
                                                decisions, warnings, path, given_interval=sample_interval)
    if interval is not None and time_source != "column":
        decisions.append(f"sample interval: {interval:.6g} s ({interval_src})")
    if sample_interval is not None and time_source == "column" and not numbered:
        warnings.append("--sample-interval ignored: the file has a time column "
                        "(add --time-column none to build the axis from the interval instead)")
        found = md.sample_interval(meta)
        interval = found[0] if found else None
    twins = _twin_time_columns(shape, time_col, index_col, names) if time_column is None else []
    stamp_col = None
    if time_source == "stamps":
        stamp_col = shape.datetime_columns[0]

    channel_cols = [j for j in shape.numeric_columns if j not in (time_col, index_col) and j not in twins]
    if not channel_cols:
        raise CaptureError("no data channels besides the time column", path=path,
                           hint="check --time-column, or that the file holds a signal column")
    if vertical_offset is not None and vertical_scale is None:
        warnings.append("--vertical-offset ignored without --vertical-scale")
    plans = _channel_plans(shape, channel_cols, names, units, meta, value_unit, vertical_scale,
                           vertical_offset, decisions)

    origin, origin_given = 0.0, False
    if time_origin is not None:
        origin, origin_given = float(time_origin), True
        decisions.append(f"time origin: first sample at {origin:.6g} s (given)")
    elif time_source != "column":
        found = md.time_origin(meta, interval, md.record_length(meta) or 0)
        if found:
            origin = found[0]
            decisions.append(f"time origin: {found[1]}")

    converted = any(p.counts is not None for p in plans)
    layout = _layout_words(shape, comment_lines, block_lines, bool(side), time_source,
                           bool(shape.datetime_columns), converted)
    quantum = _time_quantum(shape, time_col) if time_col is not None else None
    time_name = names.get(time_col, "time") if time_col is not None else "time"
    return ReadPlan(time_col, index_col, tuple(plans), time_source, tfactor, interval, origin,
                    origin_given, meta, layout, tuple(decisions), md.record_length(meta), quantum,
                    time_name, tuple(warnings), tuple(twins), time_column is not None, stamp_col)


def _time_column_factor(shape: TextShape, j: int, t_unit: str, given: bool, header_interval: float | None,
                        decisions: list[str], warnings: list[str], path: str,
                        given_interval: float | None = None) -> tuple[float, bool]:
    """(seconds per unit of the time column, whether it counts samples read with the given
    interval), with the decision written down.

    A unit written in the file (or given) is used. With none, whole-number
    stamps are a logger's millisecond counter unless the header's sample
    interval says otherwise; other stamps are taken as seconds, again unless
    the header's interval matches them read in another unit. Either way the
    guess is a warning, so every command shows it. A column that counts 0, 1,
    2, ... (or from 1) is sample numbers as much as a 1 ms counter: it is read
    with the given sample interval (``given_interval``, s), and refused without
    one (a scope's sample index read as milliseconds put every time constant
    off by the ratio of the two).
    """
    f = time_factor(t_unit) if t_unit else None
    if t_unit and f is None:
        raise CaptureError(f"time column unit {t_unit!r} is not a time unit", path=path,
                           hint="give the unit with --time-unit (s, ms, us, ns)")
    if f is not None:
        decisions.append(f"time unit: {clean_unit(t_unit)}" + (" (given)" if given else ""))
        return f, False
    v = _numbers(shape, j, shape.decimal)
    step = (v[-1] - v[0]) / (len(v) - 1) if len(v) >= 2 and v[-1] > v[0] else None
    if header_interval and step:
        unit = next((u for u, k in _TIME_FACTORS.items()
                     if abs(step * k - header_interval) <= 0.01 * header_interval), None)
        if unit:
            decisions.append(f"time unit: not written in the file; {unit}, which matches the "
                             f"header's sample interval of {header_interval:.6g} s")
            return _TIME_FACTORS[unit], False
    if _integers(shape, j) and _counts_samples(v):
        if given_interval:
            decisions.append(f"time: the column counts samples (0, 1, 2, ...): sample number x the given "
                             f"sample interval of {given_interval:.6g} s")
            return float(given_interval), True
        raise CaptureError("the time column counts 0, 1, 2, ... with no unit: sample numbers, or a 1 ms counter?",
                           path=path, hint="give the scope's sample interval with --sample-interval (for example "
                                           "--sample-interval 1u), or --time-unit ms if they are milliseconds")
    if _integers(shape, j):
        warnings.append("the time column holds whole numbers with no unit: taken as milliseconds "
                        "(a logger's millisecond counter), so every time and frequency is off by 1,000 if they "
                        "are not; give --time-unit us if they are microseconds, --time-unit s if seconds")
        return 1e-3, False
    if step is not None and step >= PLAUSIBLY_MS_STEP:
        warnings.append(f"the time column has no unit written and steps by {step:.6g}: taken as seconds "
                        "(give --time-unit ms if they are milliseconds)")
    else:
        decisions.append("time unit: not written in the file; taken as seconds")
    return 1.0, False


def _twin_time_columns(shape: TextShape, time_col: int | None, index_col: int | None,
                       names: dict[int, str]) -> list[int]:
    """Further columns whose name says time, beside a time column found by its name
    (exports that give each channel its own time column)."""
    if time_col is None or not _says_time(names.get(time_col, "")):
        return []
    return [j for j in shape.numeric_columns
            if j not in (time_col, index_col) and _says_time(names.get(j, ""))]


def _says_time(name: str) -> bool:
    base = name.lower()
    return base in TIME_NAMES or base.startswith("time")


def _names_and_units(shape: TextShape, meta: dict[str, str]) -> tuple[dict[int, str], dict[int, str]]:
    """Column names and units (as written) from the header rows; settings
    printed in extra columns of a names row and units row go into ``meta``."""
    cols = list(shape.numeric_columns)
    names: dict[int, str] = {}
    units: dict[int, str] = {}
    if not shape.header_rows:
        return names, units
    row = shape.header_rows[0]
    for j in cols + list(shape.datetime_columns):
        if j < len(row) and row[j]:
            names[j], units[j] = split_name_unit(row[j])
    if len(shape.header_rows) == 2:
        urow = shape.header_rows[1]
        for j in cols:
            if j < len(urow) and urow[j]:
                units[j] = clean_unit(urow[j])
        for j, key in enumerate(row):  # e.g. start time and increment beside the channels
            if j not in cols and key and j < len(urow) and urow[j]:
                meta.setdefault(key, urow[j])
    return names, units


def _choose_time_axis(shape: TextShape, names: dict[int, str], units: dict[int, str],
                      meta: dict[str, str], interval: float | None, time_column: str | int | None,
                      decisions: list[str], path: str, bad_interval: tuple[str, str] | None = None
                      ) -> tuple[int | None, int | None, str]:
    """(time column, sample-index column, time source) with the reason in ``decisions``.

    Order: the --time-column option; a column named as time; a sample-index
    column; wall-clock stamps; a first column that increases steadily; else
    the sample interval. Raises CaptureError when the axis needs an interval
    and there is none.
    """
    cols = list(shape.numeric_columns)
    time_col = index_col = None
    time_source = "column"
    if time_column is not None:
        key = str(time_column).strip()
        if key.lower() in ("none", "0", ""):
            time_source = "interval"
            decisions.append("time: no time column (given)")
        else:
            time_col = _column_by_key(key, cols, names, path)
            decisions.append(f"time: column {_col_label(time_col, names)} (given)")
    else:
        index_col = next((j for j in cols if (units.get(j, "").lower() in INDEX_WORDS
                                              or names.get(j, "").lower() in INDEX_WORDS)
                          and _counts_up(shape, j)), None)
        for j in cols:
            base = names.get(j, "").lower()
            if j != index_col and (_says_time(base) or (base == "x" and time_factor(units.get(j, "")))):
                time_col = j
                break
        if time_col is not None:
            decisions.append(f"time: column {_col_label(time_col, names)} (its name says time)")
        elif index_col is not None:
            time_source = "index"
            decisions.append(f"time: sample-index column {_col_label(index_col, names)} "
                             "times the sample interval")
        elif shape.datetime_columns:
            stamp = shape.data_cells[0][shape.datetime_columns[0]] if shape.data_cells else ""
            meta.setdefault("first time stamp", stamp)
            if interval is not None:
                time_source = "interval"
                decisions.append("time: wall-clock stamps found; time axis built from the sample interval "
                                 f"(first stamp {stamp!r} kept in the metadata)")
            else:
                time_source = "stamps"
                decisions.append(f"time: wall-clock stamps read as time from the first sample ({stamp!r})")
        elif len(cols) >= 2 and _increasing(shape, cols[0], shape.decimal):
            time_col = cols[0]
            decisions.append(f"time: first column {_col_label(time_col, names)} taken as time "
                             "(it increases steadily; override with --time-column)")
        else:
            time_source = "interval"
            if interval is not None:
                decisions.append("time: no time column; axis built from the sample interval")
    if time_source in ("interval", "index") and interval is None and bad_interval:
        raise CaptureError(f"no time column, and the header's sample interval {bad_interval[0]} = "
                           f"{bad_interval[1]} is not positive", path=path,
                           hint="give the true interval with --sample-interval (for example 1u)")
    if time_source in ("interval", "index") and interval is None:
        why = "wall-clock stamps are not a usable time axis" if shape.datetime_columns else "no time column"
        raise CaptureError(f"{why} and no sample interval in the file", path=path,
                           hint="give it with --sample-interval (for example --sample-interval 1u)")
    return time_col, index_col, time_source


def _meta_text(meta: dict[str, str], keys: tuple[str, ...]) -> str | None:
    """The value of the first metadata entry named by one of ``keys`` (normalised), or None."""
    found = md.find(meta, keys)
    return found[1].strip() or None if found else None


def _channel_plans(shape: TextShape, channel_cols: list[int], names: dict[int, str],
                   units: dict[int, str], meta: dict[str, str], value_unit: str | None,
                   vertical_scale: float | None, vertical_offset: float | None,
                   decisions: list[str]) -> list[ChannelPlan]:
    """Name, unit and scaling of each channel column (raw counts converted to volts
    with --vertical-scale, or with the file's metadata when the column holds integers
    and no other unit)."""
    single = len(channel_cols) == 1
    source_name = _meta_text(meta, md.CHANNEL_NAME_KEYS) if single else None
    vertical_units = _meta_text(meta, md.VALUE_UNIT_KEYS) if single else None
    plans: list[ChannelPlan] = []
    for k, j in enumerate(channel_cols, start=1):
        name = names.get(j) or source_name or f"ch{k}"
        src_unit = clean_unit(value_unit or units.get(j) or vertical_units or "")
        counts = None
        raw_counts = src_unit.lower() in COUNT_WORDS or (not src_unit and _integers(shape, j))
        if vertical_scale is not None:
            counts = (float(vertical_scale), 0.0, float(vertical_offset or 0.0))
            decisions.append(f"channel {name!r}: values x {vertical_scale:g} V + "
                             f"{vertical_offset or 0:g} V (given)")
        elif raw_counts:
            conv = md.counts_conversion(meta, name)
            if conv:
                counts = conv[:3]
                decisions.append(f"channel {name!r}: {conv[3]}")
        if counts is not None:
            plans.append(ChannelPlan(j, name, src_unit or "counts", 1.0, "V", counts))
            continue
        if raw_counts:
            plans.append(ChannelPlan(j, name, src_unit or "counts", 1.0, "counts"))
            decisions.append(f"channel {name!r}: whole numbers with no unit, kept as raw ADC counts "
                             "(give --vertical-scale, volts per count, to read volts)")
            continue
        factor, si = unit_scale(src_unit) if src_unit else (1.0, "")
        plans.append(ChannelPlan(j, name, src_unit, factor, si))
        if si:
            decisions.append(f"channel {name!r}: unit {src_unit}" + (f" scaled to {si}" if factor != 1.0 else ""))
    no_unit = [p.name for p in plans if not p.unit]
    if no_unit:
        decisions.append(f"no unit written for {', '.join(no_unit)}: values kept as they are "
                         "(give --value-unit V if they are volts)")
    return plans


def _col_label(j: int, names: dict[int, str]) -> str:
    return repr(names[j]) if j in names else f"{j + 1}"


def _column_by_key(key: str, cols: list[int], names: dict[int, str], path: str) -> int:
    if key.isdigit():
        k = int(key)
        if 1 <= k <= len(cols):
            return cols[k - 1]
    for j in cols:
        if names.get(j, "").lower() == key.lower():
            return j
    listed = ", ".join(names.get(j, f"column {i}") for i, j in enumerate(cols, start=1))
    raise CaptureError(f"no column {key!r} for the time axis; numeric columns: {listed}", path=path,
                       hint="give --time-column a name or a 1-based position among these, or 'none'")


def _numbers(shape: TextShape, j: int, decimal: str) -> list[float]:
    out = []
    for cells in shape.data_cells:
        if j < len(cells):
            try:
                out.append(float(cells[j].replace(",", ".") if decimal == "," else cells[j]))
            except ValueError:
                pass
    return out


def _increasing(shape: TextShape, j: int, decimal: str) -> bool:
    """Column j increases strictly in the sample (a time axis; whether it agrees with
    the header's sample interval is checked on the whole column by the reader)."""
    v = _numbers(shape, j, decimal)
    return len(v) >= 3 and all(b > a for a, b in zip(v, v[1:]))


def _counts_up(shape: TextShape, j: int) -> bool:
    """Column j holds whole numbers counting up by one (a sample index), in the sample."""
    v = _numbers(shape, j, shape.decimal)
    return len(v) >= 2 and all(float(x).is_integer() for x in v) and all(b - a == 1 for a, b in zip(v, v[1:]))


def _integers(shape: TextShape, j: int) -> bool:
    cells = [c[j] for c in shape.data_cells if j < len(c)]
    return bool(cells) and all(re.fullmatch(r"[+-]?\d+", c) for c in cells)


def _counts_samples(values: list[float]) -> bool:
    """True for a column that counts 0, 1, 2, ... or 1, 2, 3, ... (at least 8 rows)."""
    return (len(values) >= 8 and values[0] in (0.0, 1.0)
            and all(b - a == 1.0 for a, b in zip(values, values[1:])))


def _time_quantum(shape: TextShape, j: int) -> tuple[str, int] | None:
    """How the time stamps are printed: ('sig', digits) or ('fixed', decimals)."""
    sig, fixed = [], []
    for cells in shape.data_cells:
        if j >= len(cells):
            continue
        c = cells[j].lstrip("+-")
        m = re.fullmatch(r"(\d*)[.,]?(\d*)[eE][+-]?\d+", c)
        if not re.search(r"[1-9]", m.group(1) + m.group(2) if m else c):
            continue  # a zero says nothing about the precision
        if m:
            sig.append(len((m.group(1) + m.group(2)).lstrip("0")))
            continue
        m = re.fullmatch(r"\d*[.,](\d+)", c)
        fixed.append(len(m.group(1)) if m else 0)
    if sig and not fixed:
        return ("sig", min(sig))
    if fixed and not sig:
        return ("fixed", min(fixed))
    return None


def _layout_words(shape: TextShape, comments, block, side: bool, time_source: str,
                  stamps: bool, counts: bool) -> str:
    parts = []
    if comments:
        parts.append("commented metadata")
    if block:
        parts.append("metadata block")
    if side:
        parts.append("metadata columns beside the data")
    parts.append({0: "no header row", 1: "header row", 2: "names row and units row"}[len(shape.header_rows)])
    if stamps:
        parts.append("wall-clock time column, time axis from the sample interval")
    elif time_source == "column":
        parts.append("time column")
    elif time_source == "index":
        parts.append("sample-index column, time axis from start and increment")
    else:
        parts.append("no time column, time axis from the sample interval")
    if counts:
        parts.append("raw ADC counts converted to volts")
    return ", ".join(parts)


__all__ = ["ReadPlan", "ChannelPlan", "plan_read", "split_name_unit", "looks_like_unit", "time_factor"]
