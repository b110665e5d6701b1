"""Settings a capture file does not state, in a small TOML file beside it.

A text file with no header does not say its sample interval; a file of raw
ADC counts may not say its volts per count. Such settings can be written once,
beside the capture, in a file named after it with ``.fitkit.toml`` appended
(``board_17.txt`` -> ``board_17.txt.fitkit.toml``)::

    # what board_17.txt does not say
    sample_interval = "1u"     # seconds: a number, or text with an SI prefix
    time_origin = "-500u"      # time of the first sample

Every command that reads the capture (inspect, fit, check, batch) uses it; an
option given on the command line (or an argument of ``load_capture``) takes
precedence over the same setting beside the file. The keys are the reading
options of ``load_capture``: see :data:`SETTINGS`. The capture's decisions
name the sidecar and each setting taken from it.
"""

from __future__ import annotations

import tomllib
from pathlib import Path
from typing import Any

from ..errors import CaptureError

#: What a sidecar file's name adds to the capture's file name.
SIDECAR_SUFFIX = ".fitkit.toml"

#: Keys a sidecar may hold -> the value types it may have (each as load_capture takes it).
SETTINGS: dict[str, tuple[type, ...]] = {
    "sample_interval": (str, int, float), "time_origin": (str, int, float),
    "time_column": (str, int), "time_unit": (str,), "value_unit": (str,),
    "vertical_scale": (str, int, float), "vertical_offset": (str, int, float),
    "delimiter": (str,), "decimal": (str,), "skip_rows": (int,), "header_rows": (int,),
    "encoding": (str,),
}
#: Delimiters as a sidecar may name them (as the command-line option does).
_DELIMITERS = {"comma": ",", "semicolon": ";", "tab": "\t", "space": " ", "whitespace": " "}
_DECIMALS = {"point": ".", "comma": ","}


def sidecar_path(capture_path: str | Path) -> Path:
    """The sidecar file of a capture: its name with ``.fitkit.toml`` appended."""
    path = Path(capture_path)
    return path.with_name(path.name + SIDECAR_SUFFIX)


def sidecar_settings(capture_path: str | Path) -> tuple[dict[str, Any], Path | None]:
    """(settings, sidecar path) for a capture; ({}, None) when it has no sidecar.

    Raises CaptureError naming the sidecar for a file that is not TOML, an
    unknown key or a value of the wrong kind.
    """
    side = sidecar_path(capture_path)
    if not side.is_file():
        return {}, None
    try:
        table = tomllib.loads(side.read_text(encoding="utf-8"))
    except (OSError, UnicodeDecodeError, tomllib.TOMLDecodeError) as err:
        raise CaptureError(f"the settings beside the capture cannot be read: {err}", path=str(side),
                           hint="write it as TOML, e.g. sample_interval = \"1u\"") from None
    settings: dict[str, Any] = {}
    for key, value in table.items():
        kinds = SETTINGS.get(key)
        if kinds is None:
            raise CaptureError(f"unknown setting {key!r}", path=str(side),
                               hint="the settings a capture's sidecar may give are " + ", ".join(SETTINGS))
        if isinstance(value, bool) or not isinstance(value, kinds):
            want = " or ".join({str: "text", int: "a whole number", float: "a number"}[k] for k in kinds)
            raise CaptureError(f"setting {key} = {value!r} must be {want}", path=str(side),
                               hint=f'e.g. {key} = "1u"' if str in kinds else f"e.g. {key} = 1")
        if key == "delimiter":
            value = _DELIMITERS.get(value, value)
        if key == "decimal":
            value = _DECIMALS.get(value, value)
        settings[key] = value
    _check_values(settings, side)
    return settings, side


def _check_values(settings: dict[str, Any], side: Path) -> None:
    """The checks load_capture makes of its options, made of the sidecar's values, so an
    error names the sidecar and its key rather than a command-line option not given."""
    from . import check_read_options, checked_numbers
    from ..errors import OptionError
    try:
        check_read_options(encoding=settings.get("encoding"), time_unit=settings.get("time_unit"),
                           value_unit=settings.get("value_unit"), skip_rows=settings.get("skip_rows"),
                           header_rows=settings.get("header_rows"), delimiter=settings.get("delimiter"),
                           time_column=settings.get("time_column"))
        checked_numbers(settings.get("sample_interval"), settings.get("time_origin"),
                        settings.get("vertical_scale"), settings.get("vertical_offset"))
    except OptionError as err:
        message = err.message
        for key in SETTINGS:
            message = message.replace("--" + key.replace("_", "-"), key)
        raise CaptureError(message, path=str(side), hint=err.hint) from None


def with_sidecar(capture_path: str | Path, given: dict[str, Any]) -> tuple[dict[str, Any], list[str]]:
    """The reading options for one file: ``given`` (non-None values win) over its
    sidecar's settings; and the decisions to record (which settings came from where)."""
    settings, side = sidecar_settings(capture_path)
    if side is None:
        return dict(given), []
    merged = dict(given)
    used = []
    for key, value in settings.items():
        if merged.get(key) is None:
            merged[key] = value
            used.append(f"{key} = {value!r}")
    overridden = [k for k in settings if given.get(k) is not None]
    notes = []
    if used:
        notes.append(f"settings from {side.name} beside the file: " + ", ".join(used))
    if overridden:
        notes.append(f"{', '.join(overridden)} from {side.name} overridden by the option given")
    return merged, notes
