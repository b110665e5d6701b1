"""The reading options shared by every command that loads a capture.

``@capture_options`` adds them to a click command; ``CaptureOptions.pop(kwargs)``
takes them back out of the command's keyword arguments, ``.load_kwargs()``
turns them into keyword arguments of :func:`fitkit.io.load_capture`, and
``.load(file, out_file)`` reads the capture. Every option overrides one guess
of the importer; ``fitkit inspect`` shows what was guessed.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any, Callable

import click

from ..capture import Capture
from ..errors import OptionError

_DELIMITERS = {"comma": ",", ",": ",", "semicolon": ";", ";": ";", "tab": "\t", "space": " ",
               "whitespace": " "}
_DECIMALS = {"point": ".", ".": ".", "comma": ",", ",": ","}

#: (option declaration, keyword, click keyword arguments) in the order shown by --help.
_OPTIONS: list[tuple[str, str, dict[str, Any]]] = [
    ("--sample-interval", "sample_interval",
     dict(metavar="SECONDS", help="Time between samples, e.g. 1u or 4e-8; builds the time axis "
                                  "when the file has no time column (with --time-column none it "
                                  "replaces one) and overrides the interval stated in the file.")),
    ("--time-origin", "time_origin",
     dict(metavar="SECONDS", help="Time of the first sample (default: from the file, else 0).")),
    ("--time-column", "time_column",
     dict(metavar="NAME|N|none", help="Column holding time: its name, its 1-based position among "
                                      "the numeric columns, or 'none'.")),
    ("--time-unit", "time_unit", dict(metavar="UNIT", help="Unit of the time column: s, ms, us, ns.")),
    ("--value-unit", "value_unit", dict(metavar="UNIT", help="Unit of the channel columns: V, mV, ...")),
    ("--vertical-scale", "vertical_scale",
     dict(metavar="VOLTS", help="Volts per count for raw ADC counts (e.g. 0.5m).")),
    ("--vertical-offset", "vertical_offset",
     dict(metavar="VOLTS", help="Volts added after scaling raw counts (with --vertical-scale).")),
    ("--delimiter", "delimiter",
     dict(type=click.Choice(sorted(_DELIMITERS)), help="Field separator (default: guessed).")),
    ("--decimal", "decimal",
     dict(type=click.Choice(sorted(_DECIMALS)), help="Decimal mark (default: guessed).")),
    ("--skip-rows", "skip_rows",
     dict(type=click.IntRange(min=0), metavar="N", help="Lines to skip at the top before the header or data.")),
    ("--header-rows", "header_rows",
     dict(type=click.IntRange(0, 2), metavar="N", help="Header rows above the data: 0, 1 (names) "
                                                      "or 2 (names, then units).")),
    ("--encoding", "encoding", dict(metavar="NAME", help="Text encoding (default: UTF-8, else Latin-1).")),
    ("--channel", "channels",
     dict(multiple=True, metavar="NAME|N", help="Keep only this channel (name or 1-based position); repeatable.")),
    ("--input", "input_channel", dict(metavar="NAME|N|none",
                                      help="The channel holding the drive (input); none: ignore any drive "
                                           "channel and find the edges in the output.")),
    ("--output", "output_channel", dict(metavar="NAME|N", help="The channel holding the response (output).")),
    ("--drive-frequency", "drive_frequency",
     dict(metavar="HZ", help="The square wave's frequency as set at the generator (e.g. 2k): the time axis is "
                             "scaled so the drive's edges repeat at it (for a file whose time column is wrong).")),
]


def capture_options(command: Callable) -> Callable:
    """Decorate a click command with the capture-reading options."""
    for decl, name, kwargs in reversed(_OPTIONS):
        command = click.option(decl, name, default=None, **kwargs)(command)
    return command


@dataclass(frozen=True)
class CaptureOptions:
    """The reading options as given on the command line (None = let fitkit guess)."""

    sample_interval: str | None = None
    time_origin: str | None = None
    time_column: str | None = None
    time_unit: str | None = None
    value_unit: str | None = None
    vertical_scale: str | None = None
    vertical_offset: str | None = None
    delimiter: str | None = None
    decimal: str | None = None
    skip_rows: int | None = None
    header_rows: int | None = None
    encoding: str | None = None
    channels: tuple[str, ...] = ()
    input_channel: str | None = None
    output_channel: str | None = None
    drive_frequency: str | None = None

    @classmethod
    def pop(cls, kwargs: dict[str, Any]) -> "CaptureOptions":
        """Remove the capture options from a click kwargs dict and return them."""
        values = {name: kwargs.pop(name, None) for _, name, _ in _OPTIONS}
        values["channels"] = tuple(values["channels"] or ())
        return cls(**values)

    def load_kwargs(self) -> dict[str, Any]:
        """Keyword arguments for :func:`fitkit.io.load_capture`."""
        return dict(sample_interval=self.sample_interval, time_origin=self.time_origin,
                    time_column=self.time_column, time_unit=self.time_unit, value_unit=self.value_unit,
                    vertical_scale=self.vertical_scale, vertical_offset=self.vertical_offset,
                    delimiter=_DELIMITERS.get(self.delimiter) if self.delimiter else None,
                    decimal=_DECIMALS.get(self.decimal) if self.decimal else None,
                    skip_rows=self.skip_rows, header_rows=self.header_rows, encoding=self.encoding,
                    channels=list(self.channels) or None)

    def validate(self) -> None:
        """Refuse impossible reading options (OptionError: exit status 2) before any file is read."""
        from ..io import check_read_options, checked_numbers
        kw = self.load_kwargs()
        check_read_options(encoding=kw["encoding"], time_unit=kw["time_unit"], value_unit=kw["value_unit"],
                           skip_rows=kw["skip_rows"], header_rows=kw["header_rows"])
        checked_numbers(kw["sample_interval"], kw["time_origin"], kw["vertical_scale"], kw["vertical_offset"])
        for option, value in (("--input", self.input_channel), ("--output", self.output_channel)):
            if value is not None and not value.strip():
                raise OptionError(f"{option} is empty", hint="name a channel or give its 1-based position")

    def load(self, file: str, out_file: str | None = None) -> Capture:
        """Read FILE (and OUT_FILE: then FILE is the input, OUT_FILE the output)."""
        from ..io import load_capture
        capture = load_capture(file, second_path=out_file, **self.load_kwargs())
        if self.drive_frequency is not None:
            from ..conditioning.drive_period import with_drive_frequency
            from ..units import parse_value
            try:
                frequency = parse_value(self.drive_frequency, "Hz")
            except OptionError as exc:
                raise OptionError(f"--drive-frequency: {exc.message}", hint=exc.hint) from None
            capture = with_drive_frequency(capture, frequency)
        return capture

    def roles(self, capture: Capture) -> tuple[str | None, str]:
        """(input channel name or None, output channel name) for this capture."""
        return channel_roles(capture, self.input_channel, self.output_channel)


def channel_roles(capture: Capture, input_channel: str | int | None = None,
                  output_channel: str | int | None = None) -> tuple[str | None, str]:
    """(input channel name or None, output channel name), decided by the library
    from the user's names and the data (fitkit.conditioning.roles.assign_roles).
    The input is returned as "none" when the user said there is none, so that the
    fit does not choose one again."""
    from ..conditioning.roles import NO_INPUT, assign_roles
    roles = assign_roles(capture, input_channel, output_channel)
    if roles.input is None:
        no_input = isinstance(input_channel, str) and input_channel.strip().lower() == NO_INPUT
        return (NO_INPUT if no_input else None), roles.output.name
    return roles.input.name, roles.output.name


def load_kwargs_from(kwargs: dict[str, Any]) -> dict[str, Any]:
    """Take the capture options out of a click kwargs dict and return the keyword
    arguments of :func:`fitkit.io.load_capture` (shortcut for CaptureOptions.pop(...).load_kwargs())."""
    return CaptureOptions.pop(kwargs).load_kwargs()
