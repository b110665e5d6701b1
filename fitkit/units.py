"""Engineering notation in and out; SI units inside.

Inside fitkit every number is in plain SI units (seconds, volts, ohms, farads,
henries, hertz). This module converts at the edges:

* ``parse_value("4.7k")`` -> 4700.0, ``parse_value("10nF", "F")`` -> 1e-8,
  ``parse_value("4k7")`` -> 4700.0 (the RKM code printed on parts, IEC 60062).
* ``unit_scale("ms")`` -> (1e-3, "s"): the factor that brings a column unit to SI.
* ``format_value(4.7e-9, "F")`` -> "4.7 nF" (via quantiphy).

Note that "M" is mega (1M = 1e6), as on part values, not milli as in SPICE.
"""

from __future__ import annotations

import math
import re

from .errors import OptionError

# SI prefixes accepted in values and units. "u" and the micro sign both mean 1e-6.
PREFIXES: dict[str, float] = {
    "T": 1e12, "G": 1e9, "M": 1e6, "k": 1e3, "K": 1e3, "": 1.0,
    "m": 1e-3, "u": 1e-6, "µ": 1e-6, "μ": 1e-6, "n": 1e-9, "p": 1e-12, "f": 1e-15,
}

# Base units fitkit understands, with their SI spelling.
BASE_UNITS: dict[str, str] = {
    "s": "s", "sec": "s", "secs": "s", "second": "s", "seconds": "s",
    "V": "V", "v": "V", "volt": "V", "volts": "V",
    "A": "A", "amp": "A", "amps": "A",
    "Ohm": "Ohm", "ohm": "Ohm", "ohms": "Ohm", "Ω": "Ohm", "R": "Ohm",
    "F": "F", "H": "H", "Hz": "Hz", "hz": "Hz",
}

_RKM = re.compile(r"^\s*([0-9]+)([RKMGkmunpµμ])([0-9]+)\s*([A-Za-zΩµμ]*)\s*$")


def parse_value(text: str | float | int, unit: str | None = None) -> float:
    """Parse a value in engineering notation and return it in SI units.

    Accepts plain numbers ("0.001", "1e-3"), SI prefixes ("4.7k", "10n",
    "2.2u", "2.2µ", "1M" = 1e6), an optional unit suffix ("10nF", "4.7 kOhm")
    and the RKM code ("4k7" = 4700, "2n2" = 2.2e-9, "4R7" = 4.7).

    When ``unit`` is given (for example "F"), a unit written in the text must
    match it. Raises OptionError with the offending text when the value cannot
    be read, is not finite, or carries the wrong unit.
    """
    if isinstance(text, (int, float)) and not isinstance(text, bool):
        value = float(text)
        if not math.isfinite(value):
            raise OptionError(f"value {text!r} is not a finite number")
        return value
    raw = str(text).strip()
    if not raw:
        raise OptionError("empty value where a number was expected")
    rkm = _RKM.match(raw)
    if rkm:
        whole, letter, frac, suffix = rkm.groups()
        scale = 1.0 if letter == "R" else PREFIXES[letter]
        exponent = round(math.log10(scale))
        value = float(f"{whole}.{frac}e{exponent}")
        _check_unit(raw, suffix, unit)
        return value
    from quantiphy import Quantity  # imported when used (start-up time of every command)

    try:
        q = Quantity(raw.replace("Ω", "Ohm").replace("μ", "u"))
    except Exception as exc:  # quantiphy raises its own types
        raise OptionError(f"cannot read {raw!r} as a value in engineering notation "
                          "(examples: 4.7k, 10n, 2.2u, 1M)") from exc
    value = float(q)
    if not math.isfinite(value):
        raise OptionError(f"value {raw!r} is not a finite number")
    _check_unit(raw, q.units, unit)
    return value


def _check_unit(raw: str, found: str, expected: str | None) -> None:
    if not found or expected is None:
        return
    canon = BASE_UNITS.get(found, found)
    if canon != BASE_UNITS.get(expected, expected):
        raise OptionError(f"value {raw!r} has unit {found!r} where {expected!r} was expected")


def unit_scale(unit: str) -> tuple[float, str]:
    """Return (factor, SI unit) that converts a column in ``unit`` to SI.

    ``unit_scale("ms")`` -> (1e-3, "s"); ``unit_scale("mV")`` -> (1e-3, "V");
    ``unit_scale("V")`` -> (1.0, "V"). Unknown units come back unchanged with
    factor 1.0 (for example "counts" or "%"), so data is never silently rescaled
    by a guess.
    """
    u = unit.strip().replace("μ", "µ")
    if not u:
        return 1.0, ""
    if u in BASE_UNITS:
        return 1.0, BASE_UNITS[u]
    for prefix in sorted(PREFIXES, key=len, reverse=True):
        if prefix and u.startswith(prefix) and u[len(prefix):] in BASE_UNITS:
            base = BASE_UNITS[u[len(prefix):]]
            if base == "Ohm" and u[len(prefix):] == "R":
                continue
            return PREFIXES[prefix], base
    return 1.0, u


def format_value(value: float | None, unit: str = "", digits: int = 4) -> str:
    """Format an SI value in engineering notation with its unit: 4.7e-9, "F" -> "4.7 nF".

    ``digits`` is the number of significant digits. None and non-finite values
    are shown as "n/a", "inf" or "-inf".
    """
    if value is None:
        return "n/a"
    value = float(value)
    if math.isnan(value):
        return "n/a"
    if math.isinf(value):
        return ("-inf" if value < 0 else "inf") + (f" {unit}" if unit else "")
    if not unit:
        # Dimensionless numbers (Q, zeta, gain) read best without SI prefixes.
        return f"{value:.{digits}g}"
    if unit == "counts":  # raw ADC codes: whole numbers, never "4.095 kcounts"
        whole = len(str(int(abs(value)))) if abs(value) < 1e9 else digits
        return f"{value:.{max(digits, whole)}g} counts"
    from quantiphy import Quantity

    return Quantity(value, unit).render(prec=max(digits - 1, 0), strip_zeros=True)


def format_interval(lo: float | None, hi: float | None, unit: str = "", digits: int = 3) -> str:
    """Format a confidence interval as "[lo unit, hi unit]" in engineering notation."""
    if lo is None or hi is None:
        return "n/a"
    return f"[{format_value(lo, unit, digits)}, {format_value(hi, unit, digits)}]"
