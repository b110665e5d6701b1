"""Expand the paths a user gives (files, folders, glob patterns) into batch inputs.

Every name the user gives is accounted for:

* a file named directly is one input, whatever its extension;
* a folder contributes every capture file inside it (recursively, sorted by
  path), skipping hidden files and folders (names starting with ".") and the
  batch's own output folder;
* a glob pattern contributes every file it matches (sorted);
* a folder or pattern that yields nothing, or a name that does not exist,
  becomes one *missing* input carrying the reason.

A file reached twice (named twice, or by a folder and a pattern) is kept as
two inputs: the runner marks the second as a duplicate of the first, so the
summary has exactly one row per input and nothing is dropped silently.
"""

from __future__ import annotations

import glob
import hashlib
import os
from dataclasses import dataclass
from pathlib import Path
from typing import Iterable

#: File extensions treated as captures when a folder is given (the importer's
#: text formats, NumPy .npz and Parquet).
CAPTURE_SUFFIXES = (".csv", ".txt", ".tsv", ".dat", ".asc", ".prn", ".npz", ".parquet")


@dataclass(frozen=True)
class BatchInput:
    """One input of a batch.

    path: the file as found (or, when missing, the name the user gave).
    missing_reason: why nothing could be found under that name, else None.
    """

    path: str
    missing_reason: str | None = None

    def to_dict(self) -> dict[str, str | None]:
        return {"path": self.path, "missing_reason": self.missing_reason}


def _hidden(relative: Path) -> bool:
    return any(part.startswith(".") for part in relative.parts)


def _inside(path: Path, folder: Path | None) -> bool:
    if folder is None:
        return False
    try:
        path.resolve().relative_to(folder)
    except ValueError:
        return False
    return True


def _folder_files(folder: Path, exclude: Path | None) -> list[Path]:
    files = []
    for f in folder.rglob("*"):
        rel = f.relative_to(folder)
        if f.suffix.lower() in CAPTURE_SUFFIXES and not _hidden(rel) and f.is_file() \
                and not _inside(f, exclude):
            files.append(f)
    return sorted(files, key=lambda f: str(f))


def discover_inputs(paths: Iterable[str | os.PathLike], exclude: str | os.PathLike | None = None
                    ) -> list[BatchInput]:
    """The inputs named by ``paths``, in the order given (see the module docstring).

    exclude: a folder whose contents are never taken from a folder or pattern
        (the batch's output folder, so a re-run does not read its own summary).
    """
    excluded = Path(exclude).resolve() if exclude is not None else None
    found: list[BatchInput] = []
    for raw in paths:
        name = os.fspath(raw)
        p = Path(name)
        if p.is_dir():
            files = _folder_files(p, excluded)
            if not files:
                found.append(BatchInput(name, "folder holds no capture files ("
                                        + ", ".join(CAPTURE_SUFFIXES) + ")"))
            found.extend(BatchInput(str(f)) for f in files)
        elif p.is_file():
            found.append(BatchInput(str(p)))
        elif glob.has_magic(name):
            matches = sorted(m for m in glob.glob(name, recursive=True)
                             if Path(m).is_file() and not _inside(Path(m), excluded))
            if not matches:
                found.append(BatchInput(name, "pattern matches no file"))
            found.extend(BatchInput(m) for m in matches)
        elif p.exists():
            found.append(BatchInput(name, "not a regular file or folder"))
        else:
            found.append(BatchInput(name, "no such file or folder"))
    return found


def content_hash(path: str | os.PathLike, chunk: int = 1 << 20) -> str:
    """SHA-256 of the file's bytes, hex: the key for resuming and for spotting duplicates."""
    h = hashlib.sha256()
    with open(path, "rb") as fh:
        while True:
            block = fh.read(chunk)
            if not block:
                break
            h.update(block)
    return h.hexdigest()
