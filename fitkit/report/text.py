"""The terminal table of a fit, and a quiet one-line-per-quantity form for scripts.

Layout (ours): a header naming the file, the chosen form, why it was chosen and
the runner-up; then tables of parameters, derived quantities and components
(name, value, 95 % interval, meaning); the candidate forms; diagnostics; and
warnings last, where the eye ends. Values are in engineering notation with
their units (fitkit.units, on quantiphy). A quantity the data do not
determine reads "not determined", never a number.
"""

from __future__ import annotations

import math
from typing import Sequence

from ..results import FitResult
from .quantities import COMPARISON_RMS, COMPARISON_RMS_MEANING, FINAL_RMS, not_fitted
from .quantities import (NOT_DETERMINED, QuantityRow, delta_meaning, delta_name, format_quantity, interval_text,
                         is_reportable, quantity_rows, runner_up_text, set_aside_lines, unique_lines, value_text)

_SECTION_TITLES = {"parameter": "Fitted parameters", "derived": "Derived quantities",
                   "component": "Component values"}
_INDENT = "  "


def render_fit_text(result: FitResult, quiet: bool = False) -> str:
    """The fit as text for a terminal; ``quiet=True`` gives the script form.

    The quiet form has one line per quantity, five fields separated by one
    space: ``name value ci95_low ci95_high unit``, numbers in plain SI
    (``repr``-exact to 10 significant digits), "-" for a missing interval or a
    dimensionless unit, and the value field "undetermined" (with "-" bounds)
    when the data do not determine the quantity, or when the form does not
    describe the capture (every quantity then). Derived quantities that
    repeat a parameter's name are listed once.
    """
    if quiet:
        return _quiet_lines(result)
    blocks = [_header(result)]
    if not result.describes_data:
        blocks.insert(0, _finding_block(result))
    for kind in ("parameter", "derived", "component"):
        rows = [r for r in quantity_rows(result, skip_repeated=True) if r.kind == kind]
        if rows:
            part_fit = result.circuit if kind == "component" else None
            preferred = part_fit.preferred if part_fit is not None else None
            determination = part_fit.determination if part_fit is not None else None
            title = _SECTION_TITLES[kind]
            if not result.describes_data:
                title += " of the rejected fit (not measurements: no intervals)"
            blocks.append(_quantity_table(title, rows, preferred, determination,
                                          measured=result.describes_data))
    if result.selection:
        blocks.append(_candidates_table(result))
    if result.diagnostics is not None:
        blocks.append(_diagnostics_block(result))
    notes = _circuit_notes(result)
    if notes:
        blocks.append(notes)
    if result.warnings:
        blocks.append("Warnings\n" + "\n".join(f"{_INDENT}! {w}" for w in unique_lines(result.warnings)))
    return "\n\n".join(blocks) + "\n"


# -- quiet form ----------------------------------------------------------------

def _plain(x: float | None) -> str:
    if x is None or not math.isfinite(float(x)):
        return "-"
    return format(float(x), ".10g")


def _finding_block(result: FitResult) -> str:
    """The top of a fit that does not describe its capture: the finding and what would work."""
    adequacy = result.adequacy
    lines = ["NOT A MEASUREMENT: " + adequacy.finding]
    if adequacy.fixes:
        lines.append("what fitkit found would work:")
        lines += [f"{_INDENT}- {fix}" for fix in adequacy.fixes]
    else:
        lines.append("fitkit found no form, channel or window that describes it; see the warnings below")
    return "\n".join(lines)


def _quiet_lines(result: FitResult) -> str:
    lines = []
    for row in quantity_rows(result, skip_repeated=True):
        est = row.estimate
        unit = est.unit or "-"
        if not is_reportable(est) or not result.describes_data:
            lines.append(f"{row.name} undetermined - - {unit}")
            continue
        lo, hi = est.ci95 if est.ci95 is not None else (None, None)
        lines.append(f"{row.name} {_plain(est.value)} {_plain(lo)} {_plain(hi)} {unit}")
    return "\n".join(lines) + ("\n" if lines else "")


# -- full form -----------------------------------------------------------------

def _align(rows: Sequence[Sequence[str]], indent: str = _INDENT) -> list[str]:
    """Left-align columns; the last column is not padded."""
    widths = [max(len(r[i]) for r in rows) for i in range(len(rows[0]))]
    out = []
    for r in rows:
        cells = [c.ljust(w) for c, w in zip(r[:-1], widths[:-1])] + [r[-1]]
        out.append((indent + "   ".join(cells)).rstrip())
    return out


def _header(result: FitResult) -> str:
    lines = [("file", result.file or "(in memory)"), ("form", result.model or "(none)")]
    if result.selection_reason:
        lines.append(("why", result.selection_reason))
    details = result.details
    if details.mode:
        n_edges = len(details.edges)
        lines.append(("mode", details.mode + (f", {n_edges} edge(s) fitted jointly" if n_edges else "")))
    channels = details.channels
    if channels is not None:
        lines.append(("channels", (f"input {channels.input!r}, " if channels.input else "no input, ")
                      + f"output {channels.output!r}"))
    period = details.drive_period
    if period:
        lines.append(("drive", f"square wave, edges every {format_quantity(period, 's')} "
                               f"({format_quantity(1.0 / period, 'Hz')}) on the file's time axis; if the "
                               "generator was set to another frequency, give --drive-frequency"))
    for i, line in enumerate(set_aside_lines(result)):
        lines.append(("set aside" if i == 0 else "", line))
    runner = runner_up_text(result)
    if runner:
        lines.append(("runner-up", runner))
    return "Step-response fit\n" + "\n".join(_align([[k, v] for k, v in lines]))


def _quantity_table(title: str, rows: Sequence[QuantityRow], preferred: dict | None = None,
                    determination: dict | None = None, measured: bool = True) -> str:
    """The table of one kind of quantity; ``preferred`` (components only: part ->
    {"E24": value, "E24_deviation": x, ...}, see fitkit.part_values) adds a nearest-E24 column,
    and ``determination`` (part -> {"status": "well determined", ...}) says how well
    the capture determines each part, in the meaning column."""
    table = [["name", "value", "95 % interval"] + (["nearest E24"] if preferred else []) + ["meaning"]]
    for row in rows:
        est = row.estimate
        # a rejected fit's values are shown for diagnosis, without interval
        value = value_text(est) if measured else format_quantity(est.value, est.unit)
        interval = interval_text(est) if value != NOT_DETERMINED and measured else ""
        cells = [row.name, value, interval or "-"]
        if preferred:
            p = preferred.get(row.name) if value != NOT_DETERMINED else None
            cells.append(f"{format_quantity(p['E24'], est.unit, 3)} ({100 * p['E24_deviation']:+.1f} %)"
                         if p and "E24" in p else "-")
        status = (determination or {}).get(row.name, {})
        status = status.get("status") if isinstance(status, dict) else None
        table.append(cells + [row.label + (f"; {status}" if status else "")])
    return title + "\n" + "\n".join(_align(table))


def _candidates_table(result: FitResult) -> str:
    table = [["form", "parameters", delta_name(result), COMPARISON_RMS, "set aside because"]]
    for cand in result.selection:
        chosen = " (chosen)" if cand.model == result.model else ""
        delta = (f"{cand.delta:+.1f}" if cand.converged and cand.delta is not None
                 and math.isfinite(cand.delta) else "-")
        rms = (format_quantity(cand.rms_residual, result.output_unit, 3) if cand.converged
               else "not fitted" if not_fitted(cand) else "did not converge")
        note = "" if chosen or cand.note == "chosen" else cand.note
        table.append([cand.model + chosen, str(cand.n_parameters), delta, rms, note])
    notes = [f"{_INDENT}{delta_meaning(result)}", f"{_INDENT}{COMPARISON_RMS_MEANING}"]
    return "Candidate forms\n" + "\n".join(_align(table) + notes)


def _diagnostics_block(result: FitResult) -> str:
    d = result.diagnostics
    ratio = (d.rms_residual / d.noise_rms if d.noise_rms and math.isfinite(d.noise_rms)
             and d.noise_rms > 0 else float("nan"))
    rms = f"{format_quantity(d.rms_residual, result.output_unit, 3)}"
    if math.isfinite(ratio):
        rms += f", noise estimate {format_quantity(d.noise_rms, result.output_unit, 3)} (ratio {ratio:.2f})"
    eff = (f" (effective {d.effective_samples:.0f})" if d.effective_samples is not None
           and math.isfinite(d.effective_samples) else "")
    widening = (f"x{d.ci_widening:.2f}" if d.ci_widening is not None
                and math.isfinite(d.ci_widening) else "n/a")
    rows = [
        ["samples fitted", f"{d.n_samples}{eff}"],
        *([["binned", result.details.binning]] if result.details.binning else []),
        [FINAL_RMS, rms],
        ["residual lag-1 correlation", f"{d.residual_lag1:.2f}" if math.isfinite(d.residual_lag1) else "n/a"],
        ["interval correction", d.correction or "none"],
        ["interval widening", widening],
        ["describes the capture", _describes_text(result)],
    ]
    return "Diagnostics\n" + "\n".join(_align(rows))


def _describes_text(result: FitResult) -> str:
    """The adequacy line of the diagnostics: yes, or no with the misfit and structure."""
    a = result.adequacy
    if a is None:
        return "not assessed"
    structure = f", moving/quiet residual {a.structure_ratio:.2f}" if math.isfinite(a.structure_ratio) else ""
    head = "yes" if a.describes_data else "NO"
    return f"{head} (residuals {a.misfit_ratio:.2f} x the noise{structure})"


def _circuit_notes(result: FitResult) -> str:
    """For component fits (fitkit.part_values): other solutions, what one capture
    cannot determine, whether the two solving routes agree, and how much the
    measurement chain shifts the circuit's quantities. Empty for plain fits."""
    part_fit = result.circuit
    if not result.components or part_fit is None:
        return ""
    lines: list[str] = []
    solutions = part_fit.solutions
    if len(solutions) > 1:
        lines += [f"other solutions that fit equally well ({len(solutions)} in all; the first is reported above)"]
        for sol in solutions[1:]:
            values = ", ".join(f"{n} = {format_quantity(v, result.components[n].unit, 4)}"
                               for n, v in sol.get("values", {}).items()
                               if v is not None and n in result.components)
            lines.append(_INDENT + values)
    ident = part_fit.identifiability
    if ident.get("undetermined"):
        lines += ["what one capture cannot determine"] + [_INDENT + m for m in ident.get("messages", [])]
    if part_fit.routes_agree is not None:
        form = (part_fit.behavioural_route or {}).get("form", "behavioural")
        word = "agree" if part_fit.routes_agree else "DISAGREE"
        lines.append(f"two routes: the {form} fit mapped to parts and the direct fit {word} "
                     "within their 95 % intervals")
    chain = part_fit.chain_effect
    if chain and chain.get("messages"):
        lines += ["measurement chain"] + [_INDENT + m for m in chain["messages"]]
    return ("Circuit notes\n" + "\n".join(_INDENT + line for line in lines)) if lines else ""
