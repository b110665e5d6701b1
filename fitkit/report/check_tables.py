"""The board check as rows: the quiet lines, the CSV and the HTML sections.

One row per quantity, in report order: the overall verdict, the behavioural
quantities (tau, f0, Q, gain against their limits), the parts (each against
its tolerance band) and the suspects (ranked fault hypotheses). Numbers are
plain SI floats (seconds, hertz, ohms, farads, henries); nothing is computed
here beyond what fitkit.check found.
"""

from __future__ import annotations

import csv
import html
import io
import math
from typing import Any

from ..units import format_interval, format_value
from .check_text import (SUSPECT_DELTA_MEANING, TIE_MEANING, output_unit_of, percent_text, rank_mark,
                         shows_suspects, summary_after_banner)
from .quantities import unique_lines

#: Columns of the check CSV (see check_result_csv).
CHECK_CSV_COLUMNS = ("kind", "name", "value", "ci95_low", "ci95_high", "unit", "limit_low", "limit_high",
                     "nominal", "verdict", "note")


def _number(x: Any) -> float | None:
    if x is None:
        return None
    x = float(x)
    return x if math.isfinite(x) else None


def _pair(p) -> tuple[float | None, float | None]:
    return (None, None) if p is None else (_number(p[0]), _number(p[1]))


def named_suspects(result) -> list:
    """The suspects a reader should act on: none when the board passes; otherwise the
    tied leaders and every hypothesis that explains the capture down to the noise."""
    if result.verdict == "pass":
        return []
    return [s for s in result.suspects if s.tied or s.explains]


def check_records(result) -> list[dict[str, Any]]:
    """The check as a list of row dicts with the CHECK_CSV_COLUMNS keys (SI numbers, None = empty)."""
    rows = [dict(kind="overall", name="verdict", value=None, ci95_low=None, ci95_high=None, unit="",
                 limit_low=None, limit_high=None, nominal=None, verdict=result.verdict, note=result.summary)]
    for q in result.quantities:
        lo, hi = _pair(q.ci95)
        rows.append(dict(kind="behaviour", name=q.name, value=_number(q.value), ci95_low=lo, ci95_high=hi,
                         unit=q.unit, limit_low=_number(q.low), limit_high=_number(q.high),
                         nominal=_number(q.nominal), verdict=q.verdict, note=q.limit_source))
    for c in result.components:
        lo, hi = _pair(c.judged_interval)
        rows.append(dict(kind="part", name=c.part, value=_number(c.value), ci95_low=lo, ci95_high=hi,
                         unit=c.unit, limit_low=_number(c.low), limit_high=_number(c.high),
                         nominal=_number(c.nominal), verdict=c.verdict,
                         note=f"tolerance {percent_text(c.tolerance)}; interval widened by the other parts' tolerances"
                         + (f"; {c.note}" if c.note else "")))
    for rank, s in enumerate(result.suspects, start=1):
        lo, hi = _pair(s.ci95)
        rows.append(dict(kind="suspect", name=s.part, value=_number(s.value), ci95_low=lo, ci95_high=hi,
                         unit=s.unit, limit_low=None, limit_high=None, nominal=_number(s.nominal),
                         verdict=f"rank {rank_mark(rank, s, result)}",
                         note=(f"ΔAICc {s.evidence:.1f}; " if math.isfinite(s.evidence) else "") + s.pattern))
    return rows


def check_result_csv(result) -> str:
    """The check as CSV text: header, then one row per quantity (overall verdict,
    behaviour, parts, suspects). Floats with repr precision; empty cell = not available.
    A part's ci95 columns hold the interval it was judged on (widened by the other
    parts' tolerances); its limit columns hold its tolerance band."""
    buffer = io.StringIO()
    writer = csv.writer(buffer, lineterminator="\n")
    writer.writerow(CHECK_CSV_COLUMNS)
    for rec in check_records(result):
        writer.writerow(["" if rec[c] is None else repr(rec[c]) if isinstance(rec[c], float) else rec[c]
                         for c in CHECK_CSV_COLUMNS])
    return buffer.getvalue()


def _plain(x: float | None) -> str:
    return "-" if x is None or not math.isfinite(float(x)) else format(float(x), ".10g")


def render_check_quiet(result) -> str:
    """Script-friendly check text: ``verdict WORD`` on the first line, then one line per
    named suspect (see named_suspects): ``suspect PART value ci95_low ci95_high unit
    pattern``, numbers in plain SI, "-" where there is none (a swap has no value)."""
    lines = [f"verdict {result.verdict}"]
    for s in named_suspects(result):
        lo, hi = _pair(s.ci95)
        lines.append(f"suspect {s.part} {_plain(s.value)} {_plain(lo)} {_plain(hi)} {s.unit or '-'} {s.pattern}")
    return "\n".join(lines) + "\n"


# -- HTML ------------------------------------------------------------------------

def _e(text: Any) -> str:
    return html.escape(str(text), quote=True)


def _v(x, unit: str) -> str:
    return "-" if x is None else format_value(x, unit)


def _iv(ci, unit: str) -> str:
    return "-" if ci is None else format_interval(ci[0], ci[1], unit, digits=4)


def _table(css: str, head: list[str], rows: list[tuple[str, list[str]]]) -> str:
    th = "".join(f"<th>{_e(h)}</th>" for h in head)
    body = "".join(f'<tr class="{_e(cls)}">' + "".join(f"<td>{_e(c)}</td>" for c in cells) + "</tr>"
                   for cls, cells in rows)
    return f'<table class="{css}"><thead><tr>{th}</tr></thead><tbody>{body}</tbody></table>'


def check_html_sections(result) -> list[tuple[str, str]]:
    """(heading, HTML) sections of a check for fitkit.report.html's ``extra_sections``:
    the summary and design, behaviour against limits, parts against tolerances, the
    suspects, the capture against the envelope and what would resolve an inconclusive
    check. Every text from files is escaped."""
    d = result.design
    summary = (f'<p class="check-summary">{_e(summary_after_banner(result))}</p>'
               f"<p>Design: {_e(d.name)}" + (f" ({_e(d.path)})" if d.path else "") + ". Model driven by "
               + ("the measured input" if result.measured_input else "an ideal step (no input channel)") + ".</p>")
    sections = [("Board check", summary)]
    if result.quantities:
        rows = [(q.verdict.replace(" ", "-"), [q.name, _v(q.value, q.unit), _iv(q.ci95, q.unit),
                                                _iv((q.low, q.high), q.unit), q.limit_source, q.verdict])
                for q in result.quantities]
        sections.append(("Behaviour against limits", _table(
            "check-behaviour", ["quantity", "measured", "95 % interval", "allowed range", "from", "verdict"], rows)))
    rows = [(c.verdict.replace(" ", "-"), [c.part, _v(c.nominal, c.unit), percent_text(c.tolerance),
                                            _v(c.value, c.unit),
                                            _iv(c.judged_interval, c.unit), c.verdict, c.note])
            for c in result.components]
    sections.append(("Parts against tolerances", _table(
        "check-parts", ["part", "nominal", "tolerance", "implied value", "judged interval", "verdict", "note"],
        rows) + "<p>Each part alone, the others at nominal; judged on the 95 % interval widened by the "
                "other parts' tolerances.</p>"))
    if result.suspects and shows_suspects(result):
        named = {id(s) for s in named_suspects(result)}
        rows = [("named" if id(s) in named else "other",
                 [rank_mark(i, s, result), s.part,
                  _v(s.value, s.unit) if s.value is not None else "(values exchanged)" if s.kind == "swap"
                  else "-", _iv(s.ci95, s.unit),
                  f"{s.evidence:.1f}" if math.isfinite(s.evidence) else "-", s.pattern])
                for i, s in enumerate(result.suspects, start=1)]
        intro = "<p>Most likely first.</p>"
        intro += f"<p>{_e(SUSPECT_DELTA_MEANING)}; {_e(TIE_MEANING)}.</p>"
        notes = "".join(f"<li>{_e(m)}</li>" for m in (result.diagnosis.messages if result.diagnosis else ()))
        sections.append(("Suspects", intro + _table(
            "check-suspects", ["rank", "part", "implied value", "95 % interval", "ΔAICc", "pattern"], rows)
            + (f"<ul>{notes}</ul>" if notes else "")))
    env, cmp_ = result.envelope, result.envelope_comparison
    text = (f"<p>{env.trials} boards drawn {_e(env.distribution)}, plus {env.corners} worst-case corners.")
    if cmp_ is not None:
        text += (f" {100 * cmp_.fraction_outside:.1f} % of {cmp_.n_samples} samples lie outside by more than "
                 f"3 noise sigma ({_e(format_value(cmp_.margin, output_unit_of(result)))}); largest excursion "
                 f"{_e(format_value(cmp_.max_excursion, output_unit_of(result)))}.")
    sections.append(("Tolerance envelope", text + "</p>"))
    if result.resolve:
        sections.append(("To resolve", "<ul>" + "".join(f"<li>{_e(r)}</li>" for r in result.resolve) + "</ul>"))
    more = [w for w in unique_lines(result.warnings) if w not in result.fit.warnings]
    if more:
        sections.append(("Check warnings", '<ul class="warnings">' + "".join(f"<li>{_e(w)}</li>" for w in more)
                         + "</ul>"))
    return sections


def write_check_report(result, path, *, capture_provenance: Any = None, overwrite: bool = True,
                       figure_format: str = "svg"):
    """The self-contained HTML report of a board check, written atomically to ``path``.

    The fit report of fitkit.report.html titled "Board check", with the verdict
    banner, the check's sections (check_html_sections) right after the figure,
    then the behavioural fit's tables, and the figure with the tolerance envelope
    behind the capture and the suspects named in its box. Returns the path.
    """
    from .check_text import suspect_notes
    from .html import write_html_report
    return write_html_report(result.fit, path, capture_provenance=capture_provenance, overwrite=overwrite,
                             verdict=result.verdict, lead_sections=check_html_sections(result),
                             figure_format=figure_format, title="Board check",
                             plot_options={"envelope": result.envelope_volts, "notes": suspect_notes(result)})
