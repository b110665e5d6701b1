"""Follow a folder: process each capture once the instrument has finished writing it.

The folder is polled every ``poll_s`` seconds (no file-system notification
needed, so it works on network shares too). A file is taken only when its
size and modification time are the same at two polls in a row, so a capture
still being written is never read; a file that changes after it was taken is
taken again once it is stable (its new content is a new capture). Each poll
that finds new stable files runs one ordinary, resumable batch on them
(run_batch), so a follow that is killed and started again resumes from the
per-capture results already on disk: nothing is lost and nothing is done twice.

The loop never prints and never installs signal handlers: the caller stops it
through ``should_stop`` (checked between polls) or by KeyboardInterrupt.
"""

from __future__ import annotations

import os
import time
from dataclasses import dataclass, field
from pathlib import Path
from typing import Callable, Iterable

from ..io.pairs import capture_files as files_of
from .discover import discover_inputs
from .runner import BatchRun, run_batch
from .worker import BatchSettings

#: Granularity (s) of the wait between polls, so a stop request is seen quickly.
STOP_CHECK_S = 0.1


@dataclass
class StableFiles:
    """Tracks files across polls and hands each one out when it has stopped changing."""

    seen: dict[str, tuple[int, int]] = field(default_factory=dict)
    taken: dict[str, tuple[int, int]] = field(default_factory=dict)

    def poll(self, paths: Iterable[str]) -> list[str]:
        """Files whose size and mtime equal those of the previous poll and that were not
        taken with this signature yet; records this poll's signatures."""
        current: dict[str, tuple[int, int]] = {}
        for path in paths:
            try:
                stats = [os.stat(f) for f in files_of(path)]  # both files of a pair
            except OSError:
                continue  # removed between listing and stat
            current[path] = (sum(st.st_size for st in stats), max(st.st_mtime_ns for st in stats))
        ready = [p for p, sig in current.items()
                 if self.seen.get(p) == sig and self.taken.get(p) != sig and sig[0] > 0]
        for p in ready:
            self.taken[p] = current[p]
        self.seen = current
        return sorted(ready)


def capture_files(paths: Iterable[str], out_dir: str | os.PathLike) -> list[str]:
    """The capture files found now under ``paths`` (folders, files, patterns), the output folder excluded."""
    return [item.path for item in discover_inputs(paths, exclude=out_dir) if item.missing_reason is None]


def merged_run(runs: list[BatchRun], settings: BatchSettings, out_dir: str) -> BatchRun:
    """One BatchRun holding every record of ``runs`` (a later record of the same file replaces the earlier)."""
    by_file: dict[str, dict] = {}
    for run in runs:
        for rec in run.records:
            by_file[rec["file"]] = rec
    return BatchRun(records=tuple(by_file.values()), computed=sum(r.computed for r in runs),
                    resumed=sum(r.resumed for r in runs), settings=settings, out_dir=out_dir)


def follow_folder(paths: list[str], settings: BatchSettings, out_dir: str | os.PathLike, *,
                  poll_s: float = 2.0, should_stop: Callable[[], bool] = lambda: False,
                  on_run: Callable[[BatchRun], None] | None = None, **batch_options) -> list[BatchRun]:
    """Poll ``paths`` until ``should_stop()`` is true; run a batch on each poll's newly stable files.

    on_run(run) is called after each batch (store its captures, write the summary).
    batch_options go to run_batch (workers, progress, ...). Returns the runs made.
    KeyboardInterrupt propagates (what was finished is on disk and resumable).
    """
    out = Path(out_dir)
    tracker = StableFiles()
    runs: list[BatchRun] = []
    while not should_stop():
        ready = tracker.poll(capture_files(paths, out))
        if ready:
            run = run_batch(ready, settings, out, **batch_options)
            runs.append(run)
            if on_run is not None:
                on_run(run)
        deadline = time.monotonic() + poll_s
        while time.monotonic() < deadline and not should_stop():
            time.sleep(min(STOP_CHECK_S, poll_s))
    return runs
