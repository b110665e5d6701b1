"""Preferred values of resistors and capacitors: the IEC 60063 E series.

Source of the tables: IEC 60063:2015, "Preferred number series for resistors
and capacitors" (E3 to E192). Each series lists the significant figures of one
decade: two figures for E3 to E24 (10 .. 91), three for E48 to E192 (100 ..
988). A preferred value is a table entry times a power of ten.

``nearest_preferred(value, "E24")`` returns the preferred value nearest to
``value`` (smallest absolute difference) and how far the value sits from it,
relative to the preferred value: (value - preferred) / preferred.
"""

from __future__ import annotations

import bisect
import math
from dataclasses import dataclass
from typing import Any

from ..errors import CircuitError

#: Significant figures of each series over one decade (IEC 60063:2015).
SERIES: dict[str, tuple[int, ...]] = {
    "E3": (
        10, 22, 47,
    ),
    "E6": (
        10, 15, 22, 33, 47, 68,
    ),
    "E12": (
        10, 12, 15, 18, 22, 27, 33, 39, 47, 56, 68, 82,
    ),
    "E24": (
        10, 11, 12, 13, 15, 16, 18, 20, 22, 24, 27, 30, 33, 36, 39, 43, 47, 51, 56, 62, 68, 75,
        82, 91,
    ),
    "E48": (
        100, 105, 110, 115, 121, 127, 133, 140, 147, 154, 162, 169, 178, 187, 196, 205, 215,
        226, 237, 249, 261, 274, 287, 301, 316, 332, 348, 365, 383, 402, 422, 442, 464, 487,
        511, 536, 562, 590, 619, 649, 681, 715, 750, 787, 825, 866, 909, 953,
    ),
    "E96": (
        100, 102, 105, 107, 110, 113, 115, 118, 121, 124, 127, 130, 133, 137, 140, 143, 147,
        150, 154, 158, 162, 165, 169, 174, 178, 182, 187, 191, 196, 200, 205, 210, 215, 221,
        226, 232, 237, 243, 249, 255, 261, 267, 274, 280, 287, 294, 301, 309, 316, 324, 332,
        340, 348, 357, 365, 374, 383, 392, 402, 412, 422, 432, 442, 453, 464, 475, 487, 499,
        511, 523, 536, 549, 562, 576, 590, 604, 619, 634, 649, 665, 681, 698, 715, 732, 750,
        768, 787, 806, 825, 845, 866, 887, 909, 931, 953, 976,
    ),
    "E192": (
        100, 101, 102, 104, 105, 106, 107, 109, 110, 111, 113, 114, 115, 117, 118, 120, 121,
        123, 124, 126, 127, 129, 130, 132, 133, 135, 137, 138, 140, 142, 143, 145, 147, 149,
        150, 152, 154, 156, 158, 160, 162, 164, 165, 167, 169, 172, 174, 176, 178, 180, 182,
        184, 187, 189, 191, 193, 196, 198, 200, 203, 205, 208, 210, 213, 215, 218, 221, 223,
        226, 229, 232, 234, 237, 240, 243, 246, 249, 252, 255, 258, 261, 264, 267, 271, 274,
        277, 280, 284, 287, 291, 294, 298, 301, 305, 309, 312, 316, 320, 324, 328, 332, 336,
        340, 344, 348, 352, 357, 361, 365, 370, 374, 379, 383, 388, 392, 397, 402, 407, 412,
        417, 422, 427, 432, 437, 442, 448, 453, 459, 464, 470, 475, 481, 487, 493, 499, 505,
        511, 517, 523, 530, 536, 542, 549, 556, 562, 569, 576, 583, 590, 597, 604, 612, 619,
        626, 634, 642, 649, 657, 665, 673, 681, 690, 698, 706, 715, 723, 732, 741, 750, 759,
        768, 777, 787, 796, 806, 816, 825, 835, 845, 856, 866, 876, 887, 898, 909, 920, 931,
        942, 953, 965, 976, 988,
    ),
}


def _series(name: str) -> tuple[int, ...]:
    key = name.strip().upper()
    if key not in SERIES:
        raise CircuitError(f"unknown preferred-value series {name!r}",
                           hint="use one of " + ", ".join(SERIES))
    return SERIES[key]


def _check(value: float) -> float:
    value = float(value)
    if not (math.isfinite(value) and value > 0):
        raise CircuitError(f"no preferred value for {value!r}: it must be a positive finite number",
                           hint="solve the part first, or check its value")
    return value


def candidates_around(value: float, series: str = "E24") -> list[float]:
    """Preferred values of ``series`` in the decades around ``value``, ascending (SI units)."""
    value = _check(value)
    figures = _series(series)
    digits = len(str(figures[0]))                 # 2 for E3..E24, 3 for E48..E192
    decade = math.floor(math.log10(value)) - (digits - 1)
    out = []
    for d in (decade - 1, decade, decade + 1):
        out.extend(f * 10.0 ** d if d >= 0 else f / 10.0 ** -d for f in figures)
    return out


def preferred_neighbours(value: float, series: str = "E24") -> tuple[float, float]:
    """The preferred values just below (or equal to) and just above (or equal to) ``value``."""
    values = candidates_around(value, series)
    i = bisect.bisect_left(values, value)
    below = values[i - 1] if i > 0 else values[0]
    above = values[i] if i < len(values) else values[-1]
    # A value equal (to rounding) to a preferred value is its own neighbour on both sides.
    for v in (below, above):
        if math.isclose(v, value, rel_tol=1e-12):
            return v, v
    return below, above


def nearest_preferred(value: float, series: str = "E24") -> tuple[float, float]:
    """(preferred value nearest to ``value``, relative deviation (value - preferred) / preferred).

    Nearest means the smallest absolute difference. SI units in and out.
    """
    below, above = preferred_neighbours(value, series)
    best = below if abs(value - below) <= abs(above - value) else above
    return best, (value - best) / best


@dataclass(frozen=True)
class PreferredValue:
    """A solved value placed among the preferred values of one series (SI units)."""

    value: float
    series: str
    nearest: float
    deviation: float
    below: float
    above: float

    def to_dict(self) -> dict[str, Any]:
        return {"value": self.value, "series": self.series, "nearest": self.nearest,
                "relative_deviation": self.deviation, "below": self.below, "above": self.above}


def place_among_preferred(value: float, series: str = "E24") -> PreferredValue:
    """Nearest preferred value, its deviation and the neighbours below and above."""
    nearest, dev = nearest_preferred(value, series)
    below, above = preferred_neighbours(value, series)
    return PreferredValue(float(value), series.strip().upper(), nearest, dev, below, above)
