"""One batch at a time per output folder.

Two batches writing into the same folder would each remove the other's
temporary files at start-up and overwrite each other's summary. So a batch
holds a lock file, ``OUT/.fitkit-batch.lock``, created exclusively (O_EXCL,
atomic on local file systems) and holding the owner's process id, host name
and start time (UTC). A second batch finding it stops with a one-line error
naming the owner. A lock left by a process that no longer exists on this
host (a killed batch) is stale and is taken over. A lock from another host
cannot be checked and is respected; its message says how to remove it.

A folder the lock created is removed again when the batch stopped before
writing anything into it (a bad design file, no inputs). The lock is
re-entrant within one process (the command holds it around the
run and the summary; the runner takes it again), and released only by the
holder that created it.
"""

from __future__ import annotations

import json
import os
import socket
import time
from contextlib import contextmanager
from pathlib import Path
from typing import Iterator

from ..errors import OptionError

LOCK_NAME = ".fitkit-batch.lock"


def _alive(pid: int) -> bool:
    """True when a process with this id exists on this host (or cannot be probed)."""
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except PermissionError:  # exists, owned by someone else
        return True
    except OSError:
        return True
    return True


def _read(lock: Path) -> dict:
    try:
        data = json.loads(lock.read_text(encoding="utf-8"))
        return data if isinstance(data, dict) else {}
    except (OSError, ValueError):
        return {}


def _try_create(lock: Path, owner: dict) -> bool:
    try:
        fd = os.open(lock, os.O_CREAT | os.O_EXCL | os.O_WRONLY, 0o644)
    except FileExistsError:
        return False
    with os.fdopen(fd, "w", encoding="utf-8") as f:
        json.dump(owner, f)
    return True


@contextmanager
def output_folder_lock(out_dir: str | os.PathLike) -> Iterator[Path]:
    """Hold the output folder's batch lock for the ``with`` block (the folder is created).

    Raises OptionError when another live batch holds it, or the folder cannot be written.
    """
    out = Path(out_dir)
    made = not out.exists()
    try:
        out.mkdir(parents=True, exist_ok=True)
    except OSError as err:
        raise OptionError(f"cannot create the output folder {out} ({err.strerror or err})",
                          hint="choose a folder you can write to with --out") from None
    lock = out / LOCK_NAME
    host = socket.gethostname()
    owner = {"pid": os.getpid(), "host": host,
             "started_utc": time.strftime("%Y-%m-%dT%H:%M:%SZ", time.gmtime())}
    created = reentrant = False
    for _ in range(2):
        try:
            created = _try_create(lock, owner)
        except OSError as err:
            raise OptionError(f"cannot write in the output folder {out} ({err.strerror or err})",
                              hint="choose a folder you can write to with --out") from None
        if created:
            break
        held = _read(lock)
        pid, where = held.get("pid"), held.get("host")
        if where == host and pid == os.getpid():
            reentrant = True  # this process already holds it
            break
        if where == host and isinstance(pid, int) and not _alive(pid):
            lock.unlink(missing_ok=True)  # left by a killed batch: take it over
            continue
        who = f"process {pid} on {where}" if pid else "an unknown process"
        since = f", started {held['started_utc']}" if held.get("started_utc") else ""
        raise OptionError(f"another fitkit batch ({who}{since}) is writing to {out}",
                          hint=f"wait for it to finish or choose another folder with --out; "
                               f"if that batch is gone, delete {lock}")
    if not (created or reentrant):  # a stale lock was taken over by another batch meanwhile
        raise OptionError(f"another fitkit batch is starting in {out}",
                          hint="wait for it to finish or choose another folder with --out")
    try:
        yield lock
    finally:
        if created and _read(lock).get("pid") == os.getpid():
            lock.unlink(missing_ok=True)
            if made:  # a batch that stopped before writing anything leaves no empty folder behind
                try:
                    out.rmdir()
                except OSError:
                    pass
