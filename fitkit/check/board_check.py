"""check_capture: does this board match its design, and which part is off?

Steps (each in its own module):

1. conditioning: find the edges and cut the step segments;
2. behavioural fit (fitkit.fitting.fit_segments) with the form the design's
   order calls for: tau, f0, Q (and the DC gain when the input is measured)
   with 95 % intervals;
3. tolerance envelope (envelope.py): the responses and quantity ranges the
   design allows; the capture compared with it;
4. fault hypotheses (diagnosis.py, fitted by the engine in hypotheses.py):
   each part alone, swaps, pairs, ranked by the engine's AICc;
5. verdicts (verdicts.py): per quantity, per part, overall, and what would
   resolve an inconclusive check.
"""

from __future__ import annotations

import dataclasses
import math
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np

from ..capture import Capture
from ..circuits import transfer_function
from ..conditioning import analyse_steps
from ..errors import AverageSmearedError, FitError, FitkitError
from ..results import Estimate, FitResult
from .design import Design, load_design, resolve_limits
from ..fitting.information import has_measured_input
from ..fitting.one_response import as_one_response, worth_reading_again
from .design import analysed_circuit
from .diagnosis import Diagnosis, diagnose
from .envelope import Envelope, EnvelopeComparison, compare, tolerance_envelope
from .verdicts import (PartVerdict, QuantityVerdict, judge_parts, judge_quantities, overall_verdict,
                       resolve_hints, tolerance_widening)

#: Points on which the envelope is evaluated.
ENVELOPE_POINTS = 600
#: Relative spread of the DC gain over the tolerances below which the gain is not judged.
GAIN_MIN_SPREAD = 0.01
#: Vertical gain accuracy of a scope channel, relative (typical 1-2 %; common practice, no source).
SCOPE_GAIN_ACCURACY = 0.02


@dataclass(frozen=True)
class CheckResult:
    """Everything the board check found.

    verdict: "pass", "fail" or "inconclusive".
    summary: one line for logs and batch tables.
    components: per-part verdicts (PartVerdict), design order.
    quantities: per-quantity verdicts (QuantityVerdict).
    suspects: ranked fault hypotheses (diagnosis.Suspect), best first; empty
        when the diagnosis could not run.
    envelope: the tolerance envelope; envelope_comparison: the capture against it.
    resolve: what would resolve an inconclusive verdict.
    warnings: plain-language warnings (conditioning, fit, diagnosis).
    fit: the behavioural FitResult.
    diagnosis: the full Diagnosis (None when it could not run).
    envelope_volts: (time s, low V, high V) of the first segment's envelope, for plots.
    """

    file: str
    design: Design
    verdict: str
    summary: str
    components: tuple[PartVerdict, ...]
    quantities: tuple[QuantityVerdict, ...]
    suspects: tuple
    envelope: Envelope
    envelope_comparison: EnvelopeComparison | None
    resolve: tuple[str, ...]
    warnings: tuple[str, ...]
    fit: FitResult
    diagnosis: Diagnosis | None
    measured_input: bool
    envelope_volts: tuple[np.ndarray, np.ndarray, np.ndarray] | None = field(default=None, repr=False)
    #: the channels' roles: {"input": name or None, "output": name, "why": [decisions]}
    channels: dict[str, Any] = field(default_factory=dict)

    def to_dict(self) -> dict[str, Any]:
        env = self.envelope.to_dict()
        if self.envelope_comparison is not None:
            env["capture"] = self.envelope_comparison.to_dict()
        return {
            "file": self.file, "design": self.design.name, "design_file": self.design.path,
            "verdict": self.verdict, "summary": self.summary,
            "model_driven_by": "measured input" if self.measured_input else "ideal step (no input channel)",
            "channels": dict(self.channels),
            "components": {c.part: c.to_dict() for c in self.components},
            "quantities": {q.name: q.to_dict() for q in self.quantities},
            "suspects": [s.to_dict() for s in self.suspects],
            "diagnosis": [] if self.diagnosis is None else list(self.diagnosis.messages),
            "envelope": env, "resolve": list(self.resolve), "warnings": list(self.warnings),
            "fit": self.fit.to_dict(),
        }

    def plot(self, path=None, ax=None):
        """The capture and fit with the tolerance envelope behind and the suspects named
        (fitkit.report.check_plots.plot_check)."""
        from ..report.check_plots import plot_check
        return plot_check(self, path=path, ax=ax)

    def to_frame(self):
        """The check as a pandas DataFrame, one row per behavioural quantity, part
        and suspect: kind, name, value, ci95_low, ci95_high (SI units), unit,
        limit_low, limit_high, nominal, verdict, note (fitkit.report.check_tables)."""
        import pandas as pd
        from ..report.check_tables import check_records
        return pd.DataFrame(check_records(self))

    def _repr_html_(self) -> str:
        """Notebook view: verdict, check tables, fit tables and the figure (PNG) with
        the tolerance envelope, as an HTML fragment."""
        from ..report.check_tables import check_html_sections
        from ..report.check_text import suspect_notes
        from ..report.html import render_html_fragment
        return render_html_fragment(self.fit, verdict=self.verdict, lead_sections=check_html_sections(self),
                                    figure_format="png", title="Board check",
                                    plot_options={"envelope": self.envelope_volts,
                                                  "notes": suspect_notes(self)})


def behavioural_form(design: Design, measured_input: bool, envelope: Envelope | None = None) -> str:
    """The step-response form matching the design's order and kind.

    A second-order all-pole stage whose every board in the tolerance envelope
    has Q <= 1/2 (real poles: zeta >= 1, the standard second-order result) is
    fitted with the two-real-pole form, whose Q cannot leave that range (an
    equal-stage buffered RC sits at Q = 1/2 exactly, where the second-order
    form lets noise carry Q above it); any other second-order stage with the
    second-order form."""
    tf = transfer_function(analysed_circuit(design.circuit, measured_input))
    zeros_at_origin = len(tf.num) > 1 and tf.num[-1] == 0
    if tf.order == 1:
        return "first-order-decay" if zeros_at_origin or abs(tf.dc_gain) < 1e-9 else "first-order"
    if tf.order == 2 and len(tf.num) == 1:
        q_range = envelope.ranges.get("Q") if envelope is not None else None
        real_poles = q_range is not None and q_range[1] <= 0.5 * (1 + 1e-9)
        return "two-real-pole" if real_poles else "second-order"
    return "auto"


def check_capture(capture: Capture, design: Design | str | Path, *, input: str | int | None = None,
                  output: str | int | None = None, average: bool = False, envelope_trials: int = 200,
                  seed: int = 0, edge_time: float | None = None) -> CheckResult:
    """Check one capture against a design (a Design or a design file path).

    Raises FitkitError (DesignError, CaptureError, ConditioningError, FitError)
    when the inputs cannot be used; a board that fails is a result, not an error.
    """
    if not isinstance(design, Design):
        design = load_design(design)
    analysis = analyse_steps(capture, input=input, output=output, edge_time=edge_time, average=average)

    def run(reading):
        return _checked(capture, design, reading, envelope_trials, seed, "")
    try:
        result = run(analysis)
    except AverageSmearedError as err:  # the average's alignment would bias it: every edge jointly
        analysis = analyse_steps(capture, input=input, output=output, edge_time=edge_time)
        result = _checked(capture, design, analysis, envelope_trials, seed, err.message)
    except FitError:  # the edges found in the output could not be fitted: one response's swings?
        other = as_one_response(capture, analysis, None, edge_time, run, _fit_of)
        if other is None:
            raise
        return other
    if worth_reading_again(result.fit):  # the output's return may be the response's own, not a drive edge
        return as_one_response(capture, analysis, result.fit, edge_time, run, _fit_of) or result
    return result


def _fit_of(result: CheckResult) -> FitResult:
    return result.fit


def _checked(capture: Capture, design: Design, analysis, envelope_trials: int, seed: int,
             smeared: str) -> CheckResult:
    """The check of one conditioning of the capture; ``smeared``: why the coherent
    average was set aside for these raw edges ("" when it was not)."""
    file = capture.provenance.path
    segments = analysis.segments
    measured = has_measured_input(segments)
    warnings = ([f"--average not used: {smeared}; every edge checked jointly instead"] if smeared else []) \
        + list(analysis.flags)
    span = _record_after_edge(segments)
    envelope = tolerance_envelope(design, np.linspace(0.0, span, ENVELOPE_POINTS), trials=envelope_trials,
                                  seed=seed, measured_input=measured)
    fit, estimates = _behaviour(design, segments, measured, file, warnings, envelope)
    limits = _default_limits(envelope, measured)
    design_limits = resolve_limits(design, envelope.nominal_quantities)
    limits.update(design_limits)
    quantities = judge_quantities(estimates, limits, list(design_limits), envelope.nominal_quantities)
    described = describes_capture(fit)[0]
    if not described:  # the rejected fit's numbers are not measurements
        quantities = tuple(dataclasses.replace(q, ci95=None, verdict="not determined") for q in quantities)
    comparison, env_volts = _compare(envelope, segments, fit, measured)
    diagnosis = None
    try:
        diagnosis = diagnose(design, segments, file=file, measured_input=measured)
    except FitkitError as exc:
        warnings.append(f"fault diagnosis did not run: {exc.message}")
    components = _judge_parts(design, diagnosis, measured, warnings)
    verdict = overall_verdict(quantities, components)
    verdict = _adequacy_verdict(verdict, fit, design, warnings)
    if comparison is not None and comparison.fraction_outside > 0.2 and verdict == "pass":
        warnings.append(f"{100 * comparison.fraction_outside:.0f} % of the samples lie outside the tolerance "
                        "envelope by more than 3 noise sigma although every quantity is within its limits")
    resolve = _resolve(verdict, design, quantities, components, diagnosis, measured, analysis, span)
    summary = _summary(verdict, quantities, diagnosis, design, described)
    return CheckResult(file, design, verdict, summary, components, quantities,
                       diagnosis.suspects if diagnosis else (), envelope, comparison, tuple(resolve),
                       tuple(dict.fromkeys(warnings)), fit, diagnosis, measured, env_volts,
                       {"input": analysis.input_channel, "output": analysis.output_channel,
                        "why": [d for d in analysis.decisions if "channel" in d]})


def _behaviour(design: Design, segments, measured: bool, file: str, warnings: list[str], envelope: Envelope):
    """The behavioural fit, made exactly as `fitkit fit --form FORM` makes it (the same
    engine call, measured-input mode when the capture has an input channel), with the
    form the design's order calls for; (FitResult, estimates judged)."""
    from ..fitting import fit_segments
    form = behavioural_form(design, measured, envelope)
    try:
        fit = fit_segments(segments, form, file=file)
    except AverageSmearedError:
        raise
    except FitkitError as exc:
        if form == "auto":
            raise
        warnings.append(f"the design's {form} response does not describe this capture ({exc.message}); "
                        "check that the design file belongs to this stage")
        fit = fit_segments(segments, "auto", file=file)
    warnings += list(fit.warnings)
    estimates = {k: v for k, v in {**fit.derived, **fit.parameters}.items() if k in ("tau", "f0", "Q")}
    if measured:
        estimates["gain"] = _level_gain(segments)
    return fit, estimates


def describes_capture(fit: FitResult) -> tuple[bool, str]:
    """Whether the behavioural fit describes the capture (the fitting layer's adequacy
    record, ``fit.adequacy.describes_data``), and its words; (True, "") when the fit
    carries no such record. The one place the check reads it."""
    if fit.adequacy is None:
        return True, ""
    return fit.describes_data, fit.adequacy.finding


def _adequacy_verdict(verdict: str, fit: FitResult, design: Design, warnings: list[str]) -> str:
    """An inadequate fit cannot judge the board: the verdict is then inconclusive."""
    ok, words = describes_capture(fit)
    if ok:
        return verdict
    warnings.insert(0, "the fitted response does not describe the capture" + (f" ({words})" if words else "")
                    + f"; no verdict against {design.name!r} can rest on it")
    return "inconclusive"


def _judge_parts(design: Design, diagnosis: Diagnosis | None, measured: bool, warnings: list[str]):
    widening = tolerance_widening(design, gain_known=measured)
    if diagnosis is None:
        return judge_parts(design, {}, (), tuple(design.parts), widening)
    warnings += [m for m in diagnosis.messages if m.startswith("no single part")]
    tied = [(s.kind, s.parts) for s in diagnosis.suspects if s.tied]
    return judge_parts(design, diagnosis.estimates, diagnosis.leaders, diagnosis.undetermined, widening, tied)


def _record_after_edge(segments) -> float:
    """Seconds of record after the first segment's edge (1.0 when there is none)."""
    seg = segments[0]
    after = seg.time[seg.time >= seg.edge_time] - seg.edge_time
    return float(after.max()) if after.size else 1.0


def _resolve(verdict: str, design: Design, quantities, components, diagnosis, measured: bool, analysis,
             span: float) -> tuple[str, ...]:
    if verdict != "inconclusive":
        return ()
    tied = [s.part for s in (diagnosis.suspects if diagnosis else ()) if s.tied]
    tf = transfer_function(analysed_circuit(design.circuit, measured))
    poles = np.abs(tf.poles.real)
    poles = poles[poles > 0]
    return resolve_hints(quantities, components, tied=tied if len(tied) > 1 else (),
                         sample_interval=analysis.sample_interval,
                         fastest_time=float(1 / poles.max()) if poles.size else None,
                         record_length=span, slowest_time=float(1 / poles.min()) if poles.size else None,
                         edges=len(analysis.segments))


def _level_gain(segments) -> Estimate:
    """DC gain from the settled levels: (final - baseline) / (input step), averaged over
    the segments; the interval holds the noise of the levels and SCOPE_GAIN_ACCURACY."""
    ratios, rel = [], []
    for s in segments:
        step_in = s.input_after - s.input_before
        ratios.append((s.final - s.baseline) / step_in)
        rel.append(3 * s.noise_rms / max(abs(s.final - s.baseline), 1e-30))
    g = float(np.mean(ratios))
    half = abs(g) * (SCOPE_GAIN_ACCURACY + float(np.mean(rel)))
    return Estimate("gain", g, half / 1.96, (g - half, g + half), "", "settled levels; scope gain accuracy", True)


def _default_limits(envelope: Envelope, measured: bool) -> dict[str, tuple[float, float]]:
    """The envelope's ranges as limits. The DC gain is judged only when the input is
    measured and the tolerances move it by more than GAIN_MIN_SPREAD (a passive
    filter's gain is set by the probe, not the parts); its range is then widened
    (the scope's vertical gain error is in the measured gain's interval instead)."""
    limits = dict(envelope.ranges)
    g = limits.pop("gain", None)
    if measured and g is not None:
        mid = 0.5 * (g[0] + g[1])
        if mid != 0 and abs(g[1] - g[0]) / abs(mid) > GAIN_MIN_SPREAD:
            limits["gain"] = g
    return limits


def _fitted_edge(fit: FitResult, index: int, seg) -> tuple[float, float, float | None]:
    """(edge time s, baseline V, output step V or None) of edge ``index`` as the
    behavioural fit placed it; the conditioning's values where the fit has none."""
    edges = fit.details.edges
    levels = edges[index] if index < len(edges) else {}

    def value(name: str):
        est = levels.get(name)
        return float(est.value) if est is not None and math.isfinite(est.value) else None

    t0, baseline, step = value("t0"), value("baseline"), value("step")
    return (seg.edge_time if t0 is None else t0, seg.baseline if baseline is None else baseline, step)


def _compare(envelope: Envelope, segments, fit: FitResult, measured: bool):
    """The capture against the envelope, aligned on the fitted edge time, baseline and
    step of each edge (the envelope is per volt of input step)."""
    results = []
    env_volts = None
    gain = envelope.nominal_quantities.get("gain", 1.0)
    for i, seg in enumerate(segments):
        edge, baseline, out_step = _fitted_edge(fit, i, seg)
        if measured:
            step = seg.input_after - seg.input_before
        else:
            out_step = seg.step_size if out_step is None else out_step
            step = out_step / gain if math.isfinite(gain) and abs(gain) > 1e-9 else out_step
        if not math.isfinite(step) or step == 0:
            continue
        results.append(compare(envelope, seg.time - edge, seg.output, baseline=baseline, step=step,
                               noise_rms=seg.noise_rms))
        if env_volts is None:
            lo = baseline + step * envelope.low
            hi = baseline + step * envelope.high
            env_volts = (edge + envelope.time, np.minimum(lo, hi), np.maximum(lo, hi))
    if not results:
        return None, None
    n = sum(r.n_samples for r in results)
    frac = sum(r.fraction_outside * r.n_samples for r in results) / n if n else float("nan")
    return EnvelopeComparison(frac, max(r.max_excursion for r in results), results[0].margin, n), env_volts


def _fmt(v: float, unit: str) -> str:
    from ..units import format_value
    return format_value(v, unit)


def _summary(verdict: str, quantities, diagnosis: Diagnosis | None, design: Design, described: bool = True) -> str:
    if not described:
        return f"{verdict}; the fitted response does not describe the capture: its numbers are not measurements"
    bits = [verdict]
    off = [q for q in quantities if q.verdict != "within"]
    if off:
        bits.append(", ".join(f"{q.name} {_fmt(q.value, q.unit) if q.value is not None else '?'} "
                              f"{q.verdict} [{_fmt(q.low, q.unit)}, {_fmt(q.high, q.unit)}]" for q in off))
    elif quantities:
        bits.append("behaviour within limits (" + ", ".join(q.name for q in quantities) + ")")
    if diagnosis is not None and verdict != "pass" and diagnosis.suspects:
        lead = [s for s in diagnosis.suspects if s.tied]
        text = " or ".join(s.part + (f" {_fmt(s.value, s.unit)}" if s.value is not None else "") for s in lead)
        bits.append(f"suspect {text}: {lead[0].pattern}" if lead else
                    "no single part or swap explains the capture")
    return "; ".join(bits)
