"""`fitkit trend STORE`: is the line drifting? Control charts, drift detection and capability from the store."""

from __future__ import annotations

import json

import click


@click.command("trend")
@click.argument("store")
@click.option("--design", metavar="NAME", help="Only this design (its name as in the design file).")
@click.option("--quantity", "quantities", multiple=True, metavar="NAME",
              help="Only this quantity or part (e.g. C22, f0); repeatable.")
@click.option("--baseline", type=click.IntRange(min=8), default=50, show_default=True,
              help="Boards at the start of each phase that set the centre and the control limits.")
@click.option("--window", type=click.IntRange(min=5), default=50, show_default=True,
              help="Latest boards for the current Cpk/Ppk and the projection.")
@click.option("--ewma-lambda", type=click.FloatRange(0.01, 1.0), default=0.2, show_default=True,
              help="EWMA weight of the newest board.")
@click.option("--ewma-width", type=click.FloatRange(min=0.5), default=3.0, show_default=True,
              help="EWMA limits, in sigma of the EWMA.")
@click.option("--cusum-k", type=click.FloatRange(min=0.0), default=0.5, show_default=True,
              help="CUSUM allowance (slack), in sigma.")
@click.option("--cusum-h", type=click.FloatRange(min=0.5), default=5.0, show_default=True,
              help="CUSUM decision interval, in sigma.")
@click.option("--json", "as_json", is_flag=True, help="Print the trends as one JSON object (with every series).")
@click.option("--csv", "csv_path", type=click.Path(dir_okay=False), help="Write one row per quantity to this CSV file.")
@click.option("--html", "html_path", type=click.Path(dir_okay=False),
              help="Write a self-contained HTML page with the charts to this file.")
def trend(store, design, quantities, baseline, window, ewma_lambda, ewma_width, cusum_k, cusum_h, as_json,
          csv_path, html_path) -> int:
    """Trends of the line's results in STORE (a SQLite file or a postgresql:// URL
    written by `fitkit batch --store` or `fitkit check --store`).

    Per design and per quantity or implied part value, one value per board
    (its first capture) in capture order: a run chart and individuals /
    moving-range chart with limits from the process, EWMA and tabular CUSUM
    drift detection (the board at which each drift was found), Cpk and Ppk
    against the design's limits (ISO 22514), where the latest boards' mean
    is heading and when it reaches a limit, and, for boards captured more
    than once, whether the repeats scatter as their intervals say.

    The limits and the detection restart after each detected drift and where
    the recorded fixture changes (each restart takes a new baseline).
    """
    from pathlib import Path

    from ..errors import OptionError
    from ..line_store import open_store
    from ..trends import ChartSettings, line_trends

    if not Path(store).exists() and "://" not in store:
        raise OptionError(f"no store at {store}", hint="give the file written by fitkit batch --store")
    settings = ChartSettings(baseline=baseline, ewma_lambda=ewma_lambda, ewma_l=ewma_width, cusum_k=cusum_k,
                             cusum_h=cusum_h)
    with open_store(store, read_only=True) as opened:
        frame = opened.values_frame()
        name = opened.name
    trends = line_trends(frame, settings, window=window, quantities=list(quantities) or None, design=design)
    if csv_path:
        import pandas as pd

        from ..atomic import write_text_atomic
        from ..report.trend_text import trend_rows
        write_text_atomic(csv_path, pd.DataFrame(trend_rows(trends)).to_csv(index=False))
    if html_path:
        from ..report.trend_html import write_trends_html
        write_trends_html(html_path, trends, name, settings, window)
    if as_json:
        doc = {"store": name, "settings": settings.to_dict(), "window": window,
               "trends": [t.to_dict() for t in trends]}
        click.echo(json.dumps(doc, indent=1, default=str))
    else:
        from ..report.trend_text import trends_text
        click.echo(trends_text(trends, name, settings, window), nl=False)
        for label, path in (("table", csv_path), ("page", html_path)):
            if path:
                click.echo(f"{label}: {path}")
    return 0
