"""How the command meets its surroundings: SIGTERM, and a reader that stops reading.

A batch stopped by SIGTERM (a service manager, ``kill``, a CI timeout) does
what Ctrl-C does: the captures finished so far stay saved, the worker
processes stop, the lock file is removed, and the next run resumes. Text
printed to a pipe whose reader has gone (``fitkit batch ... | head -1``) is
dropped; the work and its exit status are not affected.
"""

from __future__ import annotations

import contextlib
import os
import signal
import sys
import threading
from typing import Iterable, Iterator

import click


@contextlib.contextmanager
def terminate_as_interrupt() -> Iterator[None]:
    """Within the block, SIGTERM raises KeyboardInterrupt (as Ctrl-C does)."""
    if threading.current_thread() is not threading.main_thread():
        yield
        return

    def interrupt(signum, frame):
        raise KeyboardInterrupt

    previous = signal.signal(signal.SIGTERM, interrupt)
    try:
        yield
    finally:
        signal.signal(signal.SIGTERM, previous)


def echo_while_read(lines: Iterable[str], *, err: bool = False) -> bool:
    """Print lines; once the reader has closed the pipe, print nothing more.

    Returns False when the output is gone. Later writes to it go to the null
    device, so the interpreter's own flush at exit does not fail either.
    """
    stream = sys.stderr if err else sys.stdout
    try:
        for line in lines:
            click.echo(line, err=err)
        stream.flush()
    except BrokenPipeError:
        silence(stream)
        return False
    return True


def silence(stream) -> None:
    """Point a closed standard stream at the null device (see the Python docs on SIGPIPE)."""
    try:
        devnull = os.open(os.devnull, os.O_WRONLY)
        os.dup2(devnull, stream.fileno())
    except (OSError, ValueError):
        pass
