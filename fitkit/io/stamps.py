"""Wall-clock time stamps (date and time text) turned into seconds from the first sample.

Data loggers write a column such as ``2024-03-01 12:00:00.25`` or
``01/03/2024 12:00:00`` or a bare ``12:00:00.5``. The time axis of a capture is
the time elapsed since the first of them, in seconds; the date part only
matters when a record runs past midnight. A date written ``dd/mm/yyyy`` or
``mm/dd/yyyy`` is read in the order that makes the stamps increase (and, when
both do, day first; the elapsed time is the same unless the record spans
days). A month or a day is never read as seconds.
"""

from __future__ import annotations

import datetime as _dt
import re

import numpy as np

from ..errors import CaptureError
from .sniff import is_comment, split_cells

_STAMP = re.compile(
    r"^(?:(?P<a>\d{1,4})[-/.](?P<b>\d{1,2})[-/.](?P<c>\d{1,4})[ T]*)?"
    r"(?:(?P<h>\d{1,2}):(?P<m>\d{2})(?::(?P<s>\d{2}(?:[.,]\d+)?))?)?"
    r"\s*(?P<ampm>AM|PM)?\s*(?:Z|[+-]\d{2}:?\d{2})?$", re.I)


def _clock_seconds(m: re.Match) -> float:
    if m.group("h") is None:
        return 0.0
    h = int(m.group("h"))
    if m.group("ampm"):
        h = h % 12 + (12 if m.group("ampm").upper() == "PM" else 0)
    return h * 3600.0 + int(m.group("m")) * 60.0 + float((m.group("s") or "0").replace(",", "."))


def _day_number(a: str, b: str, c: str, order: str) -> int:
    """Days since year 1 for date fields a, b, c in ``order`` ('ymd', 'dmy' or 'mdy')."""
    if order == "ymd":
        y, mo, d = int(a), int(b), int(c)
    elif order == "dmy":
        d, mo, y = int(a), int(b), int(c)
    else:
        mo, d, y = int(a), int(b), int(c)
    if y < 100:
        y += 2000
    return _dt.date(y, mo, d).toordinal()


def stamps_to_seconds(cells: list[str], *, path: str, first_line: int | None = None) -> tuple[np.ndarray, str]:
    """Seconds from the first stamp for each cell, and a plain-words note on how they were read.

    Raises CaptureError naming the row when a cell is not a time stamp.
    """
    matches = []
    for i, cell in enumerate(cells):
        m = _STAMP.match(cell.strip())
        if m is None or (m.group("a") is None and m.group("h") is None):
            where = f"line {first_line + i}" if first_line else f"data row {i + 1}"
            raise CaptureError(f"time stamp {cell!r} at {where} is not a date and time", path=path,
                               hint="fix that row, or give --time-column none with --sample-interval")
        matches.append(m)
    clock = np.array([_clock_seconds(m) for m in matches])
    dated = matches[0].group("a") is not None
    note = "wall-clock time stamps read as time from the first sample"
    if not dated:
        # a bare clock: a step back by most of a day is a pass through midnight
        days = np.concatenate(([0], np.cumsum(np.diff(clock) < -43_200.0)))
        return clock - clock[0] + 86_400.0 * days, note
    orders = ["ymd"] if len(matches[0].group("a")) == 4 else ["dmy", "mdy"]
    for order in orders:
        try:
            days = np.array([_day_number(m.group("a"), m.group("b"), m.group("c"), order) for m in matches],
                            dtype=float)
        except (ValueError, TypeError):
            continue
        t = (days - days[0]) * 86_400.0 + clock - clock[0]
        if len(orders) == 1 or np.all(np.diff(t) >= 0):
            return t, note + ("" if len(orders) == 1 else f" (dates read {order[0]}/{order[1]}/{order[2]})")
    raise CaptureError("the dates in the time column cannot be read in one order (year-month-day, "
                       "day/month/year or month/day/year)", path=path,
                       hint="give --time-column none with --sample-interval")


def read_stamp_column(path: str, *, encoding: str, offset: int, column: int, delimiter: str) -> list[str]:
    """The cells of one column from byte ``offset`` to the end, skipping blank and comment lines
    (as the numeric parse does), for columns of date and time text."""
    out = []
    with open(path, "rb") as fh:
        fh.seek(offset)
        for raw in fh:
            text = raw.decode(encoding, errors="replace").rstrip("\r\n")
            if not text.strip() or is_comment(text):
                continue
            cells = split_cells(text, delimiter)
            out.append(cells[column] if column < len(cells) else "")
    return out
