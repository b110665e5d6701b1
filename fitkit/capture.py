"""Capture: one oscilloscope or data-logger record, in SI units.

A Capture is what every reader produces and everything downstream consumes:
a time axis in seconds, one or more named channels (values in SI units, volts
for voltage channels), the metadata found in the source's header, and
provenance: which file, where its data started, and what the reader decided
about its layout. Captures are immutable; operations return new ones.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any, Iterable, Mapping

import numpy as np

from .errors import CaptureError


@dataclass(frozen=True)
class Channel:
    """One recorded signal.

    Attributes
    ----------
    name: the channel's name as found in the file (or given by the user).
    values: samples in SI units (volts for voltage channels), float64.
    unit: SI unit of ``values`` ("V", "A", or "" when the file gave none).
    source_unit: the unit as written in the file ("mV", "counts", ...).
    """

    name: str
    values: np.ndarray
    unit: str = "V"
    source_unit: str = ""

    def __post_init__(self) -> None:
        arr = np.asarray(self.values, dtype=float)
        arr.setflags(write=False)
        object.__setattr__(self, "values", arr)


@dataclass(frozen=True)
class Provenance:
    """Where a capture came from and what the reader decided.

    Attributes
    ----------
    path: the source file(s), as given by the user; "" for in-memory captures.
    data_start_line: 1-based line of the first data row in a text file, or None.
    layout: short plain-words name of the layout the reader recognised.
    decisions: human-readable notes on each decision (delimiter, decimal mark,
        units, time axis source), so ``fitkit inspect`` can show them.
    """

    path: str = ""
    data_start_line: int | None = None
    layout: str = "arrays"
    decisions: tuple[str, ...] = ()


@dataclass(frozen=True)
class Capture:
    """A time axis in seconds and named channels, with metadata and provenance.

    Build from arrays with :meth:`Capture.from_arrays`; readers in
    :mod:`fitkit.io` build them from files.
    """

    time: np.ndarray
    channels: tuple[Channel, ...]
    metadata: Mapping[str, str] = field(default_factory=dict)
    provenance: Provenance = field(default_factory=Provenance)
    warnings: tuple[str, ...] = ()

    def __post_init__(self) -> None:
        try:
            t = np.asarray(self.time, dtype=float)
        except (TypeError, ValueError):
            raise CaptureError("the time axis must be an array of numbers (seconds)",
                               path=self.provenance.path or None) from None
        if t.ndim != 1:
            raise CaptureError(f"the time axis must be one-dimensional, got an array of shape {t.shape}",
                               path=self.provenance.path or None)
        t.setflags(write=False)
        object.__setattr__(self, "time", t)
        object.__setattr__(self, "metadata", dict(self.metadata))
        if not self.channels:
            raise CaptureError("capture has no data channels", path=self.provenance.path or None)
        for ch in self.channels:
            if ch.values.shape != t.shape:
                raise CaptureError(
                    f"channel {ch.name!r} has {ch.values.size} samples but the time axis has {t.size}",
                    path=self.provenance.path or None)
        names = [ch.name for ch in self.channels]
        if len(set(names)) != len(names):
            raise CaptureError(f"duplicate channel names {names}", path=self.provenance.path or None)

    # -- construction -----------------------------------------------------
    @classmethod
    def from_arrays(cls, time: Iterable[float], channels: Mapping[str, Iterable[float]] | Iterable[float],
                    *, units: Mapping[str, str] | None = None, metadata: Mapping[str, str] | None = None,
                    path: str = "", layout: str = "arrays",
                    decisions: Iterable[str] = (), warnings: Iterable[str] = ()) -> "Capture":
        """Build a capture from a time array (seconds) and channel arrays (SI units).

        ``channels`` is a mapping name -> values, or a single array (named "ch1").
        ``units`` maps channel names to SI units (default "V").
        """
        if not isinstance(channels, Mapping):
            channels = {"ch1": channels}
        units = dict(units or {})
        chans = tuple(Channel(str(name), np.asarray(vals, dtype=float), units.get(name, "V"))
                      for name, vals in channels.items())
        return cls(time=np.asarray(time, dtype=float), channels=chans, metadata=dict(metadata or {}),
                   provenance=Provenance(path=path, layout=layout, decisions=tuple(decisions)),
                   warnings=tuple(warnings))

    # -- access -------------------------------------------------------------
    @property
    def channel_names(self) -> tuple[str, ...]:
        return tuple(ch.name for ch in self.channels)

    def channel(self, key: str | int) -> Channel:
        """Return a channel by name, by 1-based position ("1", 1) or by a
        case-insensitive name match. Raises CaptureError listing the channels."""
        names = self.channel_names
        if not isinstance(key, (str, int)) or isinstance(key, bool):
            raise CaptureError(f"a channel is named by text or a 1-based position, not {type(key).__name__}",
                               path=self.provenance.path or None)
        if isinstance(key, str):  # a name first: some exports name channels "1", "2", ...
            for ch in self.channels:
                if ch.name == key:
                    return ch
            for ch in self.channels:
                if ch.name.lower() == key.strip().lower():
                    return ch
        if isinstance(key, int) or key.strip().isdigit():
            idx = int(key)
            if 1 <= idx <= len(names):
                return self.channels[idx - 1]
        raise CaptureError(f"no channel {key!r}; channels found: {', '.join(names)}",
                           path=self.provenance.path or None,
                           hint="name a channel by its name or its 1-based position")

    @property
    def n_points(self) -> int:
        return int(self.time.size)

    @property
    def sample_interval(self) -> float:
        """Median sample interval in seconds (NaN for fewer than two points)."""
        if self.time.size < 2:
            return float("nan")
        return float(np.median(np.diff(self.time)))

    @property
    def duration(self) -> float:
        """Time from first to last sample, in seconds."""
        return float(self.time[-1] - self.time[0]) if self.time.size else 0.0

    def with_channels(self, names: Iterable[str | int]) -> "Capture":
        """A capture holding only the named channels, in the given order."""
        chans = tuple(self.channel(n) for n in names)
        return Capture(self.time, chans, self.metadata, self.provenance, self.warnings)

    def with_time(self, time: Iterable[float], warning: str) -> "Capture":
        """The same channels on another time axis (s, same length), with a warning saying why."""
        return Capture(np.asarray(time, dtype=float), self.channels, self.metadata, self.provenance,
                       self.warnings + (warning,))

    def with_decisions(self, extra: Iterable[str]) -> "Capture":
        """The capture with further plain-words decisions in its provenance."""
        from dataclasses import replace
        return Capture(self.time, self.channels, self.metadata,
                       replace(self.provenance, decisions=self.provenance.decisions + tuple(extra)),
                       self.warnings)

    def to_dict(self, include_data: bool = False) -> dict[str, Any]:
        """Summary as plain JSON-ready types (arrays only when ``include_data``)."""
        d: dict[str, Any] = {
            "file": self.provenance.path,
            "layout": self.provenance.layout,
            "data_start_line": self.provenance.data_start_line,
            "decisions": list(self.provenance.decisions),
            "n_points": self.n_points,
            "sample_interval": self.sample_interval,
            "duration": self.duration,
            "channels": [{"name": ch.name, "unit": ch.unit, "source_unit": ch.source_unit,
                          "min": float(np.min(ch.values)) if ch.values.size else None,
                          "max": float(np.max(ch.values)) if ch.values.size else None}
                         for ch in self.channels],
            "metadata": dict(self.metadata),
            "warnings": list(self.warnings),
        }
        if include_data:
            d["time"] = self.time.tolist()
            for ch in self.channels:
                d.setdefault("data", {})[ch.name] = ch.values.tolist()
        return d
