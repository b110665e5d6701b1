"""Capture import: delimited text, NumPy .npz and Parquet files -> Capture.

``load_capture(path)`` decides the file's layout from the file itself and
returns a :class:`fitkit.capture.Capture` (time in seconds, channels in SI
units, header metadata, provenance with the decisions taken). Every keyword
overrides the corresponding guess. ``save_npz`` / ``save_parquet`` write
captures back out for round trips. Only FitkitError (CaptureError,
OptionError) leaves this package on bad input.
"""

from __future__ import annotations

from pathlib import Path
from typing import Iterable

from ..capture import Capture
from ..errors import OptionError
from ..units import parse_value
from .binary import read_npz, read_parquet, save_npz, save_parquet
from .checks import robust_noise_sigma
from .delimited import read_delimited
from .join import INPUT_KEY, OUTPUT_KEY, join_input_output
from .sniff import read_head

TEXT_SUFFIXES = (".csv", ".txt", ".tsv", ".dat", ".asc", ".prn")

__all__ = ["load_capture", "save_npz", "save_parquet", "robust_noise_sigma", "join_input_output",
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
    si = _si_option(sample_interval, "--sample-interval", "s")
    if si is not None and not si > 0:
        raise OptionError(f"--sample-interval must be positive, got {sample_interval!r}")
    t0 = _si_option(time_origin, "--time-origin", "s")
    scale = _si_option(vertical_scale, "--vertical-scale", None)
    offset = _si_option(vertical_offset, "--vertical-offset", "V")
    if decimal not in (None, ".", ","):
        raise OptionError(f"decimal mark must be '.' or ',', got {decimal!r}")
    if skip_rows is not None and skip_rows < 0:
        raise OptionError("--skip-rows must be 0 or more")
    if header_rows is not None and header_rows not in (0, 1, 2):
        raise OptionError("--header-rows must be 0, 1 or 2")
    options = dict(sample_interval=si, time_origin=t0, delimiter=delimiter, decimal=decimal,
                   skip_rows=skip_rows, header_rows=header_rows, time_column=time_column,
                   time_unit=time_unit, value_unit=value_unit, vertical_scale=scale,
                   vertical_offset=offset, encoding=encoding)
    capture = _load_one(Path(path), options)
    if second_path is not None:
        capture = join_input_output(capture, _load_one(Path(second_path), options))
    if channels:
        capture = capture.with_channels(list(channels))
    return capture


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
