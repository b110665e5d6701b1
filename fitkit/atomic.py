"""Atomic file output: write to a temporary file beside the target, then rename.

A reader never sees a half-written output, and an interrupted run leaves the
previous file (if any) intact. Inputs are never opened for writing anywhere in
fitkit; this module is the only place that writes files.
"""

from __future__ import annotations

import os
import tempfile
from pathlib import Path

from .errors import OptionError


def write_bytes_atomic(path: str | os.PathLike, data: bytes, *, overwrite: bool = True) -> Path:
    """Write ``data`` to ``path`` atomically and return the path.

    With ``overwrite=False`` an existing file is an error (OptionError).
    """
    target = Path(path)
    if not overwrite and target.exists():
        raise OptionError(f"{target} exists; not replacing it", hint="remove it or choose another name")
    directory = target.parent if str(target.parent) else Path(".")
    directory.mkdir(parents=True, exist_ok=True)
    fd, tmp = tempfile.mkstemp(prefix=f".{target.name}.", suffix=".tmp", dir=directory)
    try:
        with os.fdopen(fd, "wb") as fh:
            fh.write(data)
            fh.flush()
            os.fsync(fh.fileno())
        os.chmod(tmp, 0o666 & ~_current_umask())  # mkstemp makes 0600; use the user's usual mode
        os.replace(tmp, target)
    except BaseException as exc:
        try:
            os.unlink(tmp)
        except FileNotFoundError:
            pass
        if isinstance(exc, OSError) and exc.filename is None and exc.errno is not None:
            # disk full and the like come without a file name: add the target's
            raise type(exc)(exc.errno, exc.strerror, str(target)) from None
        raise
    return target


def _current_umask() -> int:
    mask = os.umask(0)
    os.umask(mask)
    return mask


def write_text_atomic(path: str | os.PathLike, text: str, *, overwrite: bool = True) -> Path:
    """Write UTF-8 text to ``path`` atomically (see write_bytes_atomic)."""
    return write_bytes_atomic(path, text.encode("utf-8"), overwrite=overwrite)
