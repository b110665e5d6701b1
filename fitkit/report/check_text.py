"""The board check as text: verdict first, then behaviour, parts, suspects in order.

Layout (ours): a verdict banner with the one-line summary; the behavioural
quantities (measured value, 95 % interval, allowed range, where the range
comes from, verdict); the parts, each judged alone with the others at
nominal; the suspects, most likely first, with their ΔAICc (AICc
difference from the best, counted on the effective samples of correlated
noise) and the fault pattern; the capture against the tolerance envelope; what would resolve an
inconclusive check; warnings last.
"""

from __future__ import annotations

import math
import re

from ..units import format_interval, format_value
from .quantities import unique_lines

QUANTITY_WORDS = {"tau": "time constant", "f0": "natural frequency", "Q": "quality factor", "gain": "DC gain"}
BANNER = {"pass": "PASS - the board matches its design",
          "fail": "FAIL - the board does not match its design",
          "inconclusive": "INCONCLUSIVE - this capture cannot decide"}


def _v(x, unit: str) -> str:
    return "-" if x is None else format_value(x, unit)


def _iv(ci, unit: str) -> str:
    return "-" if ci is None else format_interval(ci[0], ci[1], unit, digits=4)


#: The suspects' ΔAICc and what it means, said once per report (text, HTML).
SUSPECT_DELTA_MEANING = ("ΔAICc: AICc minus the best suspect's, counted on the effective samples of "
                         "correlated noise; bigger = worse fit; below 2 = as good as the best")
#: The one mark of suspects tied for first place: "1=" (and "1=" for each of them).
TIE_MEANING = "'1=' marks suspects tied for first place"


def rank_mark(rank: int, suspect, result) -> str:
    """A suspect's rank as every report shows it: "1=" for the suspects tied for first
    place (when more than one is), else the bare rank."""
    tied = sum(1 for s in result.suspects if s.tied) > 1
    return "1=" if tied and suspect.tied else str(rank)


def output_unit_of(result) -> str:
    """The output channel's unit ("" for a file that names none)."""
    fit = getattr(result, "fit", None)
    return fit.output_unit if fit is not None else "V"


def summary_after_banner(result) -> str:
    """The one-line summary under the verdict banner, without the verdict word the banner
    has just said ("fail; f0 ... outside ..." -> "f0 ... outside ...")."""
    head = f"{result.verdict}; "
    return result.summary[len(head):] if result.summary.startswith(head) else result.summary


def percent_text(text: str) -> str:
    """A tolerance as written in a design file ("1%", "+-5%") in SI style ("1 %", "+-5 %")."""
    return re.sub(r"(\d)\s*%", r"\1 %", text)


def _channels_line(result) -> list[str]:
    """The channels' roles, as the fit's text says them (empty for a result without them)."""
    channels = getattr(result, "channels", None) or {}
    if not channels.get("output"):
        return []
    drive = f"input {channels['input']!r}, " if channels.get("input") else "no input, "
    return [f"  channels: {drive}output {channels['output']!r}"]


def render_check_text(result) -> str:
    """The CheckResult as a readable report (engineering notation, SI units)."""
    d = result.design
    lines = [f"board check of {result.file or '(in memory)'}",
             f"  design: {d.name}" + (f" ({d.path})" if d.path else ""),
             f"  model driven by: {'the measured input' if result.measured_input else 'an ideal step (no input channel)'}"
             + (f"; fixture: {d.circuit.chain.describe()}" if not d.circuit.chain.is_empty else ""),
             *_channels_line(result),
             "", f"  {BANNER[result.verdict]}", f"  {summary_after_banner(result)}", ""]
    if result.quantities:
        lines.append("behaviour                  measured     95 % interval                  allowed range"
                     "                  from                 verdict")
        for q in result.quantities:
            label = f"{q.name} ({QUANTITY_WORDS.get(q.name, q.name)})"
            lines.append(f"  {label:<25}{_v(q.value, q.unit):<13}{_iv(q.ci95, q.unit):<31}"
                         f"{_iv((q.low, q.high), q.unit):<31}{q.limit_source:<21}{q.verdict}")
        lines.append("")
    lines.append("parts (each alone, others at nominal; judged on the interval widened by the others' tolerances)")
    lines.append("  part    nominal      tol.       implied      judged interval                verdict")
    for c in result.components:
        lines.append(f"  {c.part:<8}{_v(c.nominal, c.unit):<13}{percent_text(c.tolerance):<11}{_v(c.value, c.unit):<13}"
                     f"{_iv(c.judged_interval, c.unit):<31}{c.verdict}" + (f"  ({c.note})" if c.note else ""))
    lines.append("")
    if result.suspects and shows_suspects(result):
        title = ("single-part explanations, best first (a part is judged outside)"
                 if result.verdict == "pass" else "suspects, most likely first")
        lines.append(title)
        lines.append(f"  rank  {'part':<12} {'implied value, 95 % interval':<40} {'ΔAICc':>8}   pattern")
        for i, s in enumerate(result.suspects, start=1):
            value = (f"{_v(s.value, s.unit)} {_iv(s.ci95, s.unit)}" if s.value is not None
                     else "(values exchanged)" if s.kind == "swap" else "-")
            delta = f"{s.evidence:8.1f}" if math.isfinite(s.evidence) else f"{'-':>8}"
            lines.append(f"  {rank_mark(i, s, result):<5} {s.part:<12} {value:<40} {delta}   {s.pattern}")
        lines.append(f"  ({SUSPECT_DELTA_MEANING}; {TIE_MEANING})")
        if result.diagnosis is not None:
            lines += [f"  - {m}" for m in result.diagnosis.messages]
        lines.append("")
    env, cmp_ = result.envelope, result.envelope_comparison
    text = (f"tolerance envelope: {env.trials} boards drawn {env.distribution}, plus {env.corners} worst-case corners")
    lines.append(text)
    if cmp_ is not None:
        lines.append(f"  capture: {100 * cmp_.fraction_outside:.1f} % of {cmp_.n_samples} samples outside by more than "
                     f"3 noise sigma ({format_value(cmp_.margin, output_unit_of(result))}); largest excursion "
                     f"{format_value(cmp_.max_excursion, output_unit_of(result))}")
    if result.resolve:
        lines += ["", "to resolve:"] + [f"  - {r}" for r in result.resolve]
    lines += ["", "warnings:" + ("" if result.warnings else " none")]
    lines += [f"  - {w}" for w in unique_lines(result.warnings)]
    return "\n".join(lines)


def shows_suspects(result) -> bool:
    """Quiet on a pass: the suspects are shown when the board does not pass or a part is
    judged outside (they stay in the JSON either way)."""
    return result.verdict != "pass" or any(c.verdict in ("outside", "one of tied outside") for c in result.components)


def suspect_notes(result, limit: int = 3) -> list[str]:
    """Short lines for a plot's box: the verdict, then the leading suspects (none when the
    board passes), each with its implied value and the first clause of its fault pattern."""
    notes = [f"check: {result.verdict.upper()}"]
    if result.verdict == "pass":
        return notes
    named = [(i, s) for i, s in enumerate(result.suspects, start=1) if s.tied or s.explains][:limit]
    if named:
        notes.append("suspects, most likely first:")
    for i, s in named:
        value = format_value(s.value, s.unit) if s.value is not None else "swapped"
        pattern = s.pattern.split(":")[0].split(",")[0].split("(")[0].strip()
        notes.append(f"{rank_mark(i, s, result)} {s.part} {value}: {pattern}")
    return notes
