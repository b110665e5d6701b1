"""The line's trends as one self-contained HTML page: a summary table, the findings, a figure per quantity.

Nothing fetched: figures are inline SVG, the style sheet is report/html.py's,
no script, and the same Content-Security-Policy as the fit report.
"""

from __future__ import annotations

import datetime as _dt
import html
import os
from pathlib import Path
from typing import Sequence

from ..atomic import write_text_atomic
from ..trends.analysis import QuantityTrend
from ..trends.phases import ChartSettings
from ..units import format_value
from .html import _CSP, _CSS
from .trend_text import drift_text, projection_text, repeatability_text, settings_text


def _e(text) -> str:
    return html.escape(str(text))


def _figure(trend: QuantityTrend) -> str:
    from matplotlib import rc_context

    from .plots import figure_bytes
    from .trend_plots import plot_trend

    with rc_context({"svg.hashsalt": "fitkit", "svg.fonttype": "path"}):
        svg = figure_bytes(plot_trend(trend), "svg").decode("utf-8")
    svg = svg[svg.index("<svg"):].replace("<svg", f'<svg role="img" aria-label="trend of {_e(trend.name)}"', 1)
    return (f"<figure>{svg}<figcaption>{_e(trend.name)}: run chart with control limits (dotted), tolerance "
            "limits (dashed), drifts (triangles); moving range; EWMA; CUSUM.</figcaption></figure>")


def _summary_table(group: Sequence[QuantityTrend]) -> str:
    head = ("<tr><th>quantity</th><th>boards</th><th>mean (last boards)</th><th>limits</th><th>Cpk</th>"
            "<th>Ppk</th><th>first drift</th><th>projection</th></tr>")
    rows = []
    for t in group:
        r = t.capability_recent
        limits = ("none" if t.limit_low is None and t.limit_high is None else
                  f"[{format_value(t.limit_low, t.unit, 4)}, {format_value(t.limit_high, t.unit, 4)}]")
        cpk = "n/a" if r is None or r.cpk is None else f"{r.cpk:.2f}"
        ppk = "n/a" if r is None or r.ppk is None else f"{r.ppk:.2f}"
        rows.append(f"<tr><td>{_e(t.name)}</td><td class='num'>{len(t.values)}</td>"
                    f"<td class='num'>{_e(format_value(None if r is None else r.mean, t.unit, 4))}</td>"
                    f"<td class='num'>{_e(limits)}</td><td class='num'>{cpk}</td><td class='num'>{ppk}</td>"
                    f"<td>{_e(drift_text(t))}</td><td>{_e(projection_text(t))}</td></tr>")
    return f"<table>{head}{''.join(rows)}</table>"


def render_trends_html(trends: Sequence[QuantityTrend], store_name: str, settings: ChartSettings, window: int,
                       generated: _dt.datetime | None = None) -> str:
    """The whole page."""
    from .. import __version__
    stamp = (generated or _dt.datetime.now(_dt.timezone.utc)).strftime("%Y-%m-%d %H:%M UTC")
    parts = ['<div class="fitkit-report">', "<h1>Line trends</h1>",
             f"<p class='subtitle'>{_e(store_name)}; {_e(settings_text(settings, window))}</p>"]
    if not trends:
        parts.append("<p class='none'>No quantity has enough boards yet.</p>")
    for design in dict.fromkeys(t.design for t in trends):
        group = [t for t in trends if t.design == design]
        parts += [f"<h2>{_e(design)}</h2>", _summary_table(group)]
        findings = [f"<li>{_e(t.name)}: repeatability: {_e(repeatability_text(t))}</li>"
                    for t in group if t.repeatability is not None]
        if findings:
            parts.append("<ul>" + "".join(findings) + "</ul>")
        for t in group:
            parts += [f"<h2>{_e(design)}: {_e(t.name)}</h2>", _figure(t)]
    parts.append(f"<footer>Made by fitkit {__version__} on {stamp}. SI units throughout.</footer></div>")
    body = "\n".join(parts)
    return ("<!DOCTYPE html>\n<html lang=\"en\">\n<head>\n<meta charset=\"utf-8\">\n"
            f'<meta http-equiv="Content-Security-Policy" content="{_CSP}">\n'
            '<meta name="viewport" content="width=device-width, initial-scale=1">\n'
            f"<title>Line trends: {_e(store_name)}</title>\n<style>{_CSS}</style>\n</head>\n<body>\n{body}\n"
            "</body>\n</html>\n")


def write_trends_html(path: str | os.PathLike, trends: Sequence[QuantityTrend], store_name: str,
                      settings: ChartSettings, window: int) -> Path:
    """Write the page atomically; returns the path."""
    return write_text_atomic(path, render_trends_html(trends, store_name, settings, window))
