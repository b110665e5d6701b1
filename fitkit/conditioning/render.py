"""Plain aligned text of a StepAnalysis, for ``fitkit inspect``.

Layout of our own: a short header of channels, levels and noise, then one
block per segment with its levels and metrics as label/value rows, then the
decisions and the quality notes. Values in engineering notation
(fitkit.units.format_value).
"""

from __future__ import annotations

from .analysis import StepAnalysis
from .metrics import StepMetrics
from .segment import StepSegment
from ..units import format_value

#: The two noise figures of inspect, named apart: the whole channel's, from the
#: differences of neighbouring samples (or the quantisation floor), and one edge's,
#: from the spread of its baseline before the edge (band-limited noise makes the two differ).
CHANNEL_NOISE = "sample-to-sample noise"
EDGE_NOISE = "baseline noise before the edge"


def _rows(pairs: list[tuple[str, str]], indent: str = "  ") -> list[str]:
    width = max((len(k) for k, _ in pairs), default=0)
    return [f"{indent}{k.ljust(width)}  {v}" for k, v in pairs]


def _pct(value: float | None) -> str:
    return "n/a" if value is None else f"{value:.3g} %"


def _segment_block(number: int, seg: StepSegment, m: StepMetrics, unit: str) -> list[str]:
    direction = "rising" if seg.direction > 0 else "falling"
    title = f"Edge {number}: {direction} drive at {format_value(seg.edge_time, 's')}"
    if seg.averaged_edges > 1:
        title += f" (average of {seg.averaged_edges} edges)"
    pairs = [
        ("window", f"{format_value(float(seg.time[0]), 's')} to {format_value(float(seg.time[-1]), 's')}"
                   f" ({seg.n_points} samples, {seg.n_before_edge} before the edge)"),
        ("baseline", format_value(seg.baseline, unit)),
        ("final level", format_value(seg.final, unit) + ("" if seg.settled else " (not settled)")),
        ("step", f"{format_value(seg.step_size, unit)} (from the {seg.step_source})"),
    ]
    if seg.input_before is not None and seg.input_after is not None:
        pairs.append(("input", f"{format_value(seg.input_before, unit)} to {format_value(seg.input_after, unit)}"))
    pairs.append((EDGE_NOISE, f"{format_value(seg.noise_rms, unit)} rms"))
    lo, hi = m.reference_levels
    refs = f"{lo * 100:.0f}-{hi * 100:.0f} %"
    if m.rise_time is not None:
        pairs.append((f"rise time {refs}", format_value(m.rise_time, "s")))
    if m.fall_time is not None:
        pairs.append((f"fall time {refs}", format_value(m.fall_time, "s")))
    if m.decay_time is not None:
        pairs.append(("decay time 90-10 %", format_value(m.decay_time, "s")))
    if m.delay is not None:
        pairs.append(("delay to 50 %", format_value(m.delay, "s")))
    if m.response != "returns to baseline":
        pairs.append(("overshoot", _pct(m.overshoot_percent)))
    pairs.append(("undershoot", _pct(m.undershoot_percent)))
    if m.preshoot_percent is not None:
        pairs.append(("preshoot", _pct(m.preshoot_percent)))
    if m.peak_value is not None:
        when = "" if m.peak_time is None else f" at {format_value(m.peak_time, 's')}"
        pairs.append(("peak", format_value(m.peak_value, unit) + when))
    if m.settling_time is not None:
        settling = format_value(m.settling_time, "s")
    elif not seg.settled:
        settling = "not reached in the window"
    else:
        settling = "not measurable (the noise is larger than the band)"
    pairs.append((f"settling time {m.settling_band * 100:g} %", settling))
    if m.samples_across_transition is not None:
        count = m.samples_across_transition
        pairs.append(("samples across transition", f"{count:.1f}" if count < 100 else f"{count:.0f}"))
    return [title] + _rows(pairs)


def render_text(analysis: StepAnalysis, unit: str = "") -> str:
    """The analysis as a plain aligned text section (lines joined by newlines); ``unit`` is
    the output channel's ("" for a file that names none: values are shown without one)."""
    a = analysis
    head = [
        ("output channel", repr(a.output_channel)),
        ("input channel", "none" if a.input_channel is None else repr(a.input_channel)),
        ("edges found in", f"{a.edge_channel!r}: {len(a.edges)} edge(s), by {a.edge_method}"),
        ("state levels", f"{format_value(a.levels.low, unit)} and {format_value(a.levels.high, unit)}"
                         f" ({a.levels.method})"),
        ("sample interval", format_value(a.sample_interval, "s")),
        ("output " + CHANNEL_NOISE, f"{format_value(a.noise_rms, unit)} rms ({a.noise_method})"),
        ("quantisation step", "not visibly quantised" if a.quantisation_step is None
         else format_value(a.quantisation_step, unit)),
    ]
    lines = ["Step conditioning"] + _rows(head)
    for number, (seg, m) in enumerate(zip(a.segments, a.metrics), start=1):
        lines.append("")
        lines.extend(_segment_block(number, seg, m, unit))
    if a.decisions:
        lines += ["", "Decisions"] + [f"  - {d}" for d in a.decisions]
    lines += ["", "Quality"] + ([f"  - {f}" for f in a.flags] if a.flags else ["  no problems found"])
    return "\n".join(lines)
