"""Decide the shape of a delimited text capture from its first lines.

Only the first SAMPLE_BYTES of the file are read here. From them this module
decides the text encoding, the delimiter, the decimal mark, which line the
numeric data starts on, which columns hold numbers (or wall-clock stamps), and
which lines above the data are header rows or metadata. The meaning of names,
units and metadata keys is left to :mod:`fitkit.io.layouts`; the bulk numeric
parse to :mod:`fitkit.io.delimited`.
"""

from __future__ import annotations

import re
from dataclasses import dataclass, field
from pathlib import Path

from ..errors import CaptureError
from .unit_cells import looks_like_unit

#: Bytes read for sniffing. Headers of bench exports are a few KB at most.
SAMPLE_BYTES = 32 * 1024
#: Bytes read for sniffing when the data does not start within SAMPLE_BYTES
#: (exports with long comment headers); --skip-rows reaches anything longer.
MAX_SAMPLE_BYTES = 4 * 1024 * 1024
#: Content lines searched for the start of the data (headers are never longer).
MAX_HEADER_SCAN = 400
#: Number of content lines at the end of the sample used to learn the data's shape.
TAIL_LINES = 40
#: Consecutive data-like lines that mark the start of the numeric block.
RUN_TO_START = 5

DELIMITERS = (",", ";", "\t", " ")
DELIMITER_NAMES = {",": "comma", ";": "semicolon", "\t": "tab", " ": "whitespace"}
_GIVEN_DELIMITERS = {"tab": "\t", "\\t": "\t", "space": " ", "whitespace": " ", "comma": ",", "semicolon": ";"}
COMMENT_PREFIXES = ("#", "//", "%")

_NUM = {
    ".": re.compile(r"^[+-]?(?:\d+(?:\.\d*)?|\.\d+)(?:[eE][+-]?\d+)?$"),
    ",": re.compile(r"^[+-]?(?:\d+(?:,\d*)?|,\d+)(?:[eE][+-]?\d+)?$"),
}
_NONFINITE = re.compile(r"^[+-]?(?:nan|inf|infinity)$", re.I)
_DATETIME = re.compile(
    r"^(?:\d{1,4}[-/.]\d{1,2}[-/.]\d{1,4}(?:[ T]\d{1,2}:\d{2}(?::\d{2}(?:[.,]\d+)?)?)?"
    r"|\d{1,2}:\d{2}:\d{2}(?:[.,]\d+)?)(?:\s*(?:AM|PM|Z|[+-]\d{2}:?\d{2}))?$", re.I)


@dataclass(frozen=True)
class TextLine:
    """One complete line of the sample: 1-based number, byte offset, text (no line end)."""

    number: int
    offset: int
    text: str


@dataclass(frozen=True)
class TextSample:
    """The decoded first part of a text file."""

    path: str
    encoding: str
    lines: tuple[TextLine, ...]
    whole_file: bool
    size: int


@dataclass(frozen=True)
class TextShape:
    """What sniffing decided about a delimited text file.

    Attributes
    ----------
    delimiter, decimal: the field separator (" " means runs of whitespace) and decimal mark.
    n_fields: largest number of fields seen in a data line.
    data_line: the first data line (number and byte offset).
    numeric_columns: 0-based columns holding numbers in the data.
    datetime_columns: 0-based columns holding wall-clock date/time text.
    header_rows: split header rows directly above the data (0, 1 or 2: names, units).
    metadata_lines: lines above the header rows (comments, key/value, free text).
    side_cells: for each data line in the sample, the non-empty cells outside the
        data columns (key/value metadata printed beside the data).
    data_cells: split cells of the data lines in the sample (for unit and
        precision decisions).
    decisions: plain-words notes on each decision.
    """

    delimiter: str
    decimal: str
    n_fields: int
    data_line: TextLine
    numeric_columns: tuple[int, ...]
    datetime_columns: tuple[int, ...]
    header_rows: tuple[tuple[str, ...], ...]
    metadata_lines: tuple[TextLine, ...]
    side_cells: tuple[tuple[str, ...], ...]
    data_cells: tuple[tuple[str, ...], ...]
    decisions: tuple[str, ...] = field(default=())


# -- reading the sample -------------------------------------------------------

def read_head(path: str | Path, nbytes: int) -> bytes:
    """The first ``nbytes`` bytes of a file (never writes).

    Raises CaptureError, naming the file, when it is missing, a directory or unreadable.
    """
    try:
        with open(path, "rb") as fh:
            return fh.read(nbytes)
    except FileNotFoundError:
        raise CaptureError("file not found", path=str(path), hint="check the file name") from None
    except IsADirectoryError:
        raise CaptureError("is a directory, not a capture file", path=str(path)) from None
    except OSError as exc:
        raise CaptureError(f"cannot read the file ({exc.strerror})", path=str(path)) from None


def read_sample(path: str | Path, *, encoding: str | None = None, window: int = SAMPLE_BYTES,
                skip_lines: int = 0) -> TextSample:
    """Read and decode ``window`` bytes of ``path`` (never writes), from the start
    or from after its first ``skip_lines`` lines (line numbers and byte offsets
    stay those of the whole file).

    Raises CaptureError for a missing, empty or binary file, one whose lines end
    with a carriage return only, or one with no line end in the window.
    """
    p = Path(path)
    head = read_head(p, window)
    size = p.stat().st_size
    if size == 0 or not head.strip():
        raise CaptureError("the file is empty", path=str(path),
                           hint="export the capture again; the file holds no data")
    start = _offset_after_lines(p, skip_lines) if skip_lines and not head.startswith((b"\xff\xfe", b"\xfe\xff")) \
        else 0
    raw = head if start == 0 else _read_at(p, start, window)
    if start and not raw.strip():
        raise CaptureError(f"nothing after the {skip_lines} skipped lines", path=str(path),
                           hint="check --skip-rows")
    _reject_line_ends(raw, size, start + len(raw) >= size, str(path), window)
    enc, bom = _decide_encoding(head, encoding)
    if start:
        bom = 0
    whole = start + len(raw) >= size
    if enc.startswith("utf-16"):
        # Rare (some Windows tools): decode the sample as text; offsets are in characters.
        text = raw[bom:].decode(enc, errors="replace")
        parts = text.split("\n")
        if not whole:
            parts = parts[:-1]
        lines, pos = [], 0
        for i, part in enumerate(parts):
            lines.append(TextLine(i + 1, pos, part.rstrip("\r")))
            pos += len(part) + 1
    else:
        body = raw
        if not whole:
            cut = body.rfind(b"\n")
            body = body[: cut + 1] if cut >= 0 else b""
        lines, pos = [], start
        for i, part in enumerate(body.split(b"\n")):
            offset = pos
            pos += len(part) + 1
            if i == 0 and bom:
                offset, part = bom, part[bom:]
            lines.append(TextLine(skip_lines * (start > 0) + i + 1, offset,
                                  part.decode(enc, errors="replace").rstrip("\r")))
        if lines and lines[-1].text == "" and body.endswith(b"\n"):
            lines.pop()
    text_all = "\n".join(line.text for line in lines)
    _reject_binary(text_all, raw, str(path), enc)
    return TextSample(str(path), enc, tuple(lines), whole, size)


def _offset_after_lines(path: Path, n: int) -> int:
    """Byte offset of the start of line n + 1 (the end of the file when it has fewer lines)."""
    try:
        with open(path, "rb") as fh:
            for _ in range(n):
                if not fh.readline(64 * 1024 * 1024):
                    break
            return fh.tell()
    except OSError as exc:
        raise CaptureError(f"cannot read the file ({exc.strerror})", path=str(path)) from None


def _read_at(path: Path, offset: int, n: int) -> bytes:
    try:
        with open(path, "rb") as fh:
            fh.seek(offset)
            return fh.read(n)
    except OSError as exc:
        raise CaptureError(f"cannot read the file ({exc.strerror})", path=str(path)) from None


def _reject_line_ends(raw: bytes, size: int, whole: bool, path: str, window: int) -> None:
    """Name the problem of a file whose lines cannot be found: CR-only line ends, or no line end at all."""
    if b"\n" in raw or b"\x00" in raw:
        return
    if raw.count(b"\r") >= 2:
        raise CaptureError("the lines end with a carriage return only (an old Mac line end), which fitkit "
                           "does not read", path=path,
                           hint="convert the line ends to LF or CRLF, e.g. tr '\\r' '\\n' < IN > OUT")
    if not whole:
        raise CaptureError(f"no line end in the first {window // 1024} KB of a {size / 1e6:.3g} MB file: "
                           "it is not a capture with one sample per line", path=path,
                           hint="export the capture again as one row per sample")


def _decide_encoding(raw: bytes, forced: str | None) -> tuple[str, int]:
    """(encoding, BOM length) for the raw sample."""
    if raw.startswith(b"\xef\xbb\xbf"):
        return forced or "utf-8", 3
    if raw.startswith((b"\xff\xfe", b"\xfe\xff")):
        return forced or "utf-16", 2
    if forced:
        return forced, 0
    try:
        raw.decode("utf-8")
        return "utf-8", 0
    except UnicodeDecodeError as exc:
        # A multi-byte character cut at the end of the sample is still UTF-8.
        if exc.start >= len(raw) - 3 and len(raw) >= SAMPLE_BYTES:
            return "utf-8", 0
        return "latin-1", 0


_CONTROL = bytes(c for c in range(32) if c not in b"\t\r\n\f\v")


def _reject_binary(text: str, raw: bytes, path: str, enc: str) -> None:
    if not enc.startswith("utf-16") and b"\x00" in raw:
        raise CaptureError("this is a binary file, not delimited text", path=path,
                           hint="export the capture as CSV, or give a .npz or .parquet file")
    if enc.startswith("utf-16"):
        control = sum(1 for ch in text if ord(ch) < 32 and ch not in "\t\r\n\f\v")
    else:
        control = len(raw) - len(raw.translate(None, _CONTROL))
    odd = control + text.count("\ufffd")
    if text and odd > max(2, 0.01 * len(text)):
        raise CaptureError("this file does not look like text (control characters found)",
                           path=path, hint="export the capture as CSV, or give a .npz or .parquet file")


# -- cells ----------------------------------------------------------------------

def is_comment(text: str) -> bool:
    s = text.lstrip()
    return s.startswith(COMMENT_PREFIXES)


def split_cells(text: str, delimiter: str) -> list[str]:
    """Split one line into stripped cells (quotes removed)."""
    parts = text.split() if delimiter == " " else text.split(delimiter)
    return [c.strip().strip('"').strip("'").strip() for c in parts]


def is_number(cell: str, decimal: str = ".") -> bool:
    """True for a plain number with the given decimal mark (NaN/inf included)."""
    if not cell or "_" in cell or not cell.isascii():
        return False
    if decimal == ",":
        if "." in cell:
            return False
        cell = cell.replace(",", ".", 1)
    elif "," in cell:
        return False
    try:
        float(cell)
    except ValueError:
        return False
    return True


def is_datetime(cell: str) -> bool:
    """True for wall-clock text such as 2024-03-01 12:00:00.25 or 12:00:01.5."""
    if ":" not in cell and cell.count("-") < 2 and cell.count("/") < 2 and cell.count(".") < 2:
        return False
    return bool(_DATETIME.match(cell))


def number_either(cell: str) -> bool:
    return is_number(cell, ".") or is_number(cell, ",")


# -- deciding the shape -----------------------------------------------------------

def decide_shape(sample: TextSample, *, delimiter: str | None = None, decimal: str | None = None,
                 skip_rows: int | None = None, header_rows: int | None = None) -> TextShape:
    """Decide delimiter, decimal mark, data start, columns and header rows.

    Options given by the user (not None) override the corresponding guess.
    Raises CaptureError when no block of numeric data can be found.
    """
    path = sample.path
    decisions: list[str] = []
    first = (skip_rows or 0) + 1
    content = [ln for ln in sample.lines
               if ln.number >= first and ln.text.strip() and not is_comment(ln.text)]
    if not content:
        raise CaptureError("no data lines found (only blank, comment or skipped lines)", path=path,
                           hint="check --skip-rows, or export the capture again")
    tail = content[-TAIL_LINES:]

    guessed = delimiter is None
    delimiter = _guess_delimiter(tail) if guessed else _GIVEN_DELIMITERS.get(delimiter, delimiter)
    decisions.append(f"delimiter: {DELIMITER_NAMES.get(delimiter, repr(delimiter))} "
                     + ("(guessed from the data lines)" if guessed else "(given)"))
    tail_cells = [split_cells(ln.text, delimiter) for ln in tail]

    if decimal is None:
        decimal = _guess_decimal(tail_cells, delimiter)
        decisions.append(f"decimal mark: {'comma' if decimal == ',' else 'point'} (guessed)")
    else:
        decisions.append(f"decimal mark: {'comma' if decimal == ',' else 'point'} (given)")

    numeric_cols, datetime_cols = _data_columns(tail_cells, decimal)
    if not numeric_cols:
        raise CaptureError("no columns of numbers found", path=path,
                           hint="check --delimiter and --decimal, or that this is a capture export")

    def data_like(cells: list[str]) -> bool:
        return (all(c < len(cells) and is_number(cells[c], decimal) for c in numeric_cols)
                and all(c < len(cells) and is_datetime(cells[c]) for c in datetime_cols))

    split = [(ln, split_cells(ln.text, delimiter)) for ln in content[:MAX_HEADER_SCAN + RUN_TO_START]]
    start_idx = None
    if header_rows is not None and skip_rows is not None:
        start_idx = header_rows
        if start_idx >= len(split):
            raise CaptureError("no data lines after the skipped and header rows", path=path,
                               hint="check --skip-rows and --header-rows")
    else:
        for i in range(len(split)):
            run = split[i: i + RUN_TO_START]
            if all(data_like(cells) for _, cells in run):
                start_idx = i
                break
    if start_idx is None:
        raise CaptureError("cannot find where the numeric data starts", path=path,
                           hint="give --skip-rows (lines before the header) and --header-rows")
    data_line = split[start_idx][0]
    if guessed:
        _reject_mixed_delimiters(split[:start_idx], delimiter, decimal, len(numeric_cols), data_line, path)
    data_split = split[start_idx:]
    n_fields = max(len(cells) for _, cells in data_split)
    data_cols = set(numeric_cols) | set(datetime_cols)

    # Header rows: up to two content lines directly above the data.
    above = [(ln, cells) for ln, cells in split[:start_idx]]
    if header_rows is None:
        header_rows = _count_header_rows(above, data_cols, decimal)
    header_rows = min(header_rows, len(above))
    headers = tuple(tuple(_header_cells(ln.text, cells, delimiter, n_fields))
                    for ln, cells in above[len(above) - header_rows:]) if header_rows else ()
    header_numbers = {ln.number for ln, _ in above[len(above) - header_rows:]} if header_rows else set()
    metadata_lines = tuple(ln for ln in sample.lines
                           if ln.number < data_line.number and ln.number not in header_numbers
                           and ln.text.strip())
    side = tuple(tuple(c for j, c in enumerate(cells) if j not in data_cols and c)
                 for _, cells in data_split[:200])
    decisions.append(f"data start on line {data_line.number}; {len(headers)} header row(s) above it")
    return TextShape(delimiter, decimal, n_fields, data_line, tuple(numeric_cols), tuple(datetime_cols),
                     headers, metadata_lines, tuple(s for s in side if s),
                     tuple(tuple(c) for _, c in data_split[:TAIL_LINES]), tuple(decisions))


def _reject_mixed_delimiters(above: list[tuple[TextLine, list[str]]], delimiter: str, decimal: str,
                             width: int, data_line: TextLine, path: str) -> None:
    """CaptureError when the lines above the data are rows of numbers split by another delimiter."""
    for other in DELIMITERS:
        if other == delimiter:
            continue
        rows = [ln for ln, _ in above
                if sum(is_number(c, decimal) for c in split_cells(ln.text, other)) >= max(width, 2)]
        if len(rows) >= RUN_TO_START:
            raise CaptureError(f"the file mixes delimiters: lines {rows[0].number} to {rows[-1].number} are "
                               f"split by {DELIMITER_NAMES[other]}s, the data from line {data_line.number} by "
                               f"{DELIMITER_NAMES[delimiter]}s", path=path,
                               hint="export the capture again, or give --delimiter and --skip-rows "
                                    "to read one part")


def _header_cells(text: str, cells: list[str], delimiter: str, n_fields: int) -> list[str]:
    """Header cells; with whitespace delimiters names may hold single spaces
    ("Time (s)   CH1 (V)"), so runs of two or more spaces or tabs split them."""
    if delimiter != " " or len(cells) == n_fields:
        return cells
    wide = [c.strip().strip('"') for c in re.split(r"\t|\s{2,}", text.strip())]
    return wide if len(wide) == n_fields else cells


def _guess_delimiter(tail: list[TextLine]) -> str:
    """The delimiter that splits the data lines into the most all-numeric columns."""
    best, best_score = ",", (-1.0, -1)
    for delim in DELIMITERS:
        rows = [split_cells(ln.text, delim) for ln in tail]
        width = max(len(r) for r in rows)
        numeric = nonempty = 0
        for j in range(width):
            col = [r[j] for r in rows if j < len(r) and r[j]]
            if not col:
                continue
            nonempty += 1
            if sum(number_either(c) or is_datetime(c) for c in col) >= 0.8 * len(rows):
                numeric += 1
        score = (numeric / nonempty if nonempty else 0.0, numeric)
        if score > best_score:
            best, best_score = delim, score
    return best


def _guess_decimal(rows: list[list[str]], delimiter: str) -> str:
    if delimiter == ",":
        return "."
    comma = point = 0
    for r in rows:
        for c in r:
            if _NUM[","].match(c) and "," in c:
                comma += 1
            elif _NUM["."].match(c) and "." in c:
                point += 1
    return "," if comma > point else "."


def _data_columns(rows: list[list[str]], decimal: str) -> tuple[list[int], list[int]]:
    # Header lines of very short files fall inside the tail: judge on lines holding a number.
    rows = [r for r in rows if any(is_number(c, decimal) for c in r)] or rows
    width = max(len(r) for r in rows)
    numeric, stamps = [], []
    need = 0.8 * len(rows)
    for j in range(width):
        col = [r[j] for r in rows if j < len(r)]
        if sum(is_number(c, decimal) for c in col) >= need:
            numeric.append(j)
        elif sum(is_datetime(c) for c in col) >= need:
            stamps.append(j)
    return numeric, stamps


def _count_header_rows(above: list[tuple[TextLine, list[str]]], data_cols: set[int],
                       decimal: str) -> int:
    """0, 1 (names) or 2 (names then units) header rows directly above the data."""
    def cells_at(cells: list[str]) -> list[str]:
        return [cells[j] for j in sorted(data_cols) if j < len(cells)]

    def names_like(cells: list[str]) -> bool:
        at = cells_at(cells)
        extra = [c for j, c in enumerate(cells) if j not in data_cols and c]
        return (any(at) and all(not is_number(c, decimal) for c in at if c)
                and not any(number_either(c) for c in extra)
                and not (len(at) == 1 and at[0].rstrip().endswith((":", "=")))
                and not any(re.search(r"[:=]\s*\S", c) for c in at))

    def units_like(cells: list[str]) -> bool:
        at = [c for c in cells_at(cells) if c]
        return bool(at) and all(looks_like_unit(c) for c in at)

    if not above:
        return 0
    last = above[-1][1]
    def numbered_names(cells: list[str]) -> bool:
        # channel numbers as names ("x-axis,1,2,3,F1") above a units row
        at = cells_at(cells)
        return (len(at) == len(data_cols) and all(at) and any(not number_either(c) for c in at)
                and not any(re.search(r"[:=]", c) for c in at))

    if len(above) >= 2 and units_like(last) and (names_like(above[-2][1]) or numbered_names(above[-2][1])):
        return 2
    if names_like(last):
        return 1
    return 0
