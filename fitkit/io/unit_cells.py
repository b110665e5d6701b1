"""Header cells that name a unit: one home for the words and the test, shared by the
sniffer (sniff.py, counting header rows) and the layout reader (layouts.py)."""

from __future__ import annotations

from ..units import BASE_UNITS, unit_scale

INDEX_WORDS = {"sequence", "index", "idx", "sample", "samples", "no", "no.", "n", "#", "point",
               "points", "sample number", "sample no", "sample index", "number"}
COUNT_WORDS = {"counts", "count", "adc", "codes", "code", "lsb", "raw", "adc counts", "digits"}
SI_BASES = set(BASE_UNITS.values())


def clean_unit(unit: str) -> str:
    """A unit cell without brackets, with the spellings of volts and seconds made SI."""
    u = unit.strip().strip("()[]").strip()
    if u.lower() in ("volt", "volts", "v"):
        return "V"
    if u.lower() in ("sec", "secs", "second", "seconds") or u == "S":
        return "s"
    return u.replace("μ", "µ")


def looks_like_unit(cell: str) -> bool:
    """True for a cell of a units row: '(ms)', '[V]', 'mV', 'Volt', 'Sequence', 'counts'."""
    c = cell.strip()
    if not c:
        return True
    bare = clean_unit(c)
    if bare.lower() in INDEX_WORDS | COUNT_WORDS or bare in ("%", "dB", "dBV"):
        return True
    factor, si = unit_scale(bare)
    return si in SI_BASES


