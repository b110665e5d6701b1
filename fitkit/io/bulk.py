"""Parse the numeric block of a text capture: numpy for plain blocks, else pandas.

The block starts at a known byte offset (found by sniffing). Three readers,
chosen by speed and memory (figures in BENCHMARKS.md, "Import"):

* a block of up to PLAIN_PARTS parts in which every cell is a plain decimal
  number (the usual oscilloscope export) is read by ``numpy.loadtxt`` while
  pandas is not yet loaded, so a `fitkit fit` of such a file never imports
  pandas (about 0.3 s of start-up); numpy's reader is single-threaded, so
  once pandas is loaded its reader is the faster one;
* otherwise a block up to WHOLE_READ_MAX_BYTES goes to one
  ``pandas.read_csv`` on the path itself (pandas' parallel C reader), trusted
  only when its first row equals the first data line parsed on its own;
* larger blocks, and anything the first two decline, are cut at line
  boundaries into parts of a few MB parsed on threads, each streaming from
  its own file handle; this holds about 2x the arrays (pandas' own reader
  peaks at 3.6x) and names the file line of a bad row.

All give the same float64 values (correctly rounded decimal conversion;
checked in tests/test_io_plain_parse.py). Returns float64 arrays per file
column; cells that are not numbers come back as NaN for the caller to judge.
"""

from __future__ import annotations

import io
import math
import os
import re
import sys
import warnings as pywarnings
from concurrent.futures import ThreadPoolExecutor
from pathlib import Path
from typing import TYPE_CHECKING

import numpy as np

from ..errors import CaptureError

if TYPE_CHECKING:
    import pandas as pd

#: Files with at least this many bytes of data are parsed in parts of about
#: this size, on up to MAX_WORKERS threads (small parts keep the transient
#: memory of each part low).
PART_BYTES = 4 * 1024 * 1024
MAX_PARTS = 64
MAX_WORKERS = 4
#: A plain block of at most this many parts is read by numpy in one pass:
#: below it, skipping pandas' import saves more than its threads would
#: (measured here: numpy's reader about 0.25 s per 20 MB on one core, pandas'
#: about 0.13 s on two cores plus about 0.2 s to import it).
PLAIN_PARTS = 8
#: Blocks up to this size go to one pandas.read_csv on the path (pandas' own
#: parallel reader: 1.2x its bare time on a 33 MB file, but a transient peak of
#: 3.6x the arrays, as pandas alone has); larger ones are read in slices, which
#: holds about 2x the arrays and so keeps huge captures within memory
#: (benchmarks/bench_import.py, benchmarks/bench_speed.py).
WHOLE_READ_MAX_BYTES = 64 * 1024 * 1024
#: Separators numpy's reader splits exactly as pandas does (not runs of whitespace).
PLAIN_DELIMITERS = (",", ";", "\t")
#: File name endings numpy.loadtxt would decompress: such files never take the plain path.
_COMPRESSED = (".gz", ".bz2", ".xz", ".lzma", ".zip", ".zst")


class _FileSlice:
    """A read-only view of bytes [start, stop) of a file, for pandas to stream."""

    def __init__(self, path: str, start: int, stop: int) -> None:
        self._fh = open(path, "rb")
        self._fh.seek(start)
        self._left = stop - start

    def read(self, n: int = -1) -> bytes:
        if self._left <= 0:
            return b""
        n = self._left if n is None or n < 0 else min(n, self._left)
        data = self._fh.read(n)
        self._left -= len(data)
        return data

    def readline(self, limit: int = -1) -> bytes:
        if self._left <= 0:
            return b""
        line = self._fh.readline(self._left if limit is None or limit < 0 else min(limit, self._left))
        self._left -= len(line)
        return line

    def __iter__(self):
        while line := self.readline():
            yield line

    def close(self) -> None:
        self._fh.close()


def _cpu_count() -> int:
    """CPUs this process may use that are not busy with other work.

    Threads only pay when cores are idle: on a loaded machine (1-minute load
    average near the CPU count) a serial parse is faster and lighter, as
    measured with benchmarks/bench_import.py (common practice, no source).
    """
    try:
        cpus = len(os.sched_getaffinity(0))
    except (AttributeError, OSError):
        cpus = os.cpu_count() or 1
    try:
        busy = os.getloadavg()[0]
    except (AttributeError, OSError):
        busy = 0.0
    return max(1, min(cpus, int(cpus - busy + 0.5)))


def _cuts(path: str, start: int, size: int, parts: int) -> list[int]:
    """Byte offsets that split [start, size) into ``parts`` pieces at line starts."""
    cuts = [start]
    with open(path, "rb") as fh:
        for k in range(1, parts):
            fh.seek(start + (size - start) * k // parts)
            fh.readline()
            pos = fh.tell()
            if cuts[-1] < pos < size:
                cuts.append(pos)
    cuts.append(size)
    return cuts


def read_options(n_fields: int, columns: list[int], delimiter: str, decimal: str,
                 comment: str | None) -> dict:
    """Keyword arguments for pandas.read_csv (each extra option costs parse time)."""
    kwargs = dict(header=None, names=list(range(n_fields)),
                  usecols=None if len(columns) == n_fields else columns,
                  decimal=decimal, comment=comment, skip_blank_lines=True,
                  engine="c", on_bad_lines="error")
    if delimiter == " ":
        kwargs["sep"] = r"\s+"
    else:
        kwargs["sep"] = delimiter
        kwargs["quotechar"] = '"'
    return kwargs


def as_float(series: pd.Series) -> np.ndarray:
    """float64 values of a parsed column; cells that are not numbers become NaN."""
    import pandas as pd
    if series.dtype.kind in "fiu":
        return series.to_numpy(dtype=float, copy=False)
    text = series.astype("string").str.strip()
    return pd.to_numeric(text, errors="coerce").to_numpy(dtype=float, na_value=np.nan)


def _pandas_loaded() -> bool:
    """True when pandas is already imported in this process (its reader is then the faster)."""
    return "pandas" in sys.modules


def parse_numeric_block(path: str, *, encoding: str, offset: int, first_line: int, n_fields: int,
                        columns: list[int], delimiter: str, decimal: str,
                        comment: str | None) -> dict[int, np.ndarray]:
    """Parse the data rows from byte ``offset`` (file line ``first_line``) to the end.

    Returns {file column: float64 array}. Raises CaptureError naming the file
    line of a row the parser cannot split (more fields than expected).
    """
    size = os.path.getsize(path)
    # numpy's reader is single-threaded (about 165 MB/s here) and pandas' about
    # 600 MB/s, but importing pandas costs about 0.3 s: numpy's reader wins for a
    # block of up to PLAIN_PARTS parts only while pandas is not loaded yet (a
    # fresh `fitkit fit`); measured in benchmarks/bench_import.py and bench_speed.py.
    if size - offset <= PLAIN_PARTS * PART_BYTES and not _pandas_loaded():
        plain = parse_plain_block(path, encoding=encoding, offset=offset, n_fields=n_fields,
                                  columns=columns, delimiter=delimiter, decimal=decimal, comment=comment)
        if plain is not None:
            return plain
    import pandas as pd  # imported here: a plain block never needs it (start-up time)

    kwargs = read_options(n_fields, columns, delimiter, decimal, comment)
    wide = encoding.startswith("utf-16")
    if not wide and not path.lower().endswith(_COMPRESSED) and size - offset <= WHOLE_READ_MAX_BYTES:
        whole = _read_whole_by_path(path, encoding=encoding, offset=offset, columns=columns, kwargs=kwargs,
                                    delimiter=delimiter, decimal=decimal)
        if whole is not None:
            return whole
    workers = min(MAX_WORKERS, _cpu_count())
    parts = min(MAX_PARTS, (size - offset) // PART_BYTES)
    if wide or parts < 2 or workers < 2:
        cuts = [offset, size]
    else:
        cuts = _cuts(path, offset, size, parts)

    def parse(k: int) -> dict[int, np.ndarray]:
        try:
            with pywarnings.catch_warnings():
                pywarnings.simplefilter("ignore")
                if wide:
                    text = Path(path).read_text(encoding=encoding).lstrip("\ufeff")
                    frame = pd.read_csv(io.StringIO(text[offset:]), **kwargs)
                else:
                    source = _FileSlice(path, cuts[k], cuts[k + 1])
                    try:
                        frame = pd.read_csv(source, encoding=encoding, encoding_errors="replace", **kwargs)
                    finally:
                        source.close()
        except pd.errors.EmptyDataError:
            return {j: np.empty(0) for j in columns}
        except (pd.errors.ParserError, ValueError, IndexError, OverflowError, UnicodeError) as exc:
            raise CaptureError("a data row has more fields than the rows above it (or the text is garbled)",
                               path=path, line=_error_line(str(exc), path, cuts[k], offset, first_line, wide),
                               hint="fix that row, or check --delimiter") from None
        return {j: as_float(frame[j]) for j in columns}

    if len(cuts) == 2:
        pieces = [parse(0)]
    else:
        with ThreadPoolExecutor(max_workers=min(workers, len(cuts) - 1)) as pool:
            pieces = list(pool.map(parse, range(len(cuts) - 1)))
    if len(pieces) == 1:
        return pieces[0]
    out = {}
    for j in columns:
        out[j] = np.concatenate([p.pop(j) for p in pieces])
    return out


def _read_whole_by_path(path: str, *, encoding: str, offset: int, columns: list[int], kwargs: dict,
                        delimiter: str, decimal: str) -> dict[int, np.ndarray] | None:
    """The block read by one pandas.read_csv call on the path itself (pandas
    reads a path in C, far faster than through a Python file object: 0.11 s
    against 0.17 s for 1M rows, measured), skipping the header lines; or None
    when that cannot be trusted or fails (the caller then reads in slices and
    reports a bad row by its file line).

    Trusted only when the first parsed row equals the first data line parsed
    on its own, so a miscounted header can never shift the data.
    """
    import pandas as pd

    skip = _lines_before(path, offset, encoding)
    if skip is None:
        return None
    with open(path, "rb") as fh:
        fh.seek(offset)
        first = fh.readline().decode(encoding, errors="replace").strip()
    sep = None if delimiter == " " else delimiter
    cells = first.split(sep)
    try:
        expected = [float(cells[j].strip().replace(decimal, ".")) for j in columns]
    except (ValueError, IndexError):
        return None
    try:
        with pywarnings.catch_warnings():
            pywarnings.simplefilter("ignore")
            frame = pd.read_csv(path, skiprows=skip, encoding=encoding, encoding_errors="replace", **kwargs)
    except (pd.errors.ParserError, pd.errors.EmptyDataError, ValueError, IndexError, OverflowError,
            UnicodeError):
        return None
    out = {j: as_float(frame[j]) for j in columns}
    if not out or any(v.size == 0 or not (v[0] == e or (np.isnan(v[0]) and math.isnan(e)))
                      for v, e in zip((out[j] for j in columns), expected)):
        return None
    return out


def parse_plain_block(path: str, *, encoding: str, offset: int, n_fields: int, columns: list[int],
                      delimiter: str, decimal: str, comment: str | None) -> dict[int, np.ndarray] | None:
    """The data rows from byte ``offset`` read by ``numpy.loadtxt``, or None when the
    block is not plain: a cell that is not a decimal number with a point, a row
    whose number of fields differs from ``n_fields``, no rows, or options numpy's
    reader does not share with pandas' (comments, decimal comma, whitespace runs).

    Returns {file column: float64 array}, the same values pandas' C parser gives
    (the caller then falls back to pandas for everything None stands for).
    """
    if (comment is not None or decimal != "." or delimiter not in PLAIN_DELIMITERS
            or encoding.lower().startswith("utf-16") or path.lower().endswith(_COMPRESSED)):
        return None
    skip = _lines_before(path, offset, encoding)
    if skip is None:
        return None
    try:
        with pywarnings.catch_warnings():
            pywarnings.simplefilter("ignore")  # "input contained no data" for an empty block
            # an absolute path: numpy would fetch a name holding "://" as a URL
            table = np.loadtxt(os.path.abspath(path), dtype=float, delimiter=delimiter, comments=None,
                               skiprows=skip, encoding=encoding, ndmin=2)
    except (ValueError, OSError, UnicodeError, OverflowError, LookupError):
        return None
    if table.shape[0] == 0 or table.shape[1] != n_fields:
        return None
    return {j: np.ascontiguousarray(table[:, j]) for j in columns}


def _lines_before(path: str, offset: int, encoding: str) -> int | None:
    """How many text lines (universal newlines, as numpy's reader counts them) lie
    before byte ``offset``; None when ``offset`` is not cleanly at a line start."""
    with open(path, "rb") as fh:
        head = fh.read(offset + 1)
    if len(head) <= offset:
        return None
    head, following = head[:offset], head[offset:offset + 1]
    if offset and not head.endswith((b"\n", b"\r")):
        return None
    if head.endswith(b"\r") and following == b"\n":  # inside a CR LF pair
        return None
    try:
        text = head.decode(encoding)
    except (UnicodeError, LookupError):
        return None
    return len(io.StringIO(text, newline=None).readlines())


def _error_line(message: str, path: str, part_start: int, offset: int, first_line: int,
                wide: bool) -> int | None:
    m = re.search(r"line (\d+)", message)
    if not m:
        return None
    line_in_part = int(m.group(1))
    if wide or part_start == offset:
        return first_line + line_in_part - 1
    with open(path, "rb") as fh:  # error path only: count the lines before this part
        fh.seek(offset)
        skipped = fh.read(part_start - offset).count(b"\n")
    return first_line + skipped + line_in_part - 1
