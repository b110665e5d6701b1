"""Capture import: delimited text, NumPy .npz and Parquet files -> Capture.

``load_capture(path)`` decides the file's layout from the file itself and
returns a :class:`fitkit.capture.Capture` (time in seconds, channels in SI
units, header metadata, provenance with the decisions taken). Every keyword
overrides the corresponding guess. ``save_npz`` / ``save_parquet`` write
captures back out for round trips. Only FitkitError (CaptureError,
OptionError) leaves this package on bad input.
"""

from __future__ import annotations

import os
from pathlib import Path
from typing import Iterable

from ..capture import Capture
from ..errors import OptionError
from ..units import BASE_UNITS, parse_value, unit_scale
from .binary import read_npz, read_parquet, save_npz, save_parquet
from .delimited import read_delimited
from .join import INPUT_KEY, OUTPUT_KEY, join_input_output
from .sniff import read_head

TEXT_SUFFIXES = (".csv", ".txt", ".tsv", ".dat", ".asc", ".prn")

__all__ = ["load_capture", "check_read_options", "checked_numbers", "save_npz", "save_parquet", "join_input_output",
           "INPUT_KEY", "OUTPUT_KEY"]


def load_capture(path: str | Path, *, second_path: str | Path | None = None,
                 sample_interval: float | str | None = None, time_origin: float | str | None = None,
                 delimiter: str | None = None, decimal: str | None = None,
                 skip_rows: int | None = None, header_rows: int | None = None,
                 time_column: str | int | None = None, time_unit: str | None = None,
                 value_unit: str | None = None, vertical_scale: float | str | None = None,
                 vertical_offset: float | str | None = None,
                 channels: Iterable[str | int] | None = None, encoding: str | None = None) -> Capture:
    """Read a capture file (and optionally a second file) into a Capture.

    Parameters (all optional except ``path``; each overrides a guess)
    ----------
    path: a .csv/.txt/.tsv/.dat text file, a .npz or a .parquet file.
    second_path: a second file; ``path`` is then the input (drive) and
        ``second_path`` the output (response), joined on their time axes.
    sample_interval: seconds between samples (number or text such as "1u");
        builds the time axis when the file has no time column.
    time_origin: time of the first sample in seconds (default 0 or the file's).
    delimiter: ",", ";", "tab" or "space"; decimal: "." or ",".
    skip_rows: lines to skip at the top before the header/data;
        header_rows: header rows directly above the data (0, 1 names, 2 names+units).
    time_column: name or 1-based position among the numeric columns, or "none".
    time_unit: unit of the time column ("s", "ms", "us", "ns").
    value_unit: unit of the channel columns ("V", "mV", ...).
    vertical_scale, vertical_offset: volts per count and volts added, for raw counts.
    channels: names or 1-based positions of the channels to keep, in order.
    encoding: text encoding (default: UTF-8 with a Latin-1 fallback).
    """
    if not isinstance(path, (str, os.PathLike)):
        from ..errors import ArgumentError
        raise ArgumentError(f"load_capture: path must be a file path (str or Path), not {type(path).__name__}")
    given = dict(sample_interval=sample_interval, time_origin=time_origin, delimiter=delimiter,
                 decimal=decimal, skip_rows=skip_rows, header_rows=header_rows, time_column=time_column,
                 time_unit=time_unit, value_unit=value_unit, vertical_scale=vertical_scale,
                 vertical_offset=vertical_offset, encoding=encoding)
    capture = _load_with_sidecar(path, given, channels, second_path)
    if second_path is not None:
        capture = join_input_output(capture, _load_with_sidecar(second_path, given, channels, second_path))
    if channels:
        capture = capture.with_channels(list(channels))
    return capture


def _load_with_sidecar(path, given: dict, channels, second_path) -> Capture:
    """One file read with the options given over the settings of its sidecar
    (fitkit.io.sidecar), after every option is checked."""
    from .sidecar import with_sidecar
    if isinstance(path, (str, os.PathLike)) and os.path.isfile(path):
        options, notes = with_sidecar(path, given)
    else:
        options, notes = dict(given), []
    capture = _load_checked(path, options, channels, second_path)
    return capture.with_decisions(notes) if notes else capture


def _load_checked(path, options: dict, channels, second_path) -> Capture:
    sample_interval, time_origin = options["sample_interval"], options["time_origin"]
    delimiter, decimal, encoding = options["delimiter"], options["decimal"], options["encoding"]
    skip_rows, header_rows, time_column = options["skip_rows"], options["header_rows"], options["time_column"]
    time_unit, value_unit = options["time_unit"], options["value_unit"]
    vertical_scale, vertical_offset = options["vertical_scale"], options["vertical_offset"]
    check_read_options(path=path, second_path=second_path, encoding=encoding, time_unit=time_unit,
                       value_unit=value_unit, skip_rows=skip_rows, header_rows=header_rows,
                       delimiter=delimiter, time_column=time_column, channels=channels)
    si, t0, scale, offset = checked_numbers(sample_interval, time_origin, vertical_scale, vertical_offset)
    if decimal not in (None, ".", ","):
        raise OptionError(f"decimal mark must be '.' or ',', got {decimal!r}")
    options = dict(sample_interval=si, time_origin=t0, delimiter=delimiter, decimal=decimal,
                   skip_rows=skip_rows, header_rows=header_rows, time_column=time_column,
                   time_unit=time_unit, value_unit=value_unit, vertical_scale=scale,
                   vertical_offset=offset, encoding=encoding)
    return _load_one(Path(path), options)


#: Sample intervals accepted from the user, in seconds (a 1 THz sampler to one sample a day).
MIN_SAMPLE_INTERVAL = 1e-12
MAX_SAMPLE_INTERVAL = 86_400.0
#: Largest first-sample time accepted (s): beyond it float64 cannot keep microsecond samples apart.
MAX_TIME_ORIGIN = 1e6


def check_read_options(*, path=None, second_path=None, encoding=None, time_unit=None, value_unit=None,
                       skip_rows=None, header_rows=None, delimiter=None, time_column=None,
                       channels=None) -> None:
    """Refuse reading options that cannot be right, before any file is opened.

    Raises ArgumentError (a TypeError) for an argument of the wrong kind and
    OptionError for a value no capture can have, each naming the option.
    """
    import codecs
    from numbers import Integral

    from ..errors import ArgumentError
    from .layouts import time_factor
    from .unit_cells import COUNT_WORDS
    for name, value in (("path", path), ("second_path", second_path)):
        if value is not None and not isinstance(value, (str, os.PathLike)):
            raise ArgumentError(f"load_capture: {name} must be a file path (str or Path), "
                                f"not {type(value).__name__}")
    for name, value in (("encoding", encoding), ("time_unit", time_unit), ("value_unit", value_unit),
                        ("delimiter", delimiter)):
        if value is not None and not isinstance(value, str):
            raise ArgumentError(f"{name} (--{name.replace('_', '-')}) must be text, not {type(value).__name__}")
    for name, value in (("skip_rows", skip_rows), ("header_rows", header_rows)):
        if value is not None and (not isinstance(value, Integral) or isinstance(value, bool)):
            raise ArgumentError(f"{name} (--{name.replace('_', '-')}) must be a whole number, not {value!r}")
    if time_column is not None and not isinstance(time_column, (str, int)):
        raise ArgumentError(f"--time-column: a name, a position or 'none', not {type(time_column).__name__}")
    if channels is not None and (isinstance(channels, (str, bytes)) or not hasattr(channels, "__iter__")):
        raise ArgumentError("channels: a list of channel names or positions")
    if encoding is not None:
        try:
            codecs.lookup(encoding)
        except LookupError:
            raise OptionError(f"--encoding {encoding!r} is not a text encoding Python knows",
                              hint="e.g. --encoding utf-8, latin-1 or cp1252") from None
    if time_unit is not None and time_factor(time_unit) is None:
        raise OptionError(f"--time-unit {time_unit!r} is not a unit of time", hint="use s, ms, us or ns")
    if value_unit is not None:
        _, si = unit_scale(value_unit)
        if si not in set(BASE_UNITS.values()) and value_unit.strip().lower() not in COUNT_WORDS:
            raise OptionError(f"--value-unit {value_unit!r} is not a unit fitkit knows",
                              hint="use V, mV, uV, A, mA or counts")
    if skip_rows is not None and skip_rows < 0:
        raise OptionError("--skip-rows must be 0 or more")
    if header_rows is not None and header_rows not in (0, 1, 2):
        raise OptionError("--header-rows must be 0, 1 or 2")


def checked_numbers(sample_interval=None, time_origin=None, vertical_scale=None, vertical_offset=None
                    ) -> tuple[float | None, float | None, float | None, float | None]:
    """The numeric reading options in SI units (seconds, volts per count, volts),
    refused (OptionError naming the option) when no capture could have them."""
    si = _si_option(sample_interval, "--sample-interval", "s")
    if si is not None and not si > 0:
        raise OptionError(f"--sample-interval must be positive, got {sample_interval!r}",
                          hint="give the time between samples in seconds, e.g. 1u")
    if si is not None and not MIN_SAMPLE_INTERVAL <= si <= MAX_SAMPLE_INTERVAL:
        raise OptionError(f"--sample-interval {sample_interval!r} is outside {MIN_SAMPLE_INTERVAL:g} s to "
                          f"{MAX_SAMPLE_INTERVAL:g} s", hint="give the time between samples in seconds, e.g. 1u")
    t0 = _si_option(time_origin, "--time-origin", "s")
    if t0 is not None and not abs(t0) <= MAX_TIME_ORIGIN:
        raise OptionError(f"--time-origin {time_origin!r} is not a plausible time", hint="give seconds, e.g. -10u")
    scale = _si_option(vertical_scale, "--vertical-scale", None)
    if scale is not None and (scale == 0 or not abs(scale) <= 1e9):
        raise OptionError(f"--vertical-scale {vertical_scale!r} must be a non-zero number of volts per count",
                          hint="e.g. --vertical-scale 0.5m")
    offset = _si_option(vertical_offset, "--vertical-offset", "V")
    if offset is not None and not abs(offset) <= 1e9:
        raise OptionError(f"--vertical-offset {vertical_offset!r} is not a plausible voltage")
    return si, t0, scale, offset


def _si_option(value, option: str, unit: str | None) -> float | None:
    if value is None:
        return None
    try:
        return parse_value(value, unit)
    except OptionError as exc:
        raise OptionError(f"{option}: {exc.message}", hint=exc.hint) from None


def _load_one(path: Path, options: dict) -> Capture:
    kind = _file_kind(path)
    if kind == "npz":
        return read_npz(path, sample_interval=options["sample_interval"], time_origin=options["time_origin"])
    if kind == "parquet":
        return read_parquet(path, sample_interval=options["sample_interval"],
                            time_origin=options["time_origin"])
    return read_delimited(path, **options)


def _file_kind(path: Path) -> str:
    """'npz', 'parquet' or 'text', from the first bytes (the suffix only breaks ties)."""
    head = read_head(path, 4)
    suffix = path.suffix.lower()
    if head.startswith(b"PK") or suffix == ".npz":
        return "npz"
    if head.startswith(b"PAR1") or suffix in (".parquet", ".pq"):
        return "parquet"
    return "text"
