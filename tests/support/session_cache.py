"""A costly fixture value built once per test session, shared by the xdist workers.

The first worker to ask builds the value under an exclusive file lock and pickles it
into the session's shared temporary folder (the parent of each worker's own), named by
a hash of what it depends on (the code of fitkit and of the calling test module); a
worker that asks later waits on the lock, then reads the pickle. Without xdist the
folder is the session's own and the value is simply built once.
"""

from __future__ import annotations

import hashlib
import pickle
from pathlib import Path
from typing import Callable, Iterable, TypeVar

import fitkit

T = TypeVar("T")


def content_key(files: Iterable[Path]) -> str:
    """SHA-256 of the files' paths and bytes (sorted): the key of what a value depends on."""
    h = hashlib.sha256()
    for path in sorted(Path(f) for f in files):
        h.update(str(path).encode())
        h.update(path.read_bytes())
    return h.hexdigest()[:16]


def fitkit_sources() -> list[Path]:
    """Every Python file of the fitkit package."""
    return sorted(Path(fitkit.__file__).resolve().parent.rglob("*.py"))


def built_once(tmp_path_factory, name: str, depends_on: Iterable[Path], build: Callable[[], T]) -> T:
    """``build()``'s value, built by one worker of the session and shared with the others
    (built by each worker where there is no POSIX file lock)."""
    try:
        import fcntl
    except ImportError:
        return build()
    base = tmp_path_factory.getbasetemp()
    shared = base.parent if base.name.startswith("popen-gw") else base
    key = content_key(list(depends_on) + fitkit_sources())
    target = shared / f"{name}-{key}.pickle"
    with open(shared / f"{name}-{key}.lock", "w") as lock:
        fcntl.flock(lock, fcntl.LOCK_EX)
        if target.exists():
            return pickle.loads(target.read_bytes())
        value = build()
        partial = target.with_suffix(".partial")
        partial.write_bytes(pickle.dumps(value))
        partial.replace(target)
        return value
