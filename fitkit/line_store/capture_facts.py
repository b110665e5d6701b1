"""A capture's board serial, capture time and fixture, from its file name, header and file system.

Board serial, by the first rule that gives one:

1. ``serial_field``: a header field of that name (``Serial,0417`` or
   ``# Serial: 0417``; the last group of digits of its value when it holds
   more words, e.g. ``Board,load-cell board rev C serial 0417``);
2. ``serial_pattern``: a regular expression searched in the file name (without
   folder); its group named ``serial``, else its first group, else the whole
   match is the serial. The default, ``DEFAULT_SERIAL_PATTERN``, takes the last
   group of three or more digits (``line2_board_0417_r1.csv`` -> ``0417``).

Capture time: the header field ``time_field`` (ISO 8601 date and time such as
``2026-11-18 15:22:41``) when present, else the file's modification time, by
the bench's clock (no time zone). Fixture: the ``fixture`` given, else the
header field ``Fixture`` or ``Bench``, else "unnamed".

Headers are read from the first HEADER_LINES lines of a text file only; a
binary file (.npz, .parquet) has none.
"""

from __future__ import annotations

import os
import re
from datetime import datetime
from pathlib import Path

from ..errors import OptionError
from .records import CaptureFacts

DEFAULT_SERIAL_PATTERN = r"(\d{3,})(?!.*\d{3,})"
DEFAULT_TIME_FIELD = "Date"
FIXTURE_FIELDS = ("Fixture", "Bench")
HEADER_LINES = 60
_FIELD_LINE = re.compile(r"^\s*[#;%]?\s*([A-Za-z][\w ()/.-]*?)\s*[,;:=\t]\s*(.*?)\s*$")


def compile_serial_pattern(pattern: str | None) -> re.Pattern:
    """The serial pattern as a compiled regular expression (OptionError when it does not compile)."""
    try:
        return re.compile(pattern or DEFAULT_SERIAL_PATTERN)
    except re.error as err:
        raise OptionError(f"the serial pattern {pattern!r} is not a valid regular expression ({err})",
                          hint="e.g. --serial-pattern 'board(?P<serial>\\d+)'") from None


def header_fields(path: str | os.PathLike) -> dict[str, str]:
    """Key -> value of the ``key,value`` / ``# key: value`` lines at the top of a text file (keys lower case)."""
    fields: dict[str, str] = {}
    try:
        with open(path, "rb") as fh:
            head = fh.read(16384)
    except OSError:
        return fields
    if b"\x00" in head:
        return fields  # binary
    for line in head.decode("utf-8", errors="replace").splitlines()[:HEADER_LINES]:
        m = _FIELD_LINE.match(line)
        if m and m.group(2) and not _numeric_row(line):
            fields.setdefault(m.group(1).strip().lower(), m.group(2).strip().strip('"'))
    return fields


def _numeric_row(line: str) -> bool:
    cells = [c for c in re.split(r"[,;\t ]+", line.strip()) if c]
    return bool(cells) and all(re.fullmatch(r"[-+0-9.eE]+", c) for c in cells)


def serial_from_name(name: str, pattern: re.Pattern) -> str | None:
    """The serial the pattern finds in the file name (see the module docstring), or None."""
    m = pattern.search(Path(name).name)
    if m is None:
        return None
    if "serial" in pattern.groupindex:
        return m.group("serial")
    return m.group(1) if pattern.groups else m.group(0)


def _serial_from_value(value: str) -> str:
    digits = re.findall(r"\d{3,}", value)
    return digits[-1] if digits and len(value.split()) > 1 else value


def _parse_time(text: str) -> datetime | None:
    try:
        stamp = datetime.fromisoformat(text.strip().replace("/", "-"))
    except ValueError:
        return None
    return stamp.replace(tzinfo=None) if stamp.tzinfo is None else stamp.astimezone().replace(tzinfo=None)


def capture_facts(path: str, file_sha256: str, *, serial_pattern: re.Pattern | None = None,
                  serial_field: str | None = None, time_field: str = DEFAULT_TIME_FIELD,
                  fixture: str | None = None) -> CaptureFacts:
    """Serial, time and fixture of the capture in ``path`` (see the module docstring); of a
    paired capture (fitkit.io.pairs), from its output file."""
    from ..io.pairs import capture_files
    named, path = path, capture_files(path)[-1]
    fields = header_fields(path)
    serial, serial_source = None, "none found"
    if serial_field and fields.get(serial_field.lower()):
        serial = _serial_from_value(fields[serial_field.lower()])
        serial_source = f"header field {serial_field}"
    if serial is None:
        serial = serial_from_name(path, serial_pattern or compile_serial_pattern(None))
        if serial is not None:
            serial_source = "file name"
    captured_at, time_source = None, "unknown"
    if time_field and fields.get(time_field.lower()):
        captured_at = _parse_time(fields[time_field.lower()])
        time_source = f"header field {time_field}" if captured_at else time_source
    if captured_at is None:
        try:
            captured_at = datetime.fromtimestamp(os.stat(path).st_mtime).replace(microsecond=0)
            time_source = "file modification time"
        except OSError:
            pass
    if not fixture:
        fixture = next((fields[f.lower()] for f in FIXTURE_FIELDS if fields.get(f.lower())), "unnamed")
    return CaptureFacts(file_name=named, file_sha256=file_sha256, board_serial=serial,
                        serial_source=serial_source, captured_at=captured_at, time_source=time_source,
                        fixture=fixture)
