"""The line's trends from the store: per design and per quantity or part, every chart and index.

    frame = store.values_frame()                 # fitkit.line_store
    trends = line_trends(frame, ChartSettings())  # list[QuantityTrend]

One value per board enters the charts: a board's first capture (its repeats
feed the repeatability check instead). Boards are in capture-time order. A
board is a serial number; a capture without one counts as its own board.
Only values the capture determined (with a 95 % interval) are used.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any

import numpy as np

from .capability import (Capability, Projection, Repeatability, capability, projection, repeatability,
                         standard_uncertainty)
from .phases import ChartSettings, Phase, watch

MEASURED_STATUSES = ("fitted", "pass", "inconclusive", "fail")
#: Boards at the end of the series for the current capability and the projection.
DEFAULT_WINDOW = 50
#: Fewest boards for a quantity to be reported.
MIN_BOARDS = 5


@dataclass(frozen=True)
class QuantityTrend:
    """One quantity (or part) of one design across the line's boards.

    values, serials, times (ISO text), fixtures: one entry per board, in order;
    limit_low, limit_high: the design's acceptance range (None when it has none);
    phases: see fitkit.trends.phases; capability_all / capability_recent: Cpk and Ppk
    over every board / the last ``window`` boards; projection over the last ``window``.
    """

    design: str
    kind: str
    name: str
    unit: str
    values: np.ndarray = field(repr=False)
    serials: tuple[str, ...] = field(repr=False)
    times: tuple[str | None, ...] = field(repr=False)
    fixtures: tuple[str, ...] = field(repr=False)
    limit_low: float | None
    limit_high: float | None
    nominal: float | None
    phases: tuple[Phase, ...]
    capability_all: Capability | None
    capability_recent: Capability | None
    projection: Projection | None
    repeatability: Repeatability | None
    window: int
    settings: ChartSettings

    @property
    def detections(self) -> list[dict[str, Any]]:
        """Every drift found: board index, serial, time, methods, direction."""
        out = []
        for phase in self.phases:
            d = phase.detection
            if d is not None:
                out.append({"board_index": d.index, "serial": self.serials[d.index], "time": self.times[d.index],
                            "methods": list(d.methods), "direction": d.direction})
        return out

    @property
    def first_detection(self) -> dict[str, Any] | None:
        found = self.detections
        return found[0] if found else None

    def to_dict(self, series: bool = True) -> dict[str, Any]:
        d: dict[str, Any] = {
            "design": self.design, "kind": self.kind, "name": self.name, "unit": self.unit,
            "boards": len(self.values), "limits": [self.limit_low, self.limit_high], "nominal": self.nominal,
            "settings": self.settings.to_dict(), "window": self.window,
            "phases": [p.to_dict() for p in self.phases], "detections": self.detections,
            "first_detection": self.first_detection,
            "capability_all": None if self.capability_all is None else self.capability_all.to_dict(),
            "capability_recent": None if self.capability_recent is None else self.capability_recent.to_dict(),
            "projection": None if self.projection is None else self.projection.to_dict(),
            "repeatability": None if self.repeatability is None else self.repeatability.to_dict(),
        }
        if series:
            d["series"] = {"serial": list(self.serials), "time": list(self.times), "fixture": list(self.fixtures),
                           "value": [float(v) for v in self.values]}
        return d


def _last_number(column) -> float | None:
    present = column.dropna()
    return float(present.iloc[-1]) if len(present) else None


def _hours(times) -> np.ndarray | None:
    import pandas as pd
    stamps = pd.to_datetime(pd.Series(list(times)), errors="coerce")
    if stamps.isna().any():
        return None
    return ((stamps - stamps.iloc[0]).dt.total_seconds() / 3600.0).to_numpy()


def _board_key(rows):
    """A board key per row: its serial, or the capture's own id when it has none."""
    return [s if isinstance(s, str) and s else f"capture {cid}"
            for s, cid in zip(rows["board_serial"], rows["capture_id"])]


def quantity_trend(design: str, rows, settings: ChartSettings, window: int = DEFAULT_WINDOW
                   ) -> QuantityTrend | None:
    """The trend of one quantity from its rows of the store's values frame (None: too few boards)."""
    rows = rows.sort_values(["captured_at", "capture_id"], kind="stable").copy()
    rows["board"] = _board_key(rows)
    firsts = rows.drop_duplicates("board", keep="first")
    if len(firsts) < MIN_BOARDS:
        return None
    values = firsts["value"].to_numpy(float)
    times = tuple(None if t is None or t != t else str(t) for t in firsts["captured_at"])
    low, high = _last_number(rows["limit_low"]), _last_number(rows["limit_high"])
    recent = values[-window:]
    hours = _hours(times[-window:])
    groups = [(g["value"].to_numpy(float), standard_uncertainty(g["ci_low"], g["ci_high"]))
              for _, g in rows.groupby("board", sort=False) if len(g) > 1]
    return QuantityTrend(
        design=design, kind=str(rows["kind"].iloc[0]), name=str(rows["name"].iloc[0]),
        unit=str(rows["unit"].iloc[0] or ""), values=values, serials=tuple(firsts["board"]), times=times,
        fixtures=tuple(str(f) for f in firsts["fixture"]), limit_low=low, limit_high=high,
        nominal=_last_number(rows["nominal"]),
        phases=tuple(watch(values, list(firsts["fixture"]), settings)),
        capability_all=capability(values, low, high), capability_recent=capability(recent, low, high),
        projection=projection(recent, hours, low, high), repeatability=repeatability(groups),
        window=window, settings=settings)


def line_trends(frame, settings: ChartSettings = ChartSettings(), *, window: int = DEFAULT_WINDOW,
                quantities: list[str] | None = None, design: str | None = None) -> list[QuantityTrend]:
    """Every quantity's trend, per design (see the module docstring).

    frame: LineStore.values_frame(); quantities: only these names (None: all);
    design: only this design's name.
    """
    usable = frame[frame["status"].isin(MEASURED_STATUSES) & frame["determined"].astype(bool)
                   & frame["value"].notna() & frame["ci_low"].notna() & frame["ci_high"].notna()]
    usable = usable.assign(design_label=[d if isinstance(d, str) and d else f"no design ({a})"
                                         for d, a in zip(usable["design_name"], usable["analysis"])])
    if design is not None:
        usable = usable[usable["design_label"] == design]
    if quantities:
        usable = usable[usable["name"].isin(quantities)]
    trends = []
    kind_order = {"part": 0, "component": 1, "quantity": 2}
    for (label, kind, name), rows in sorted(usable.groupby(["design_label", "kind", "name"]),
                                            key=lambda item: (item[0][0], kind_order.get(item[0][1], 9),
                                                              item[0][2])):
        trend = quantity_trend(label, rows, settings, window)
        if trend is not None:
            trends.append(trend)
    return trends
