"""Expand the paths a user gives (files, folders, glob patterns) into batch inputs.

Every name the user gives is accounted for:

* a file named directly is one input, whatever its extension;
* a folder contributes every capture file inside it (recursively, sorted by
  path), skipping hidden files and folders (names starting with ".") and the
  batch's own output folder;
* a glob pattern contributes every file it matches (sorted);
* a folder or pattern that yields nothing, or a name that does not exist,
  becomes one *missing* input carrying the reason;
* an entry with a capture's name that cannot be read as a file (a broken
  symbolic link, a link loop, a named pipe, an unreadable subfolder) becomes
  one *unreadable* input carrying the reason: every entry has a row.

A file reached twice (named twice, or by a folder and a pattern) is kept as
two inputs: the runner marks the second as a duplicate of the first, so the
summary has exactly one row per input and nothing is dropped silently.

Two files of one folder named ``NAME_input.EXT`` and ``NAME_output.EXT`` are
one input, the capture's two channels (fitkit.io.pairs), named by both files
joined by " + ".
"""

from __future__ import annotations

import errno
import glob
import hashlib
import os
import stat
from dataclasses import dataclass
from pathlib import Path
from typing import Iterable

from ..io.pairs import capture_files, pair_parts, paired

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
    status: str = "missing"

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


def _entry_problem(path: Path) -> str | None:
    """Why a folder entry with a capture's name cannot be read as one, or None for a regular file."""
    try:
        st = path.stat()  # follows symbolic links
    except OSError as err:
        if path.is_symlink():
            if err.errno == errno.ELOOP:
                return "symbolic link loop"
            return "broken symbolic link (its target does not exist)"
        return f"cannot be read ({err.strerror or err})"
    if stat.S_ISREG(st.st_mode):
        return None
    if stat.S_ISDIR(st.st_mode):
        return ""  # a folder named like a capture: walked into, not a row of its own
    kind = ("named pipe (FIFO)" if stat.S_ISFIFO(st.st_mode) else "socket" if stat.S_ISSOCK(st.st_mode)
            else "device" if stat.S_ISCHR(st.st_mode) or stat.S_ISBLK(st.st_mode) else "special file")
    return f"not a regular file (a {kind})"


def _folder_entries(folder: Path, exclude: Path | None) -> list[BatchInput]:
    """Every capture-named entry under ``folder`` (sorted): regular files as inputs, and
    broken links, link loops, pipes and unreadable subfolders as unreadable rows."""
    found: list[BatchInput] = []
    seen_dirs: set[str] = set()

    def unreadable_folder(err: OSError) -> None:
        name = err.filename or str(folder)
        found.append(BatchInput(str(name), f"folder cannot be read ({err.strerror or err})", "unreadable"))

    for root, dirs, files in os.walk(folder, onerror=unreadable_folder, followlinks=True):
        real = os.path.realpath(root)
        if real in seen_dirs:  # a symbolic link back up the tree
            found.append(BatchInput(root, "symbolic link loop (a folder already searched)", "unreadable"))
            dirs[:] = []
            continue
        seen_dirs.add(real)
        rel_root = Path(root).relative_to(folder)
        dirs[:] = [d for d in dirs if not d.startswith(".") and not _inside(Path(root) / d, exclude)]
        names = files + [d for d in dirs if Path(d).suffix.lower() in CAPTURE_SUFFIXES]
        for name in names:
            f = Path(root) / name
            if f.suffix.lower() not in CAPTURE_SUFFIXES or _hidden(rel_root / name) or _inside(f, exclude):
                continue
            problem = _entry_problem(f)
            if problem is None:
                found.append(BatchInput(str(f)))
            elif problem:
                found.append(BatchInput(str(f), problem, "unreadable"))
    return sorted(found, key=lambda b: b.path)


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
            entries = _folder_entries(p, excluded)
            if not entries:
                found.append(BatchInput(name, "folder holds no capture files ("
                                        + ", ".join(CAPTURE_SUFFIXES) + ")"))
            found.extend(entries)
        elif p.is_file():
            found.append(BatchInput(str(p)))
        elif pair_parts(name) and all(Path(f).is_file() for f in pair_parts(name)):
            found.append(BatchInput(name))  # a paired capture named as a batch names it
        elif glob.has_magic(name):
            matches = sorted(m for m in glob.glob(name, recursive=True)
                             if Path(m).is_file() and not _inside(Path(m), excluded))
            if not matches:
                found.append(BatchInput(name, "pattern matches no file"))
            found.extend(BatchInput(m) for m in matches)
        elif p.exists() or p.is_symlink():
            found.append(BatchInput(name, _entry_problem(p) or "not a regular file or folder", "unreadable"))
        else:
            found.append(BatchInput(name, "no such file or folder"))
    return _paired_inputs(found)


def _paired_inputs(found: list[BatchInput]) -> list[BatchInput]:
    """The inputs with each NAME_input / NAME_output pair of files made one input
    (fitkit.io.pairs), at the place of the first of the two."""
    names = paired([b.path for b in found if b.missing_reason is None])
    pair_of = {part: name for name in names for part in (pair_parts(name) or ())}
    out: list[BatchInput] = []
    emitted: set[str] = set()
    for b in found:
        name = pair_of.get(b.path) if b.missing_reason is None else None
        if name is None:
            out.append(b)
        elif name not in emitted:
            emitted.add(name)
            out.append(BatchInput(name))
    return out


def content_hash(path: str | os.PathLike, chunk: int = 1 << 20) -> str:
    """SHA-256 of the file's bytes, hex: the key for resuming and for spotting duplicates
    (of both files' bytes, input then output, for a paired capture), and of the settings
    file beside each (fitkit.io.sidecar), so a changed setting is processed again."""
    from ..io.sidecar import sidecar_path
    h = hashlib.sha256()
    parts = capture_files(os.fspath(path))
    for part in list(parts) + [str(s) for s in map(sidecar_path, parts) if s.is_file()]:
        with open(part, "rb") as fh:
            while True:
                block = fh.read(chunk)
                if not block:
                    break
                h.update(block)
    return h.hexdigest()
