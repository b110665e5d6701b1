"""Helpers for the line-store tests: synthetic store entries, no fitting needed."""

from __future__ import annotations

import datetime as dt
import hashlib

from fitkit.line_store import CaptureFacts, StoredCapture, StoredValue

START = dt.datetime(2026, 11, 23, 6, 0, 0)


def entry(i: int, value: float = 100e-9, *, serial: str | None = None, repeat: int = 0, fixture: str = "bench 2",
          design_sha: str = "d" * 64) -> StoredCapture:
    """A checked capture of board i (C22 = value, f0 alongside), unique per (i, repeat)."""
    digest = hashlib.sha256(f"capture {i} {repeat}".encode()).hexdigest()
    facts = CaptureFacts(f"board_{10000 + i}_{repeat}.csv", digest, serial or str(10000 + i), "file name",
                         START + dt.timedelta(minutes=10 * i + repeat), "header field Date", fixture)
    values = (StoredValue("part", "C22", value, value * 0.995, value * 1.005, "F", True, 95e-9, 105e-9, 100e-9,
                          "within"),
              StoredValue("quantity", "f0", 159.2, 158.0, 160.4, "Hz", True, 149.8, 169.0, 159.2, "within"))
    return StoredCapture(facts=facts, analysis=f"design {design_sha}", design_name="demo ladder",
                         design_sha256=design_sha, status="pass", verdict="pass", model="two-real-pole",
                         reason="", warnings=("a warning",), values=values)


def append_range(url: str, first: int, last: int, chunk: int = 5) -> int:
    """Open the store at url and append entries first..last-1 in transactions of ``chunk`` (for subprocesses)."""
    from fitkit.line_store import open_store
    added = 0
    with open_store(url) as store:
        for start in range(first, last, chunk):
            added += store.append([entry(i) for i in range(start, min(last, start + chunk))])
    return added
