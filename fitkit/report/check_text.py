"""The board check as text: verdict first, then behaviour, parts, suspects in order.

Layout (ours): a verdict banner with the one-line summary; the behavioural
quantities (measured value, 95 % interval, allowed range, where the range
comes from, verdict); the parts, each judged alone with the others at
nominal; the suspects, most likely first, with the evidence (AICc
difference from the best, scaled for correlated noise) and the fault
pattern; the capture against the tolerance envelope; what would resolve an
inconclusive check; warnings last.
"""

from __future__ import annotations

import math

from ..units import format_interval, format_value

QUANTITY_WORDS = {"tau": "time constant", "f0": "natural frequency", "Q": "quality factor", "gain": "DC gain"}
BANNER = {"pass": "PASS - the board matches its design",
          "fail": "FAIL - the board does not match its design",
          "inconclusive": "INCONCLUSIVE - this capture cannot decide"}


def _v(x, unit: str) -> str:
    return "-" if x is None else format_value(x, unit)


def _iv(ci, unit: str) -> str:
    return "-" if ci is None else format_interval(ci[0], ci[1], unit, digits=4)


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
             "", f"  {BANNER[result.verdict]}", f"  {result.summary}", ""]
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
        lines.append(f"  {c.part:<8}{_v(c.nominal, c.unit):<13}{c.tolerance:<11}{_v(c.value, c.unit):<13}"
                     f"{_iv(c.judged_interval, c.unit):<31}{c.verdict}" + (f"  ({c.note})" if c.note else ""))
    lines.append("")
    if result.suspects and shows_suspects(result):
        title = ("single-part explanations, best first (a part is judged outside)"
                 if result.verdict == "pass" else "suspects, most likely first")
        lines.append(title + " (evidence: AICc above the best, scaled for correlated noise;"
                     " below 2 = equally good; '=' marks the tied leaders)")
        for i, s in enumerate(result.suspects, start=1):
            value = (f"{_v(s.value, s.unit)} {_iv(s.ci95, s.unit)}" if s.value is not None
                     else "(values exchanged)" if s.kind == "swap" else "-")
            lead = "=" if s.tied else " "
            evidence = f"{s.evidence:8.1f}" if math.isfinite(s.evidence) else f"{'-':>8}"
            lines.append(f"  {i:>2}{lead} {s.part:<12} {value:<40} evidence {evidence}   {s.pattern}")
        if result.diagnosis is not None:
            lines += [f"  - {m}" for m in result.diagnosis.messages]
        lines.append("")
    env, cmp_ = result.envelope, result.envelope_comparison
    text = (f"tolerance envelope: {env.trials} boards drawn {env.distribution}, plus {env.corners} worst-case corners")
    lines.append(text)
    if cmp_ is not None:
        lines.append(f"  capture: {100 * cmp_.fraction_outside:.1f} % of {cmp_.n_samples} samples outside by more than "
                     f"3 noise sigma ({format_value(cmp_.margin, 'V')}); largest excursion "
                     f"{format_value(cmp_.max_excursion, 'V')}")
    if result.resolve:
        lines += ["", "to resolve:"] + [f"  - {r}" for r in result.resolve]
    lines += ["", "warnings:" + ("" if result.warnings else " none")]
    lines += [f"  - {w}" for w in result.warnings]
    return "\n".join(lines)


def shows_suspects(result) -> bool:
    """Quiet on a pass: the suspects are shown when the board does not pass or a part is
    judged outside (they stay in the JSON either way)."""
    return result.verdict != "pass" or any(c.verdict == "outside" for c in result.components)


def suspect_notes(result, limit: int = 3) -> list[str]:
    """Short lines for a plot's box: the verdict, then the leading suspects (none when the
    board passes), each with its implied value and the first clause of its fault pattern."""
    notes = [f"check: {result.verdict.upper()}"]
    if result.verdict == "pass":
        return notes
    named = [s for s in result.suspects if s.tied or s.explains][:limit]
    if named:
        notes.append("suspects, most likely first:")
    for s in named:
        value = format_value(s.value, s.unit) if s.value is not None else "swapped"
        pattern = s.pattern.split(":")[0].split(",")[0].split("(")[0].strip()
        notes.append(f"{'=' if s.tied else ' '} {s.part} {value}: {pattern}")
    return notes
