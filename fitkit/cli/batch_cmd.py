"""`fitkit batch`: fit or check a production line's worth of captures."""

from __future__ import annotations

import sys

import click

from .arguments import form_option, pop_form
from .capture_options import CaptureOptions, capture_options
from .signals import echo_while_read, terminate_as_interrupt
from .store_options import StoreRequest, store_options

#: Problem lines printed at the end; the rest are in problems.csv.
MAX_PROBLEM_LINES = 20


def _progress_printer(stream):
    """A progress callback: a tqdm bar on an interactive stderr, plain lines otherwise."""
    bar_class = None
    if stream.isatty():
        try:
            from tqdm import tqdm as bar_class
        except ImportError:  # no tqdm: plain lines everywhere
            bar_class = None
    if bar_class is not None:
        bar = None

        def on_progress(done, total, record):
            nonlocal bar
            if bar is None:
                bar = bar_class(total=total, file=stream, unit="capture", leave=True, dynamic_ncols=True)
            bar.update(1)
            if record["status"] not in ("fitted", "pass"):
                bar.write(f"{record['status']}: {record['file']}", file=stream)
            if done == total:
                bar.close()
        return on_progress

    width = 0

    def on_progress(done, total, record):
        nonlocal width
        width = width or len(str(total))
        echo_while_read([f"[{done:>{width}}/{total}] {record['status']:<11} {record['file']}"], err=True)
    return on_progress


def _announce(plan):
    click.echo(f"{len(plan.inputs)} inputs: {len(plan.todo)} to process, "
               f"{len(plan.done)} already done in an earlier run", err=True)


@click.command("batch")
@click.argument("paths", nargs=-1, required=True)
@click.option("--out", "out_dir", required=True, type=click.Path(file_okay=False),
              help="Folder for per-capture results and the summary (created if needed).")
@click.option("--design", type=click.Path(),
              help="Design file: check every board against it (otherwise fit only).")
@form_option("Form to fit (see `fitkit forms`), or auto to choose one per capture; "
             "with --design the design decides the form.")
@click.option("--average", is_flag=True, help="Coherently average the edges of each capture.")
@click.option("--workers", type=click.IntRange(min=1), help="Local worker processes [default: all cores].")
@click.option("--cluster", metavar="ADDRESS",
              help="Run on the Dask scheduler at ADDRESS, e.g. tcp://host:8786 (needs fitkit[cluster]; "
                   "the workers must see the files under the same paths).")
@click.option("--redo", is_flag=True, help="Process again the captures already done in OUT.")
@click.option("--no-plots", is_flag=True, help="Skip the distribution plots.")
@click.option("--follow", is_flag=True,
              help="Keep running: process each new capture in PATHS once its size and time stamp have "
                   "stopped changing, until Ctrl-C or SIGTERM.")
@click.option("--poll", "poll_s", type=click.FloatRange(min=0.1), default=2.0, show_default=True,
              metavar="SECONDS", help="With --follow: seconds between looks at the folder.")
@store_options
@capture_options
def batch(paths, out_dir, design, average, workers, cluster, redo, no_plots, follow, poll_s, **kwargs):
    """Fit (or, with --design, check) every capture in PATHS: files, folders
    (searched recursively for .csv .txt .tsv .dat .asc .prn .npz .parquet) and
    glob patterns such as "line3/*.csv".

    Writes each capture's result to OUT/captures/ as soon as it is done, then
    OUT/summary.csv, summary.parquet and summary.json (one row per input,
    nothing dropped: missing names, unreadable files and duplicates each have a
    row), problems.csv (every input needing a look, with the reason) and a
    distribution plot per quantity. A re-run skips the captures already done
    (same file content, settings and fitkit version) unless --redo, so an
    interrupted batch resumes where it stopped.

    With --store, every capture's outcome is also appended to the line's
    results store (see `fitkit trend`); with --follow, PATHS are watched and
    each capture is processed once the instrument has finished writing it.

    \b
    Exit status, by the first rule that applies:
      1   some board failed its design check
      70  some capture hit a bug in fitkit (or its worker died twice)
      4   some input is missing, unreadable or holds no usable step
          (every folder entry named like a capture has a row: a broken link,
          a link loop, a pipe or an unreadable subfolder is unreadable)
      5   some fit did not converge or determines nothing
      3   some board's check was inconclusive
      0   every capture was fitted (or every board passed)
    Also 2 for a bad option (before any work), 73 when an output cannot be
    written, 130 when stopped by Ctrl-C or SIGTERM (finished captures are
    kept; run the same command again to resume).
    """
    from ..batch import BatchSettings, batch_exit_status, run_batch, summary_frame, write_summary
    from ..batch.discover import content_hash
    from ..batch.folder_lock import output_folder_lock
    from ..batch.summary import duplicate_reason

    options = CaptureOptions.pop(kwargs)
    options.validate()
    model = pop_form(kwargs)
    if design:
        from ..check import load_design
        load_design(design)  # a design that cannot be used stops the batch before any work
    store_request = StoreRequest.pop(kwargs)
    settings = BatchSettings(model=model, input=options.input_channel, output=options.output_channel,
                             average=average, design=design,
                             design_hash=content_hash(design) if design else None,
                             read_options=options.load_kwargs())
    if follow:
        from .batch_store import follow_batch
        return follow_batch(paths, settings, out_dir, workers=workers, cluster=cluster, poll_s=poll_s,
                            request=store_request)
    store = store_request.open()
    with output_folder_lock(out_dir), terminate_as_interrupt():  # the summary and plots too
        try:
            run = run_batch(paths, settings, out_dir, workers=workers, redo=redo, cluster=cluster,
                            progress=_progress_printer(sys.stderr), on_plan=_announce)
        except KeyboardInterrupt:
            click.echo(f"fitkit: the captures finished so far are saved in {out_dir}; "
                       "run the same command again to resume", err=True)
            raise
        written = write_summary(run, out_dir)
        if store is not None:
            from .batch_store import store_batch_run
            with store:
                store_batch_run(store_request, store, run, settings, out_dir)
        plots = []
        if not no_plots:
            from ..batch.summary import batch_limits
            from ..report.batch_plots import plot_batch_distributions
            frame, units = summary_frame(run)
            plots = plot_batch_distributions(frame, units, out_dir, limits=batch_limits(run))

    # the batch is done and saved: a reader that stops reading (`| head -1`) changes nothing
    lines = _summary_lines(run, written, plots, duplicate_reason)
    echo_while_read(lines)
    return batch_exit_status(run)


def _summary_lines(run, written, plots, duplicate_reason) -> list[str]:
    """The lines printed at the end of a batch: the tally (each input counted once), files, problems."""
    distinct = {}
    for rec in run.records:
        if not rec.get("duplicate_of"):
            distinct[rec["status"]] = distinct.get(rec["status"], 0) + 1
    counts = ", ".join(f"{n} {s}" for s, n in distinct.items())
    dup = f", {run.duplicates} duplicate" if run.duplicates else ""
    lines = [f"{len(run.records)} inputs: {counts}{dup} "
             f"({run.computed} processed now, {run.resumed} from an earlier run)",
             f"summary: {written['csv']} (also .parquet, .json); problems: {written['problems']}"]
    if plots:
        lines.append(f"distribution plots: {len(plots)} in {plots[0].parent}")
    problems = [r for r in run.records if r["status"] not in ("fitted", "pass") or r.get("duplicate_of")]
    for rec in problems[:MAX_PROBLEM_LINES]:
        reason = rec.get("reason") or ""
        if rec.get("duplicate_of"):
            reason = duplicate_reason(rec["file"], rec["duplicate_of"], reason)
        lines.append(f"  {rec['status']}: {rec['file']}" + (f": {reason}" if reason else ""))
    if len(problems) > MAX_PROBLEM_LINES:
        lines.append(f"  ... and {len(problems) - MAX_PROBLEM_LINES} more in {written['problems']}")
    return lines
