"""Captures made of two files, one per channel: the naming rule a batch pairs them by.

Some instruments write each channel to its own file. In a batch, two files in
one folder named ``NAME_input.EXT`` and ``NAME_output.EXT`` (the same NAME and
extension; "input" and "output" in any letter case) are one capture: the input
(drive) and the output (response), read together as ``fitkit fit
NAME_input.EXT NAME_output.EXT`` reads them. Such a capture is named by both
files joined by :data:`PAIR_SEPARATOR` ("board_7_input.csv + board_7_output.csv")
in the batch's summary, results and store.
"""

from __future__ import annotations

import os
import re
from pathlib import Path
from typing import Sequence

#: Joins the two files of a paired capture into its one name.
PAIR_SEPARATOR = " + "

_ROLE = re.compile(r"^(?P<name>.+)_(?P<role>input|output)$", re.IGNORECASE)


def pair_name(input_path: str, output_path: str) -> str:
    """The one name of a capture held in two files."""
    return f"{input_path}{PAIR_SEPARATOR}{output_path}"


def pair_parts(name: str) -> tuple[str, str] | None:
    """(input file, output file) of a paired capture's name; None for a single file
    (also for a file whose own name holds the separator)."""
    if PAIR_SEPARATOR not in name or os.path.exists(name):
        return None
    first, _, second = name.partition(PAIR_SEPARATOR)
    return (first, second) if first and second else None


def capture_files(name: str) -> tuple[str, ...]:
    """The file(s) a capture's name stands for: one, or the input and output of a pair."""
    return pair_parts(name) or (name,)


def _role_key(path: str) -> tuple[str, str, str] | None:
    """(folder, NAME, extension) and role of a NAME_input/NAME_output file, else None."""
    p = Path(path)
    m = _ROLE.match(p.stem)
    if m is None:
        return None
    return (str(p.parent), m.group("name"), p.suffix.lower()), m.group("role").lower()


def paired(paths: Sequence[str]) -> list[str]:
    """``paths`` with each NAME_input/NAME_output pair replaced by its one pair name, at the
    place of the first of the two; every other path unchanged, in order. A role file
    without its partner stays a capture of its own (its check will say what is missing)."""
    roles: dict[tuple[str, str, str], dict[str, str]] = {}
    for path in paths:
        found = _role_key(path)
        if found is not None:
            key, role = found
            roles.setdefault(key, {}).setdefault(role, path)
    out: list[str] = []
    placed: set[tuple[str, str, str]] = set()
    for path in paths:
        found = _role_key(path)
        if found is None:
            out.append(path)
            continue
        key, role = found
        pair = roles[key]
        if "input" not in pair or "output" not in pair or pair[role] != path:
            out.append(path)
        elif key not in placed:
            placed.add(key)
            out.append(pair_name(pair["input"], pair["output"]))
    return out
