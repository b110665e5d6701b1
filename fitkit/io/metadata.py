"""Header metadata of text captures: key/value pairs and the settings they carry.

Bench exports write their settings as ``key,value[,unit]`` rows, ``# key: value``
comments, or key/value cells beside the data. This module collects them into
an ordered dict of strings and looks up the few settings fitkit needs: the
sample interval (or rate), the time of the first sample, the trigger sample,
the record length and the counts-to-volts conversion. Values come back in SI
units (seconds, volts).
"""

from __future__ import annotations

import re
from typing import Iterable, Mapping

from ..errors import OptionError
from ..units import parse_value, unit_scale

_KEY_UNIT = re.compile(r"^(.*?)\s*[\(\[]\s*([^\)\]]*)\s*[\)\]]\s*$")


def parse_metadata_lines(lines: Iterable[str], delimiter: str) -> dict[str, str]:
    """Key/value pairs from header lines; free text is kept as ``note N``.

    Accepts ``# key: value``, ``key = value``, ``key<delim>value[<delim>unit]``.
    """
    meta: dict[str, str] = {}
    notes = 0
    for raw in lines:
        text = raw.strip().lstrip("#/%").strip()
        if not text:
            continue
        key = value = None
        if delimiter != " " and delimiter in text:
            first = text.split(delimiter, 1)[0]
            if ":" not in first and "=" not in first:
                parts = [p.strip().strip('"') for p in text.split(delimiter)]
                parts = [p for p in parts if p]
                if len(parts) >= 2:
                    key, value = parts[0], " ".join(parts[1:3])
        if key is None:
            m = re.match(r"^([^:=]+?)\s*[:=]\s*(.*)$", text)
            if m:
                key, value = m.group(1), m.group(2)
        if key is None or not key.strip():
            notes += 1
            meta[f"note {notes}"] = text
            continue
        value = value.strip().strip(delimiter).strip().strip('"')
        if delimiter != " " and delimiter in value:
            value = " ".join(p.strip() for p in value.split(delimiter) if p.strip())
        meta[key.strip().strip('"')] = value
    return meta


def side_metadata(rows: Iterable[tuple[str, ...]]) -> dict[str, str]:
    """Key/value cells printed beside the data: key, value and an optional unit."""
    meta: dict[str, str] = {}
    for cells in rows:
        if len(cells) >= 2:
            meta[cells[0]] = " ".join(cells[1:3])
        elif len(cells) == 1:
            meta.setdefault(f"note {len(meta) + 1}", cells[0])
    return meta


def normal_key(key: str) -> tuple[str, str]:
    """(normalised key, unit written in brackets in the key): 'Sample Interval (us)' -> ('sample interval', 'us')."""
    unit = ""
    m = _KEY_UNIT.match(key.strip())
    if m:
        key, unit = m.group(1), m.group(2)
    norm = re.sub(r"[^0-9a-zµ]+", " ", key.lower()).strip()
    return norm, unit


INTERVAL_KEYS = ("sample interval", "sampling interval", "sample period", "sampling period",
                 "increment", "x increment", "xincrement", "time increment", "dt", "delta t",
                 "time per sample", "time step", "sample time", "horizontal interval",
                 "seconds per sample", "time interval")
RATE_KEYS = ("sample rate", "sampling rate", "sample frequency", "sampling frequency",
             "samples per second", "fs", "sample rate hz")
ORIGIN_KEYS = ("start", "start time", "t0", "x origin", "xorigin", "time origin", "first time",
               "xstart", "x start", "time of first sample", "time offset")
TRIGGER_KEYS = ("trigger point", "trigger position", "trigger sample", "trigger index",
                "pre trigger samples", "pretrigger samples", "pre trigger", "pretrigger")
LENGTH_KEYS = ("record length", "sample count", "number of samples", "samples", "points",
               "number of points", "n points", "npoints", "length")
SCALE_KEYS = ("volts per count", "v per count", "vertical scale", "scale", "ymult", "y multiplier",
              "lsb", "lsb size", "volts per code", "v per code", "vertical gain", "gain",
              "count scale", "conversion factor")
OFFSET_KEYS = ("vertical offset", "offset", "yzero", "y zero", "volt offset", "offset volts")
#: A one-channel file's channel name and value unit written in its settings ("Source", "Channel";
#: "Vertical Units", "Value unit").
CHANNEL_NAME_KEYS = ("source", "channel", "channel name", "trace")
VALUE_UNIT_KEYS = ("vertical units", "vertical unit", "value unit", "value units", "y unit", "y units")
COUNT_OFFSET_KEYS = ("count offset", "code offset", "yoff", "zero code", "adc offset", "zero count")


def find(meta: Mapping[str, str], keys: tuple[str, ...], prefix: str = "") -> tuple[str, str, str] | None:
    """First metadata entry whose normalised key is ``prefix + one of keys``.

    Returns (original key, value text, unit from the key's brackets) or None.
    """
    wanted = {(prefix + " " + k).strip() for k in keys}
    for key, value in meta.items():
        norm, unit = normal_key(key)
        if norm in wanted:
            return key, value, unit
    return None


def _number_with_unit(value: str, unit: str, base: str) -> float | None:
    text = value.strip().replace("µ", "u").replace("μ", "u")
    text = re.sub(r"(?i)\s*(sa/s|s/s|sps|samples/s|pts/s)$", "Hz" if base == "Hz" else "", text)
    if unit and not re.search(r"[A-Za-z]\s*$", text):
        text = f"{text} {unit}"
    text = text.strip()
    if re.match(r"^[+-]?\d*,\d+", text):  # decimal comma
        text = text.replace(",", ".", 1)
    try:
        return parse_value(text)
    except OptionError:
        m = re.match(r"^\s*([+-]?[\d.]+(?:[eE][+-]?\d+)?)\s*([A-Za-zµ]*)", text)
        if not m:
            return None
        try:
            number = float(m.group(1))
        except ValueError:
            return None
        u = m.group(2)
        factor, si = unit_scale(u) if u else (1.0, "")
        if u and si not in ("s", "Hz", "V") and u.lower() not in ("s", "sec"):
            return None
        return number * factor


def sample_interval(meta: Mapping[str, str]) -> tuple[float, str] | None:
    """(sample interval in seconds, the key it came from), from an interval or a rate."""
    hit = find(meta, INTERVAL_KEYS)
    if hit:
        v = _number_with_unit(hit[1], hit[2], "s")
        if v is not None and v > 0:
            return v, hit[0]
    hit = find(meta, RATE_KEYS)
    if hit:
        v = _number_with_unit(hit[1], hit[2], "Hz")
        if v is not None and v > 0:
            return 1.0 / v, hit[0]
    return None


def nonpositive_interval(meta: Mapping[str, str]) -> tuple[str, str] | None:
    """(key, value as written) of a sample interval or rate the header states as zero or negative."""
    for keys, base in ((INTERVAL_KEYS, "s"), (RATE_KEYS, "Hz")):
        hit = find(meta, keys)
        if hit:
            v = _number_with_unit(hit[1], hit[2], base)
            if v is not None and not v > 0:
                return hit[0], hit[1]
    return None


def time_origin(meta: Mapping[str, str], interval: float | None, n_points: int) -> tuple[float, str] | None:
    """(time of the first sample in seconds, explanation), from a start time or a trigger sample."""
    hit = find(meta, ORIGIN_KEYS)
    if hit:
        v = _number_with_unit(hit[1], hit[2], "s")
        if v is not None:
            return v, f"first sample at {v:.6g} s (from {hit[0]!r})"
    hit = find(meta, TRIGGER_KEYS)
    if hit and interval:
        text = hit[1].strip()
        try:
            if text.endswith("%"):
                k = float(text[:-1]) / 100.0 * n_points
            else:
                k = float(text.split()[0])
        except (ValueError, IndexError):
            return None
        return -k * interval, f"trigger at sample {k:.6g} (from {hit[0]!r}): time zero there"
    return None


def record_length(meta: Mapping[str, str]) -> int | None:
    hit = find(meta, LENGTH_KEYS)
    if not hit:
        return None
    try:
        value = float(hit[1].split()[0])
    except (ValueError, IndexError):
        return None
    return int(value) if value.is_integer() and value > 0 else None


def counts_conversion(meta: Mapping[str, str], channel: str) -> tuple[float, float, float, str] | None:
    """(volts per count, count offset, volt offset, explanation) for raw ADC counts, or None.

    volts = (counts - count offset) * volts per count + volt offset. A scale
    stated per division ("V/div") is a display setting and is not used.
    Keys prefixed with the channel name ("CH1 scale") win over plain ones.
    """
    prefixes = (channel.lower(), "")
    for prefix in prefixes:
        hit = find(meta, SCALE_KEYS, prefix)
        if hit is None:
            continue
        key, value, unit = hit
        if "div" in (key + value + unit).lower():
            continue
        scale = _number_with_unit(value, "", "V")
        if scale is None or scale == 0:
            continue
        unit_factor = {"mv": 1e-3, "uv": 1e-6, "µv": 1e-6}.get(unit.lower().split("/")[0], 1.0)
        scale *= unit_factor
        off = find(meta, OFFSET_KEYS, prefix) or find(meta, OFFSET_KEYS)
        volt_offset = _number_with_unit(off[1], off[2], "V") if off else None
        if off and off[2].lower().startswith("count"):
            volt_offset = (volt_offset or 0.0) * scale
        coff = find(meta, COUNT_OFFSET_KEYS, prefix) or find(meta, COUNT_OFFSET_KEYS)
        count_offset = _number_with_unit(coff[1], "", "V") if coff else None
        note = (f"raw counts converted to volts: (counts - {count_offset or 0:g}) x {scale:.6g} V"
                f" + {volt_offset or 0:g} V (from {key!r}"
                + (f", {off[0]!r}" if off else "") + (f", {coff[0]!r}" if coff else "") + ")")
        return scale, count_offset or 0.0, volt_offset or 0.0, note
    return None
