"""Fault hypotheses: which part, changed alone, explains the capture.

The scheme, in the order it runs (the fits are the engine's, hypotheses.py):

1. The all-nominal board is fitted (every part at its design value; levels
   and, with no input channel, the edge time free).
2. Each toleranced part that the capture determines on its own
   (identifiability, levels free) is fitted alone with every other part at
   nominal, by the same engine as `fitkit fit --topology`: implied value and
   95 % interval. The two best of these, when outside their tolerance, are
   refitted with one other part free within its tolerance (hypotheses.within_tolerance_refit), because a
   neighbour inside its band can pull a one-part fit far off.
3. Two parts of the same kind with different nominal values are tried
   swapped (each on the other's pads), with no free part.
4. Hypotheses are ranked by the engine's AICc over the same samples, with
   the sum-of-squares term taken over the best fit's effective samples (the
   engine's correlated-residual measure; fitkit.fitting.information.corrected_aic's
   variance inflation) and each parameter charged in full, because scope
   noise is band-limited and neighbouring samples are not independent: the
   evidence between two is the difference of that criterion. (Scaling the
   whole difference instead charged an extra parameter a third of its cost,
   and a suspect with a neighbour moved within tolerance beat the part
   interchangeable with it.)
5. Hypotheses within ``TIE_EVIDENCE`` of the best are tied leaders: the
   capture cannot tell them apart (in an equal-part ladder a decade-low R1
   and a decade-low C2 give the same output). All of them are named.
6. When the best still leaves a residual above ``EXPLAINED_RATIO`` times the
   noise, no single part explains the capture; pairs of the leading suspects
   are then fitted, and the best pair is shown when the capture determines
   both parts and it is decisively better.

A hypothesis whose fit fails, or whose part ran beyond any plausible value
(hypotheses.PLAUSIBLE_SPAN), "does not explain the capture" and reports no
value: a bound of the search is never reported as a measurement. Patterns of real
assembly faults are read from the implied value against the nominal value
(``fault_pattern``).
"""

from __future__ import annotations

import itertools
import math
from dataclasses import dataclass, field
from typing import Any, Mapping, Sequence

from ..circuits import identifiability
from ..circuits.preferred import candidates_around
from ..conditioning.segment import StepSegment
from ..errors import FitError
from ..fitting.adequacy import capture_noise
from ..fitting.information import has_measured_input
from ..results import Estimate, json_number
from .design import Design, PartSpec
from .hypotheses import (HypothesisFit, final_intervals, fit_fixed, fit_free, fit_single, unexplained,
                         within_tolerance_refit)
from .ties import swap_reason, tie_reason, tie_sentence

#: Scaled AICc difference within which hypotheses are equally good (Burnham and
#: Anderson, Model Selection and Multimodel Inference, 2002: differences below 2
#: carry substantial support).
TIE_EVIDENCE = 2.0
#: Residual rms above this multiple of the noise: the hypothesis does not explain the capture.
EXPLAINED_RATIO = 1.5
#: A pair of parts is shown only when it beats the best single change by this scaled AICc.
PAIR_EVIDENCE = 10.0
#: How many of the best single-part hypotheses are refitted with a neighbour free within tolerance.
REFINED_SINGLES = 2
UNITS = {"resistor": "Ohm", "capacitor": "F", "inductor": "H"}


@dataclass(frozen=True)
class Suspect:
    """A ranked explanation as reported.

    part: board designator(s) ("C22", or "C31<->C32" for a swap).
    parts: circuit part names.
    value, ci95: implied value and 95 % interval (SI), None for a swap.
    nominal: design value (SI) of the (first) part.
    evidence: AICc difference from the best hypothesis on the effective samples (0 for the best).
    against_nominal: AICc gain over the all-nominal board on the effective samples (positive = better).
    rms_residual: V.  pattern: plain words.  tied: among the leaders.
    explains: residual within EXPLAINED_RATIO of the noise (never for a fit that ran away).
    """

    part: str
    parts: tuple[str, ...]
    kind: str
    value: float | None
    ci95: tuple[float, float] | None
    nominal: float | None
    unit: str
    evidence: float
    against_nominal: float
    rms_residual: float
    pattern: str
    tied: bool
    explains: bool

    def to_dict(self) -> dict[str, Any]:
        return {"part": self.part, "circuit_parts": list(self.parts), "hypothesis": self.kind,
                "value": json_number(self.value),
                "ci95": None if self.ci95 is None else [json_number(self.ci95[0]), json_number(self.ci95[1])],
                "nominal": json_number(self.nominal), "unit": self.unit,
                "delta_aicc": json_number(self.evidence),
                "all_nominal_delta_aicc": json_number(self.against_nominal),
                "rms_residual": json_number(self.rms_residual), "pattern": self.pattern,
                "tied_leader": self.tied, "explains_capture": self.explains}


@dataclass(frozen=True)
class Diagnosis:
    """The ranked hypotheses and what they say.

    suspects: ranked (best first), single parts, swaps and (when shown) a pair.
    nominal: the all-nominal board's fit (None when it could not be made).
    leaders: circuit part names tied for best.
    explained: True when the best single change explains the capture to the noise.
    noise_rms: V, the noise the residuals are compared with.
    undetermined: parts the capture cannot determine alone.
    estimates: single-part Estimates by circuit part name (for the part verdicts).
    messages: plain-language sentences.
    """

    suspects: tuple[Suspect, ...]
    nominal: HypothesisFit | None
    leaders: tuple[str, ...]
    explained: bool
    noise_rms: float
    undetermined: tuple[str, ...]
    estimates: Mapping[str, Estimate]
    messages: tuple[str, ...] = ()
    hypotheses: tuple[HypothesisFit, ...] = field(default=(), repr=False)

    def to_dict(self) -> dict[str, Any]:
        return {"suspects": [s.to_dict() for s in self.suspects], "leaders": list(self.leaders),
                "single_part_explains": self.explained, "noise_rms": json_number(self.noise_rms),
                "not_determined": list(self.undetermined), "messages": list(self.messages)}


def fault_pattern(spec: PartSpec, value: float, ci95: tuple[float, float] | None) -> str:
    """Plain words for what an implied value looks like against the design.

    * within tolerance: the interval overlaps the tolerance band.
    * a decade off: v/n within a factor 1.4 of 10 or 1/10 (a 4.7 nF part
      where 47 nF belongs).
    * neighbouring preferred value: v sits (within its interval, or within
      the part's tolerance) on the next value of the part's E series up or
      down from n.
    * another preferred value: on the series grid but further away.
    * drifted: off the preferred grid and outside tolerance, as from ageing.
    Common practice, no source, for the classes; IEC 60063 for the series.
    """
    lo, hi = ci95 if ci95 else (value, value)
    if hi >= spec.low and lo <= spec.high:
        return "within tolerance"
    ratio = value / spec.nominal
    for decade in (10.0, 0.1):
        if abs(math.log10(ratio / decade)) <= math.log10(1.4):
            direction = "high" if decade > 1 else "low"
            return f"a decade {direction}: a wrong-value part ({ratio:.3g} x nominal)"
    grid = candidates_around(value, spec.series)
    tol = spec.relative_half_width
    on_grid = [g for g in grid if (lo <= g <= hi) or abs(value / g - 1) <= tol]
    below, above = _grid_neighbours(spec.nominal, spec.series)
    for g in on_grid:
        if math.isclose(g, below, rel_tol=1e-9) or math.isclose(g, above, rel_tol=1e-9):
            word = "up" if g > spec.nominal else "down"
            return f"the neighbouring {spec.series} value {word} ({_eng(g, UNITS.get(spec.kind, ''))}): a wrong-value part"
    if on_grid:
        return f"another {spec.series} value ({_eng(on_grid[0], UNITS.get(spec.kind, ''))}): a wrong-value part"
    pct = 100 * (ratio - 1)
    return f"drifted {pct:+.0f} % beyond tolerance, off the {spec.series} grid (ageing or damage)"


def _grid_neighbours(nominal: float, series: str) -> tuple[float, float]:
    grid = candidates_around(nominal, series)
    below = max((g for g in grid if g < nominal * (1 - 1e-9)), default=nominal)
    above = min((g for g in grid if g > nominal * (1 + 1e-9)), default=nominal)
    return below, above


def _eng(v: float, unit: str = "") -> str:
    from ..units import format_value
    return format_value(v, unit)


def _noise(fits: Sequence[HypothesisFit], segments: Sequence[StepSegment]) -> float:
    """The output noise (V) of the engine's fit diagnostics, else the engine's own
    estimate from the segments (fitkit.fitting.step_fit.capture_noise)."""
    for h in fits:
        d = h.result.diagnostics if h.result is not None else None
        if d is not None and math.isfinite(d.noise_rms) and d.noise_rms > 0:
            return float(d.noise_rms)
    return capture_noise(segments)


def _variance_inflation(fits: Sequence[HypothesisFit]) -> float:
    """Samples per effective sample of the best fit the engine corrected for correlated
    residuals (1 .. 1000; HypothesisFit.variance_inflation)."""
    for h in fits:
        if h.estimates and h.result is not None and h.result.diagnostics is not None:
            return min(h.variance_inflation, 1e3)
    return 1.0


def _rank_key(h: HypothesisFit, inflation: float = 1.0):
    return (h.runaway, h.effective_aicc(inflation))


def _single_hypotheses(design: Design, segments, measured: bool, noise: float, file: str):
    """(single-part fits, parts the capture cannot determine alone, messages)."""
    fits, undetermined, messages = [], [], []
    for part in design.parts:
        circuit = design.circuit.with_unknowns([part])
        if not identifiability(circuit, [part], gain_known=False).all_determined:
            undetermined.append(part)
            continue
        h = fit_single(design, segments, part, measured, noise, EXPLAINED_RATIO, file)
        fits.append(h if h is not None else unexplained(part))
    fits.sort(key=_rank_key)
    for i, h in enumerate(fits[:REFINED_SINGLES]):
        spec = design.parts[h.parts[0]]
        if not h.runaway and not (spec.low <= h.values[h.parts[0]] <= spec.high):
            fits[i] = within_tolerance_refit(design, segments, h, measured, file)
    fits.sort(key=_rank_key)
    return fits, undetermined, messages


def _swap_hypotheses(design: Design, segments, measured: bool, file: str) -> list[HypothesisFit]:
    out = []
    for a, b in itertools.combinations(design.parts, 2):
        sa, sb = design.parts[a], design.parts[b]
        if sa.kind == sb.kind and abs(sa.nominal / sb.nominal - 1) > 0.01:
            h = fit_fixed(design, segments, {a: sb.nominal, b: sa.nominal}, "swap", (a, b), measured, file)
            if h is not None:
                out.append(h)
    return out


def _pair_hypothesis(design: Design, segments, singles: Sequence[HypothesisFit], measured: bool,
                     file: str) -> HypothesisFit | None:
    """The best fit of two of the leading single-part suspects together, or None."""
    leading = [h for h in singles if not h.runaway][:3]
    pairs = []
    for x, y in itertools.combinations(leading, 2):
        a, b = x.parts[0], y.parts[0]
        starts = [{a: x.values[a], b: design.parts[b].nominal}, {a: design.parts[a].nominal, b: y.values[b]}]
        h = fit_free(design, segments, (a, b), starts, measured, kind="two parts", file=file)
        if h is not None and not h.runaway:
            pairs.append(h)
    return min(pairs, key=lambda h: h.aicc) if pairs else None


def diagnose(design: Design, segments: Sequence[StepSegment], *, file: str = "",
             measured_input: bool | None = None) -> Diagnosis:
    """Rank single-part, swap and (when needed) pair hypotheses; see the module docstring."""
    segments = tuple(segments)
    measured = has_measured_input(segments) if measured_input is None else measured_input
    nominal = fit_fixed(design, segments, design.nominal_values(), "all nominal", (), measured, file)
    noise = _noise([nominal] if nominal else [], segments)
    singles, undetermined, messages = _single_hypotheses(design, segments, measured, noise, file)
    noise = _noise(singles, segments) if singles else noise
    hyps = singles + _swap_hypotheses(design, segments, measured, file)
    if not hyps:
        raise FitError("no single-part hypothesis could be fitted", path=file or None,
                       hint="check the design's parts against the circuit measured")
    hyps.sort(key=_rank_key)
    inflation = _variance_inflation(hyps)
    hyps.sort(key=lambda h: _rank_key(h, inflation))
    explained = not hyps[0].runaway and hyps[0].rms <= EXPLAINED_RATIO * noise
    if not explained and hyps[0].kind != "swap":
        messages.append(_try_pairs(design, segments, singles, hyps, inflation, measured, file))
    top = hyps[0].effective_aicc(inflation)
    hyps = [final_intervals(design, segments, h, measured, file)
            if h.effective_aicc(inflation) - top <= TIE_EVIDENCE else h for h in hyps]
    hyps.sort(key=lambda h: _rank_key(h, inflation))
    top = hyps[0].effective_aicc(inflation)
    suspects, leaders = [], []
    for h in hyps:
        evidence = h.effective_aicc(inflation) - top
        tied = evidence <= TIE_EVIDENCE and not h.runaway
        if tied:
            leaders.extend(p for p in h.parts if p not in leaders)
        against = nominal.effective_aicc(inflation) - h.effective_aicc(inflation) if nominal is not None else math.nan
        suspects.append(_suspect(design, h, evidence, against, tied, noise))
    messages += _tie_messages(design, [h for h, s in zip(hyps, suspects) if s.tied], measured)
    if undetermined:
        messages.append("this capture cannot determine " + ", ".join(design.label(p) for p in undetermined)
                        + " on its own")
    estimates = {h.parts[0]: (h.estimates[h.parts[0]] if not h.runaway else _no_value(design, h.parts[0]))
                 for h in hyps if h.kind == "single part"}
    return Diagnosis(tuple(suspects), nominal, tuple(leaders), explained, noise, tuple(undetermined),
                     estimates, tuple(messages), tuple(hyps))


def _tie_messages(design: Design, tied: Sequence[HypothesisFit], measured: bool) -> list[str]:
    """Why the tied leaders tie: one sentence per other single-part or swap leader against
    the first (ties.py), or one sentence naming them when no reason can be given."""
    if len(tied) < 2:
        return []
    names = " from ".join(("<->" if h.kind == "swap" else "+").join(design.label(p) for p in h.parts)
                          for h in tied)
    out = [f"cannot tell {names} from this capture"]
    out += [sentence for h in tied[1:] if (sentence := _tie_sentence(design, tied[0], h, measured))]
    if len(out) == 1:
        out[0] += "; measure one of the parts in circuit to decide"
    return out


def _tie_sentence(design: Design, first: HypothesisFit, other: HypothesisFit, measured: bool) -> str:
    """Why ``other`` ties with ``first`` (ties.py): two single parts, or a swap and a single
    part; "" for other kinds (pairs, two swaps)."""
    kinds = (first.kind, other.kind)
    if kinds == ("single part", "single part"):
        reason = tie_reason(design, first.parts[0], first.values[first.parts[0]], other.parts[0], measured)
    elif sorted(kinds) == ["single part", "swap"]:
        swap, single = (first, other) if first.kind == "swap" else (other, first)
        reason = swap_reason(design, *swap.parts, single.parts[0], measured)
    else:
        return ""
    return tie_sentence(design, reason) if reason is not None else ""


def _try_pairs(design: Design, segments, singles, hyps: list[HypothesisFit], inflation: float, measured: bool,
               file: str) -> str:
    """Fit pairs of the leading suspects; put a decisive pair first in ``hyps``; the message to show."""
    pair = _pair_hypothesis(design, segments, singles, measured, file)
    if pair is None:
        return ("no single part explains the capture (the residual stays well above the noise); "
                "no pair of the leading suspects is determined by this capture")
    if hyps[0].effective_aicc(inflation) - pair.effective_aicc(inflation) >= PAIR_EVIDENCE:
        hyps.insert(0, pair)
        return ("no single part explains the capture; the best two-part explanation is "
                + " and ".join(design.label(p) for p in pair.parts) + " (both determined by this capture)")
    return ("no single part explains the capture, and no pair of the leading suspects "
            "explains it decisively better")


def _no_value(design: Design, part: str) -> Estimate:
    """A part whose fit ran away: no value, no interval."""
    return Estimate(part, math.nan, None, None, UNITS[design.parts[part].kind],
                    "changing it alone does not explain the capture", False)


def _suspect(design: Design, h: HypothesisFit, evidence: float, against: float, tied: bool,
             noise: float) -> Suspect:
    explains = not h.runaway and h.rms <= EXPLAINED_RATIO * noise
    if h.kind == "swap":
        a, b = h.parts
        return Suspect(f"{design.label(a)}<->{design.label(b)}", h.parts, h.kind, None, None,
                       design.parts[a].nominal, "", evidence, against, h.rms,
                       f"two parts swapped ({design.label(a)} and {design.label(b)} on each other's pads)",
                       tied, explains)
    first = h.parts[0]
    spec = design.parts[first]
    label = "+".join(design.label(p) for p in h.parts)
    unit = UNITS[spec.kind]
    if h.runaway:
        return Suspect(label, h.parts, h.kind, None, None, spec.nominal, unit, evidence, against, h.rms,
                       f"does not explain the capture: no value of {label} alone reproduces it", False, False)
    est = h.estimates[first]
    pattern = fault_pattern(spec, est.value, est.ci95) if explains or tied else \
        "does not explain the capture (residual above the noise)"
    if h.kind == "two parts":
        pattern = "; ".join(f"{design.label(p)}: {fault_pattern(design.parts[p], e.value, e.ci95)}"
                            for p, e in h.estimates.items())
    elif h.held and (explains or tied):
        pattern += "; with " + ", ".join(f"{design.label(p)} at {_eng(v, UNITS[design.parts[p].kind])} "
                                         "(within its tolerance)"
                                         for p, v in h.held.items())
    return Suspect(label, h.parts, h.kind, est.value, est.ci95, spec.nominal, unit, evidence, against,
                   h.rms, pattern, tied, explains)
