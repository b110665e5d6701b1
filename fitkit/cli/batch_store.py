"""`fitkit batch --store` and `fitkit batch --follow`: the batch's outcomes into the line store,
and a folder followed as the instrument writes into it."""

from __future__ import annotations

import signal
from contextlib import contextmanager
from typing import Iterator

import click

from .signals import terminate_as_interrupt

from .store_options import StoreRequest


def store_batch_run(request: StoreRequest, store, run, settings, out_dir: str) -> int:
    """Append the run's captures missing from the store; say how many."""
    if store is None:
        return 0
    from ..batch.store_ingest import store_batch
    added = store_batch(store, run, settings, out_dir, request.facts_maker())
    click.echo(f"store: {added} captures added to {store.name}", err=True)
    return added


@contextmanager
def signals_held() -> Iterator[None]:
    """Ignore Ctrl-C and SIGTERM while the last summary and store writes finish."""
    previous = {s: signal.signal(s, signal.SIG_IGN) for s in (signal.SIGINT, signal.SIGTERM)}
    try:
        yield
    finally:
        for s, handler in previous.items():
            signal.signal(s, handler)


def _follow_progress(done, total, record):
    click.echo(f"{record['status']:<11} {record['file']}", err=True)


def follow_batch(paths, settings, out_dir: str, *, workers, poll_s: float, request: StoreRequest,
                 cluster: str | None = None) -> int:
    """Follow the folders in ``paths`` until Ctrl-C or SIGTERM; return the batch exit status of
    everything processed (0 when every capture was fitted or passed)."""
    from ..batch import batch_exit_status, write_summary
    from ..batch.follow import follow_folder, merged_run
    from ..batch.folder_lock import output_folder_lock

    runs = []
    with output_folder_lock(out_dir):
        store = request.open()
        try:
            def on_run(run):
                runs.append(run)
                with signals_held():  # the summary and the store stay consistent with each other
                    store_batch_run(request, store, run, settings, out_dir)
                    write_summary(merged_run(runs, settings, out_dir), out_dir)

            click.echo(f"following {', '.join(map(str, paths))} every {poll_s:g} s; "
                       "stop with Ctrl-C or SIGTERM", err=True)
            try:
                with terminate_as_interrupt():
                    follow_folder(list(paths), settings, out_dir, poll_s=poll_s, on_run=on_run,
                                  workers=workers, cluster=cluster, progress=_follow_progress)
            except KeyboardInterrupt:
                pass
        finally:
            if store is not None:
                store.close()
    merged = merged_run(runs, settings, out_dir)
    click.echo(f"stopped: {len(merged.records)} captures processed while following; results in {out_dir}"
               + ("" if request.store is None else f", store {request.store}"))
    return batch_exit_status(merged) if merged.records else 0
