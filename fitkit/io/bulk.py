"""Parse the numeric block of a text capture with pandas' C parser.

The block starts at a known byte offset (found by sniffing). Large files are
cut at line boundaries into parts of a few MB parsed on threads (the C
tokenizer releases the GIL), which keeps the speed of pandas' own parallel
reader (pandas >= 3 reads local paths in parallel) while holding less
memory: each part streams from its own file handle and only the float arrays
are kept. Returns float64 arrays per file column;
cells that are not numbers come back as NaN for the caller to judge.
"""

from __future__ import annotations

import io
import os
import re
import warnings as pywarnings
from concurrent.futures import ThreadPoolExecutor
from pathlib import Path

import numpy as np
import pandas as pd

from ..errors import CaptureError

#: Files with at least this many bytes of data are parsed in parts of about
#: this size, on up to MAX_WORKERS threads (small parts keep the transient
#: memory of each part low).
PART_BYTES = 4 * 1024 * 1024
MAX_PARTS = 64
MAX_WORKERS = 4


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
    if series.dtype.kind in "fiu":
        return series.to_numpy(dtype=float, copy=False)
    text = series.astype("string").str.strip()
    return pd.to_numeric(text, errors="coerce").to_numpy(dtype=float, na_value=np.nan)


def parse_numeric_block(path: str, *, encoding: str, offset: int, first_line: int, n_fields: int,
                        columns: list[int], delimiter: str, decimal: str,
                        comment: str | None) -> dict[int, np.ndarray]:
    """Parse the data rows from byte ``offset`` (file line ``first_line``) to the end.

    Returns {file column: float64 array}. Raises CaptureError naming the file
    line of a row the parser cannot split (more fields than expected).
    """
    kwargs = read_options(n_fields, columns, delimiter, decimal, comment)
    wide = encoding.startswith("utf-16")
    size = os.path.getsize(path)
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
