"""A self-contained HTML report of a fit, and the notebook view of a result.

One file, nothing fetched: the figure is inline (SVG, or PNG as a data URI),
the style sheet is inline, there is no script, and a Content-Security-Policy
in the page forbids loading anything from elsewhere, so the report opens the
same on a bench PC without network as in an archive years later.

Contents, in reading order: the verdict (when a check supplied one), the
chosen form and why, the figure, the tables of parameters, derived quantities
and components with 95 % intervals, the candidate forms (selection evidence),
diagnostics, warnings and the input file's provenance.

Extension points for check mode: ``verdict`` shows a verdict banner, ``extra_sections`` adds (heading, HTML) sections such
as the tolerance table and the suspects, and ``plot_options`` is passed to
report.plots.plot_fit (``envelope=``, ``notes=``).
"""

from __future__ import annotations

import base64
import datetime as _dt
import html
import math
import os
from pathlib import Path
from typing import Any, Mapping, Sequence

from ..atomic import write_text_atomic
from ..capture import Capture, Provenance
from ..errors import OptionError
from ..results import FitResult
from .quantities import (COMPARISON_RMS, COMPARISON_RMS_MEANING, FINAL_RMS, QuantityRow, criterion_name,
                         delta_meaning, delta_name, format_quantity, interval_text, is_reportable, quantity_rows,
                         runner_up_text, set_aside_lines, stderr_text, unique_lines, value_text)

# Our own sober, printable style, scoped to the report's container.
_CSS = """
.fitkit-report { font-family: "Liberation Sans", "DejaVu Sans", Arial, sans-serif; color: #1d1d1d;
  max-width: 1100px; margin: 0 auto; padding: 18px 24px; line-height: 1.4; font-size: 14px; }
.fitkit-report h1 { font-size: 22px; margin: 0 0 4px 0; color: #24364b; }
.fitkit-report h2 { font-size: 16px; margin: 22px 0 6px 0; color: #24364b;
  border-bottom: 1px solid #c5ccd6; padding-bottom: 2px; }
.fitkit-report .subtitle { color: #555; margin: 0 0 12px 0; }
.fitkit-report table { border-collapse: collapse; margin: 4px 0 8px 0; width: 100%; }
.fitkit-report th, .fitkit-report td { border: 1px solid #c5ccd6; padding: 3px 8px; text-align: left;
  vertical-align: top; }
.fitkit-report th { background: #e9edf2; font-weight: 600; }
.fitkit-report td.num { font-family: "Liberation Mono", "DejaVu Sans Mono", monospace;
  white-space: nowrap; }
.fitkit-report table.diagnostics th, .fitkit-report table.provenance th { width: 28%; }
.fitkit-report tr.undetermined td { color: #7a4500; font-style: italic; }
.fitkit-report tr.chosen td { font-weight: 600; }
.fitkit-report dl.summary { display: grid; grid-template-columns: max-content auto; gap: 2px 14px;
  margin: 6px 0; }
.fitkit-report dl.summary dt { font-weight: 600; color: #24364b; }
.fitkit-report dl.summary dd { margin: 0; }
.fitkit-report figure { margin: 10px 0; }
.fitkit-report figure svg, .fitkit-report figure img { width: 100%; height: auto; display: block; }
.fitkit-report figcaption { color: #555; font-size: 12px; }
.fitkit-report .verdict { border: 2px solid #444; padding: 8px 12px; margin: 8px 0 14px 0;
  font-size: 18px; font-weight: 700; }
.fitkit-report .verdict.pass { border-color: #2e6b34; background: #eef6ee; }
.fitkit-report .verdict.fail { border-color: #8f1d1d; background: #fbeeee; }
.fitkit-report .verdict.inconclusive { border-color: #8a6a00; background: #fbf6e6; }
.fitkit-report ul.warnings li { margin-bottom: 3px; }
.fitkit-report .none { color: #666; font-style: italic; }
.fitkit-report footer { margin-top: 24px; color: #666; font-size: 12px; border-top: 1px solid #c5ccd6;
  padding-top: 4px; }
@media print { .fitkit-report { max-width: none; padding: 0; font-size: 11px; }
  .fitkit-report table, .fitkit-report figure, .fitkit-report .verdict { page-break-inside: avoid; } }
"""

# Forbid every fetch and every script; allow only the inline style and data-URI images.
_CSP = "default-src 'none'; style-src 'unsafe-inline'; img-src data:"

_TABLE_TITLES = {"parameter": "Fitted parameters", "derived": "Derived quantities",
                 "component": "Component values"}


def _e(value: Any) -> str:
    return html.escape(str(value), quote=True)


def _verdict_of(result: FitResult, verdict: Any) -> str | None:
    if isinstance(verdict, Mapping):
        verdict = verdict.get("overall", verdict.get("verdict"))
    return None if verdict in (None, "") else str(verdict)


def _figure_html(result: FitResult, figure_format: str, plot_options: Mapping[str, Any]) -> str:
    from matplotlib import rc_context

    from .plots import figure_bytes, plot_fit

    with rc_context({"svg.hashsalt": "fitkit", "svg.fonttype": "path"}):
        fig, _ = plot_fit(result, **dict(plot_options))
        data = figure_bytes(fig, figure_format, dpi=130)
    caption = ("Capture (dots) and fitted response (solid line) with the edges marked (dash-dot); "
               "residuals beneath, with a band of one noise RMS.")
    if figure_format == "svg":
        svg = data.decode("utf-8")
        svg = svg[svg.index("<svg"):]
        body = svg.replace("<svg", '<svg role="img" aria-label="fit of the step response"', 1)
    else:
        encoded = base64.b64encode(data).decode("ascii")
        body = f'<img alt="fit of the step response" src="data:image/png;base64,{encoded}">'
    return f'<figure class="fit-figure">{body}<figcaption>{_e(caption)}</figcaption></figure>'


def _quantity_table(kind: str, rows: Sequence[QuantityRow]) -> str:
    head = ("<tr><th>name</th><th>meaning</th><th>value</th><th>95 % interval</th>"
            "<th>standard error</th><th>interval from</th></tr>")
    lines = []
    for row in rows:
        est = row.estimate
        shown = is_reportable(est)
        css = "" if shown else ' class="undetermined"'
        method = est.interval_method if shown else "the data do not determine this quantity"
        lines.append(f"<tr{css}><td>{_e(row.name)}</td><td>{_e(row.label)}</td>"
                     f'<td class="num">{_e(value_text(est))}</td>'
                     f'<td class="num">{_e(interval_text(est))}</td>'
                     f'<td class="num">{_e(stderr_text(est))}</td><td>{_e(method)}</td></tr>')
    return (f'<h2>{_e(_TABLE_TITLES[kind])}</h2><table class="quantities {kind}">'
            f"<thead>{head}</thead><tbody>{''.join(lines)}</tbody></table>")


def _summary(result: FitResult) -> str:
    items = [("capture file", result.file or "(in memory)"), ("chosen form", result.model or "(none)")]
    if not result.describes_data:
        items.insert(0, ("NOT A MEASUREMENT", result.adequacy.finding))
        items += [("what would work", fix) for fix in result.adequacy.fixes]
    channels = result.details.channels
    if channels is not None:
        items.append(("channels", (f"input {channels.input!r}, " if channels.input else "no input, ")
                      + f"output {channels.output!r}"))
    if result.selection_reason:
        items.append(("why this form", result.selection_reason))
    aside = set_aside_lines(result)
    if aside:
        items.append(("set aside", "; ".join(aside)))
    runner = runner_up_text(result)
    if runner:
        items.append(("runner-up", runner))
    if result.warnings:
        n = len(result.warnings)
        items.append(("warnings", f"{n} warning{'s' if n > 1 else ''}, listed below the diagnostics"))
    body = "".join(f"<dt>{_e(k)}</dt><dd>{_e(v)}</dd>" for k, v in items)
    return f'<dl class="summary">{body}</dl>'


def _selection_table(result: FitResult) -> str:
    if not result.selection:
        return '<h2>Candidate forms</h2><p class="none">The form was named, not selected.</p>'
    crit = criterion_name(result)
    head = (f"<tr><th>form</th><th>converged</th><th>parameters</th><th>{_e(crit)}</th>"
            f"<th>{_e(delta_name(result))}</th><th>{_e(COMPARISON_RMS)}</th><th>set aside because</th></tr>")
    lines = []
    for c in result.selection:
        css = ' class="chosen"' if c.model == result.model else ""
        ok = c.converged and c.criterion is not None and math.isfinite(c.criterion)
        lines.append(f"<tr{css}><td>{_e(c.model)}{' (chosen)' if css else ''}</td>"
                     f"<td>{'yes' if c.converged else 'no'}</td><td>{c.n_parameters}</td>"
                     f'<td class="num">{f"{c.criterion:.1f}" if ok else "-"}</td>'
                     f'<td class="num">{f"{c.delta:+.1f}" if ok and math.isfinite(c.delta) else "-"}</td>'
                     f'<td class="num">{_e(format_quantity(c.rms_residual, result.output_unit, 3)) if ok else "-"}</td>'
                     f"<td>{_e('' if css or c.note == 'chosen' else c.note)}</td></tr>")
    notes = f"<p>{_e(delta_meaning(result))}. {_e(COMPARISON_RMS_MEANING)}.</p>"
    return (f'<h2>Candidate forms</h2><table class="selection"><thead>{head}</thead>'
            f"<tbody>{''.join(lines)}</tbody></table>{notes}")


def _diagnostics_table(result: FitResult) -> str:
    d = result.diagnostics
    if d is None:
        return '<h2>Diagnostics</h2><p class="none">No residual diagnostics in this result.</p>'

    def num(x: float | None, fmt: str) -> str:
        return format(x, fmt) if x is not None and math.isfinite(x) else "n/a"

    ratio = d.rms_residual / d.noise_rms if d.noise_rms and math.isfinite(d.noise_rms) else float("nan")
    rows = [
        ("samples fitted", f"{d.n_samples} (effective {num(d.effective_samples, '.0f')})"),
        (FINAL_RMS, format_quantity(d.rms_residual, result.output_unit, 3)),
        ("noise estimate (RMS)", format_quantity(d.noise_rms, result.output_unit, 3)),
        ("residual / noise", num(ratio, ".2f")),
        ("residual lag-1 correlation", num(d.residual_lag1, ".2f")),
        ("interval correction", d.correction or "none"),
        ("interval widening factor", num(d.ci_widening, ".2f")),
        ("structured residual", "yes: the form may not describe this response" if d.structured_residual
         else "no"),
        ("selection criterion", d.criterion_name),
    ]
    body = "".join(f"<tr><th>{_e(k)}</th><td>{_e(v)}</td></tr>" for k, v in rows)
    return f'<h2>Diagnostics</h2><table class="diagnostics"><tbody>{body}</tbody></table>'


def _warnings_list(result: FitResult) -> str:
    if not result.warnings:
        return '<h2>Warnings</h2><p class="none">None.</p>'
    items = "".join(f"<li>{_e(w)}</li>" for w in unique_lines(result.warnings))
    return f'<h2>Warnings</h2><ul class="warnings">{items}</ul>'


def _provenance_items(result: FitResult, source: Any) -> tuple[list[tuple[str, str]], list[str], list[str]]:
    """(key/value rows, reader decisions, capture warnings) for the provenance section."""
    if isinstance(source, Capture):
        d = source.to_dict()
        rows = [("file", d["file"] or result.file or "(in memory)"), ("layout", d["layout"]),
                ("first data line", str(d["data_start_line"] or "-")),
                ("samples", str(d["n_points"])),
                ("sample interval", format_quantity(d["sample_interval"], "s")),
                ("duration", format_quantity(d["duration"], "s"))]
        for ch in d["channels"]:
            unit = ch["unit"] or "-"
            src = f", file unit {ch['source_unit']}" if ch["source_unit"] else ""
            rows.append((f"channel {ch['name']}", f"unit {unit}{src}; range "
                         f"{format_quantity(ch['min'], ch['unit'])} to {format_quantity(ch['max'], ch['unit'])}"))
        rows += [(f"header: {k}", str(v)) for k, v in d["metadata"].items()]
        return rows, list(d["decisions"]), list(d["warnings"])
    if isinstance(source, Provenance):
        rows = [("file", source.path or result.file or "(in memory)"), ("layout", source.layout),
                ("first data line", str(source.data_start_line or "-"))]
        return rows, list(source.decisions), []
    if isinstance(source, Mapping):
        decisions = [str(x) for x in source.get("decisions", ())]
        warnings = [str(x) for x in source.get("warnings", ())]
        rows = [(str(k), str(v)) for k, v in source.items() if k not in ("decisions", "warnings")]
        return rows, decisions, warnings
    return [("file", result.file or "(in memory)")], [], []


def _provenance_section(result: FitResult, source: Any) -> str:
    rows, decisions, warnings = _provenance_items(result, source)
    body = "".join(f"<tr><th>{_e(k)}</th><td>{_e(v)}</td></tr>" for k, v in rows)
    parts = [f'<h2>Input file</h2><table class="provenance"><tbody>{body}</tbody></table>']
    if decisions:
        parts.append("<p>What the reader decided:</p><ul>"
                     + "".join(f"<li>{_e(x)}</li>" for x in decisions) + "</ul>")
    if warnings:
        parts.append("<p>Reader warnings:</p><ul>" + "".join(f"<li>{_e(x)}</li>" for x in warnings)
                     + "</ul>")
    if source is None:
        parts.append('<p class="none">The reader\'s record of this file was not supplied.</p>')
    return "".join(parts)


def render_html_fragment(result: FitResult, capture_provenance: Any = None, *, verdict: Any = None,
                         extra_sections: Sequence[tuple[str, str]] = (), figure: bool = True,
                         figure_format: str = "svg", plot_options: Mapping[str, Any] | None = None,
                         footer: str = "", title: str = "Step-response fit",
                         lead_sections: Sequence[tuple[str, str]] = ()) -> str:
    """The report as one ``<div class="fitkit-report">`` with its own scoped style.

    Used inside the full page and as the notebook view. ``extra_sections`` are
    (heading, HTML) pairs from fitkit's own later stages (trusted HTML), placed
    after the quantity tables; ``lead_sections`` likewise, placed right after
    the figure (a board check's verdict tables); ``title`` heads the page;
    ``figure_format`` is "svg" (inline) or "png" (data URI).
    """
    if figure_format not in ("svg", "png"):
        raise OptionError(f"figure format {figure_format!r} is not available in HTML",
                          hint="use svg or png")
    parts = [f"<style>{_CSS}</style>", '<div class="fitkit-report">',
             f"<h1>{_e(title)}</h1>",
             f'<p class="subtitle">{_e(os.path.basename(result.file) or "capture in memory")}'
             f" &middot; form {_e(result.model)}</p>"]
    word = _verdict_of(result, verdict)
    if word:
        css = word.lower() if word.lower() in ("pass", "fail", "inconclusive") else ""
        parts.append(f'<div class="verdict {css}">Verdict: {_e(word.upper())}</div>')
    parts.append(_summary(result))
    if figure and result.segments:
        parts.append(_figure_html(result, figure_format, plot_options or {}))
    for heading, fragment in lead_sections:
        parts.append(f"<h2>{_e(heading)}</h2>{fragment}")
    for kind in ("parameter", "derived", "component"):
        rows = [r for r in quantity_rows(result, skip_repeated=True) if r.kind == kind]
        if rows:
            parts.append(_quantity_table(kind, rows))
    for heading, fragment in extra_sections:
        parts.append(f"<h2>{_e(heading)}</h2>{fragment}")
    parts += [_selection_table(result), _diagnostics_table(result), _warnings_list(result),
              _provenance_section(result, capture_provenance)]
    if footer:
        parts.append(f"<footer>{_e(footer)}</footer>")
    parts.append("</div>")
    return "\n".join(parts)


def render_html_report(result: FitResult, capture_provenance: Any = None, *, verdict: Any = None,
                       extra_sections: Sequence[tuple[str, str]] = (), figure_format: str = "svg",
                       plot_options: Mapping[str, Any] | None = None,
                       generated: _dt.datetime | None = None, title: str = "Step-response fit",
                       lead_sections: Sequence[tuple[str, str]] = ()) -> str:
    """The complete self-contained HTML page of a fit.

    ``capture_provenance``: the Capture, its Provenance, or a mapping of what
    the reader found (None: only the file name is shown). ``generated``: the
    time stamp in the footer (default: now, UTC). ``title``, ``lead_sections``:
    see render_html_fragment.
    """
    from .. import __version__

    stamp = (generated or _dt.datetime.now(_dt.timezone.utc)).strftime("%Y-%m-%d %H:%M UTC")
    footer = (f"Made by fitkit {__version__} on {stamp}. "
              "Intervals are 95 % confidence intervals; SI units throughout.")
    fragment = render_html_fragment(result, capture_provenance, verdict=verdict,
                                    extra_sections=extra_sections, figure_format=figure_format,
                                    plot_options=plot_options, footer=footer, title=title,
                                    lead_sections=lead_sections)
    title = f"{title}: {os.path.basename(result.file) or 'capture'}"
    return ("<!DOCTYPE html>\n<html lang=\"en\">\n<head>\n<meta charset=\"utf-8\">\n"
            f'<meta http-equiv="Content-Security-Policy" content="{_CSP}">\n'
            '<meta name="viewport" content="width=device-width, initial-scale=1">\n'
            f"<title>{_e(title)}</title>\n</head>\n<body>\n{fragment}\n</body>\n</html>\n")


def write_html_report(result: FitResult, path: str | os.PathLike, *, capture_provenance: Any = None,
                      overwrite: bool = True, **options: Any) -> Path:
    """Write the HTML report to ``path`` atomically; returns the path.

    An existing file is replaced only with ``overwrite=True`` (the CLI passes
    True only for a file the user named). Other options as render_html_report.
    """
    text = render_html_report(result, capture_provenance, **options)
    return write_text_atomic(path, text, overwrite=overwrite)
