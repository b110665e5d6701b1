"""Fault hypotheses: which single part, changed alone, explains the capture.

The scheme, in the order it runs:

1. The all-nominal board is evaluated (every part at its design value).
2. For each toleranced part that the capture determines on its own (fitkit's
   identifiability analysis, with the gain counted only when the input is
   measured), the part is fitted alone with every other part at nominal:
   its implied value and 95 % interval. By default (``part_fitter="quick"``)
   this one-dimensional fit runs on the yardstick itself (``single_part_fit``:
   grid, bounded search, profile-likelihood interval), about 0.3 s a part;
   ``part_fitter="partfit"`` uses fitkit.partfit.fit_circuit_segments with
   ``unknowns=[part]`` instead (both routes and every solution, much slower).
   Pairs (step 6) always use fitkit.partfit.
3. For two parts of the same kind with different nominal values, the swap
   (each on the other's pads) is evaluated as a hypothesis with no free part.
4. Every hypothesis is scored on one yardstick (response.py): the residual
   of the fixed circuit with the implied values, and AICc with one parameter
   per fitted part. Hypotheses are ranked by AICc. The evidence between two
   hypotheses is their AICc difference scaled by the effective-sample factor
   (1 - r1)/(1 + r1) of the best hypothesis's residuals (r1 the lag-1
   autocorrelation), because scope noise is band-limited and neighbouring
   samples are not independent.
5. Hypotheses within ``TIE_EVIDENCE`` of the best are tied leaders: the
   capture cannot tell them apart (e.g. in an equal-part ladder a decade-low
   R1 and a decade-low C2 give the same output). All of them are named.
6. When the best single change still leaves a residual above
   ``EXPLAINED_RATIO`` times the noise, no single part explains the capture;
   pairs of the leading suspects are then tried, and the best pair is shown
   only when the capture determines both parts (identifiability) and it is
   decisively better.

Patterns of real assembly faults are read from the implied value v against
the nominal value n (see ``fault_pattern``).
"""

from __future__ import annotations

import itertools
import math
from dataclasses import dataclass, field, replace
from typing import Any, Mapping, Sequence

import numpy as np
from scipy.optimize import brentq, minimize_scalar

from ..circuits import identifiability
from ..circuits.preferred import candidates_around
from ..conditioning.segment import StepSegment
from ..errors import FitError, FitkitError
from ..results import Estimate, json_number
from .design import Design, PartSpec
from .response import Evaluation, evaluate, uses_measured_input

#: Scaled AICc difference within which hypotheses are equally good (Burnham and
#: Anderson, Model Selection and Multimodel Inference, 2002: differences below 2
#: carry substantial support).
TIE_EVIDENCE = 2.0
#: Residual rms above this multiple of the noise: the hypothesis does not explain the capture.
EXPLAINED_RATIO = 1.5
#: A pair of parts is shown only when it beats the best single change by this scaled AICc.
PAIR_EVIDENCE = 10.0
#: The single-part search covers nominal / GRID_SPAN .. nominal * GRID_SPAN on GRID_POINTS log-spaced values.
GRID_SPAN, GRID_POINTS = 30.0, 21
#: ... plus a fine grid of +-FINE_SPAN in ln(value) around nominal, and around the best coarse value.
FINE_SPAN, FINE_STEP = 0.3, 0.05


def fit_parts(segments: Sequence[StepSegment], circuit, unknowns: Sequence[str], *,
              measured_input: bool, design_values: Mapping[str, float], file: str = ""):
    """The part fit (fitkit.partfit.fit_circuit_segments); a FitResult whose
    ``components`` hold the unknown parts' Estimates."""
    from ..partfit import fit_circuit_segments
    return fit_circuit_segments(segments, circuit, unknowns=list(unknowns), measured_input=measured_input,
                                design_values=dict(design_values), file=file)


@dataclass(frozen=True)
class Hypothesis:
    """One explanation of the capture.

    kind: "all nominal", "single part", "swap" or "two parts".
    parts: the circuit parts changed.
    values: the values used (SI) for those parts.
    estimates: fitted parts' Estimates (single part, two parts).
    evaluation: the yardstick fit (response.Evaluation).
    n_fitted: number of part values fitted.
    """

    kind: str
    parts: tuple[str, ...]
    values: Mapping[str, float]
    estimates: Mapping[str, Estimate]
    evaluation: Evaluation
    n_fitted: int

    @property
    def aicc(self) -> float:
        return self.evaluation.aicc(self.n_fitted)


@dataclass(frozen=True)
class Suspect:
    """A ranked explanation as reported.

    part: board designator(s) ("C22", or "C31<->C32" for a swap).
    parts: circuit part names.
    value, ci95: implied value and 95 % interval (SI), None for a swap.
    nominal: design value (SI) of the (first) part.
    evidence: scaled AICc difference from the best hypothesis (0 for the best).
    against_nominal: scaled AICc gain over the all-nominal board (positive = better).
    rms_residual: V.  pattern: plain words.  tied: among the leaders.
    explains: residual within EXPLAINED_RATIO of the noise.
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
                "evidence": json_number(self.evidence), "evidence_against_all_nominal": json_number(self.against_nominal),
                "rms_residual": json_number(self.rms_residual), "pattern": self.pattern,
                "tied_leader": self.tied, "explains_capture": self.explains}


@dataclass(frozen=True)
class Diagnosis:
    """The ranked hypotheses and what they say.

    suspects: ranked (best first), single parts, swaps and (when shown) a pair.
    nominal: the all-nominal board's evaluation hypothesis.
    leaders: circuit part names tied for best.
    explained: True when the best single change explains the capture to the noise.
    noise_rms: V, the noise the residuals are compared with.
    undetermined: parts the capture cannot determine alone.
    estimates: single-part Estimates by circuit part name (for the part verdicts).
    messages: plain-language sentences.
    """

    suspects: tuple[Suspect, ...]
    nominal: Hypothesis
    leaders: tuple[str, ...]
    explained: bool
    noise_rms: float
    undetermined: tuple[str, ...]
    estimates: Mapping[str, Estimate]
    messages: tuple[str, ...] = ()
    hypotheses: tuple[Hypothesis, ...] = field(default=(), repr=False)

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
            return f"the neighbouring {spec.series} value {word} ({_eng(g)}): a wrong-value part"
    if on_grid:
        return f"another {spec.series} value ({_eng(on_grid[0])}): a wrong-value part"
    pct = 100 * (ratio - 1)
    return f"drifted {pct:+.0f} % beyond tolerance, off the {spec.series} grid (ageing or damage)"


def _grid_neighbours(nominal: float, series: str) -> tuple[float, float]:
    grid = candidates_around(nominal, series)
    below = max((g for g in grid if g < nominal * (1 - 1e-9)), default=nominal)
    above = min((g for g in grid if g > nominal * (1 + 1e-9)), default=nominal)
    return below, above


def _eng(v: float) -> str:
    from ..units import format_value
    return format_value(v, "")


def single_part_fit(design: Design, segments, part: str, measured: bool) -> tuple[Estimate, Evaluation] | None:
    """The value of ``part`` that best explains the capture with every other part
    at nominal, on the yardstick of response.py, with a profile-likelihood 95 % interval.

    x = ln(value / nominal) is searched on a coarse grid over 0.03x .. 30x and a
    fine one near nominal and near the best coarse value (ringing responses
    have many local minima), refined by a bounded scalar search; the interval holds the x whose residual sum of
    squares exceeds the minimum by at most 3.84 s^2 n/n_eff (chi-square, one
    degree of freedom; s^2 = RSS/(n - k); n/n_eff = (1 + r1)/(1 - r1) widens it
    for correlated residuals). Without a measured input the edge-time shift
    is found at the nominal board and at the best value and then held.
    """
    circuit = design.circuit
    nominal = design.parts[part].nominal
    shift = 0.0
    if not measured:
        shift = evaluate(segments, circuit, measured).shift

    def rss(x: float) -> float:
        return _shifted(segments, circuit.with_values({part: nominal * math.exp(x)}), measured, shift).rss

    coarse = np.linspace(-math.log(GRID_SPAN), math.log(GRID_SPAN), GRID_POINTS)
    near = np.arange(-FINE_SPAN, FINE_SPAN + 1e-9, FINE_STEP)
    tried = {float(x): rss(float(x)) for x in np.concatenate([coarse, near])}
    finite = {x: c for x, c in tried.items() if math.isfinite(c)}
    if not finite:
        return None
    x0 = min(finite, key=finite.get)
    for x in x0 + np.arange(-4, 5) * FINE_STEP:          # a fine look around the best coarse value
        tried.setdefault(float(x), rss(float(x)))
    x0 = min((x for x in tried if math.isfinite(tried[x])), key=tried.get)
    res = minimize_scalar(rss, bounds=(x0 - FINE_STEP, x0 + FINE_STEP), method="bounded",
                          options={"xatol": 1e-5})
    x_best = float(res.x) if res.fun <= tried[x0] else x0
    if not measured:
        shift = evaluate(segments, circuit.with_values({part: nominal * math.exp(x_best)}), measured).shift
        res = minimize_scalar(rss, bounds=(x_best - 0.2, x_best + 0.2), method="bounded", options={"xatol": 1e-5})
        x_best = float(res.x)
    ev = _shifted(segments, circuit.with_values({part: nominal * math.exp(x_best)}), measured, shift)
    k = ev.nuisance + 1
    rho = min(max(ev.lag1, 0.0), 0.95)
    s2 = ev.rss / max(ev.n - k, 1)
    delta = 3.84 * s2 * (1 + rho) / (1 - rho)
    threshold = ev.rss + delta
    h = 1e-3
    curvature = (rss(x_best + h) + rss(x_best - h) - 2 * ev.rss) / h ** 2
    guess = math.sqrt(2 * delta / curvature) if curvature > 0 else 0.1
    bounds = []
    for direction in (-1, 1):
        step = max(1.5 * guess, 1e-4)
        x_out = None
        while step < 8:
            if rss(x_best + direction * step) > threshold:
                x_out = x_best + direction * step
                break
            step *= 2
        if x_out is None:
            bounds.append(None)
            continue
        try:
            bounds.append(brentq(lambda x: rss(x) - threshold, min(x_best, x_out), max(x_best, x_out), xtol=1e-5))
        except ValueError:
            bounds.append(x_out)
    value = nominal * math.exp(x_best)
    if None in bounds:
        est = Estimate(part, value, None, None, design.circuit.part(part).unit, "profile likelihood (yardstick)",
                       False)
    else:
        ci = (nominal * math.exp(bounds[0]), nominal * math.exp(bounds[1]))
        est = Estimate(part, value, value * (bounds[1] - bounds[0]) / 3.92, ci, design.circuit.part(part).unit,
                       "profile likelihood, widened for correlated residuals", True)
    return est, ev


def _shifted(segments, circuit, measured: bool, shift: float) -> Evaluation:
    if shift == 0.0 or measured:
        return evaluate(segments, circuit, measured, shift_search=False)
    moved = [replace(s, edge_time=s.edge_time + shift) for s in segments]
    ev = evaluate(moved, circuit, measured, shift_search=False)
    return replace(ev, nuisance=ev.nuisance + 1, shift=shift)


def _single(design: Design, segments, part: str, measured: bool, file: str,
            part_fitter: str = "quick") -> Hypothesis | None:
    if part_fitter == "quick":
        out = single_part_fit(design, segments, part, measured)
        if out is None:
            return None
        est, ev = out
        return Hypothesis("single part", (part,), {part: est.value}, {part: est}, ev, 1)
    circuit = design.circuit
    result = fit_parts(segments, circuit.with_unknowns([part]), [part], measured_input=measured,
                       design_values={part: design.parts[part].nominal}, file=file)
    est = result.components.get(part)
    if est is None or not est.determined or not (est.value and math.isfinite(est.value) and est.value > 0):
        return None
    ev = evaluate(segments, circuit.with_values({part: est.value}), measured)
    return Hypothesis("single part", (part,), {part: est.value}, {part: est}, ev, 1)


def _pair(design: Design, segments, pair: tuple[str, str], measured: bool, file: str) -> Hypothesis | None:
    circuit = design.circuit.with_unknowns(pair)
    report = identifiability(circuit, pair, gain_known=measured)
    if not report.all_determined:
        return None
    result = fit_parts(segments, circuit, pair, measured_input=measured,
                       design_values={p: design.parts[p].nominal for p in pair}, file=file)
    ests = {p: result.components.get(p) for p in pair}
    if any(e is None or not e.determined or not (e.value > 0) for e in ests.values()):
        return None
    values = {p: e.value for p, e in ests.items()}
    ev = evaluate(segments, design.circuit.with_values(values), measured)
    return Hypothesis("two parts", pair, values, ests, ev, 2)


def noise_level(segments: Sequence[StepSegment]) -> float:
    """The output noise (V) residuals are compared with: the segments' noise
    estimate, at least the rms of uniform quantisation q/sqrt(12)."""
    values = []
    for s in segments:
        n = s.noise_rms if math.isfinite(s.noise_rms) else 0.0
        if s.quantisation_step:
            n = max(n, s.quantisation_step / math.sqrt(12))
        values.append(n)
    return float(max(values)) if values else float("nan")


def diagnose(design: Design, segments: Sequence[StepSegment], *, file: str = "",
             measured_input: bool | None = None, part_fitter: str = "quick") -> Diagnosis:
    """Rank single-part (and swap) hypotheses for the capture's segments; see the module docstring."""
    segments = tuple(segments)
    measured = uses_measured_input(segments) if measured_input is None else measured_input
    circuit = design.circuit
    nominal = Hypothesis("all nominal", (), {}, {}, evaluate(segments, circuit, measured), 0)
    hyps: list[Hypothesis] = []
    undetermined: list[str] = []
    messages: list[str] = []
    for part in design.parts:
        report = identifiability(circuit.with_unknowns([part]), [part], gain_known=measured)
        if not report.all_determined:
            undetermined.append(part)
            continue
        try:
            h = _single(design, segments, part, measured, file, part_fitter)
        except FitkitError as exc:
            messages.append(f"{design.label(part)} alone: no fit ({exc.message})")
            continue
        if h is None:
            undetermined.append(part)
        else:
            hyps.append(h)
    for a, b in itertools.combinations(design.parts, 2):
        sa, sb = design.parts[a], design.parts[b]
        if sa.kind == sb.kind and abs(sa.nominal / sb.nominal - 1) > 0.01:
            ev = evaluate(segments, circuit.with_values({a: sb.nominal, b: sa.nominal}), measured)
            hyps.append(Hypothesis("swap", (a, b), {a: sb.nominal, b: sa.nominal}, {}, ev, 0))
    if not hyps:
        raise FitError("no single-part hypothesis could be fitted", path=file or None,
                       hint="check the design's parts against the circuit measured")
    hyps.sort(key=lambda h: h.aicc)
    best = hyps[0]
    rho = min(max(best.evaluation.lag1, 0.0), 0.95)
    factor = (1 - rho) / (1 + rho)
    noise = noise_level(segments)
    explained = best.evaluation.rms <= EXPLAINED_RATIO * noise
    if not explained and best.kind != "swap":
        singles = [h for h in hyps if h.kind == "single part"][:3]
        pairs = []
        for x, y in itertools.combinations([h.parts[0] for h in singles], 2):
            try:
                p = _pair(design, segments, (x, y), measured, file)
            except FitkitError:
                p = None
            if p is not None:
                pairs.append(p)
        if pairs:
            bp = min(pairs, key=lambda h: h.aicc)
            if factor * (best.aicc - bp.aicc) >= PAIR_EVIDENCE:
                hyps.insert(0, bp)
                messages.append("no single part explains the capture; the best two-part explanation is "
                                + " and ".join(design.label(p) for p in bp.parts)
                                + " (both determined by this capture)")
            else:
                messages.append("no single part explains the capture, and no pair of the leading suspects "
                                "explains it decisively better")
        else:
            messages.append("no single part explains the capture (the residual stays well above the noise); "
                            "no pair of the leading suspects is determined by this capture")
        best = hyps[0]
    top = best.aicc
    suspects = []
    leaders = []
    for h in hyps:
        evidence = factor * (h.aicc - top)
        tied = evidence <= TIE_EVIDENCE
        if tied:
            leaders.extend(p for p in h.parts if p not in leaders)
        suspects.append(_suspect(design, h, evidence, factor * (nominal.aicc - h.aicc), tied, noise))
    tied_names = [s.part for s in suspects if s.tied]
    if len(tied_names) > 1:
        messages.append(f"cannot tell {' from '.join(tied_names)} from this capture; measure one of them "
                        "in circuit (or capture the input pad too) to decide")
    if undetermined:
        messages.append("this capture cannot determine " + ", ".join(design.label(p) for p in undetermined)
                        + " on its own")
    estimates = {h.parts[0]: h.estimates[h.parts[0]] for h in hyps if h.kind == "single part"}
    return Diagnosis(tuple(suspects), nominal, tuple(leaders), explained, noise, tuple(undetermined),
                     estimates, tuple(messages), tuple(hyps))


def _suspect(design: Design, h: Hypothesis, evidence: float, against: float, tied: bool,
             noise: float) -> Suspect:
    explains = h.evaluation.rms <= EXPLAINED_RATIO * noise
    if h.kind == "swap":
        a, b = h.parts
        return Suspect(f"{design.label(a)}<->{design.label(b)}", h.parts, h.kind, None, None,
                       design.parts[a].nominal, "", evidence, against, h.evaluation.rms,
                       f"two parts swapped ({design.label(a)} and {design.label(b)} on each other's pads)",
                       tied, explains)
    first = h.parts[0]
    est = h.estimates[first]
    spec = design.parts[first]
    pattern = fault_pattern(spec, est.value, est.ci95) if explains or tied else \
        "does not explain the capture (residual above the noise)"
    label = "+".join(design.label(p) for p in h.parts)
    if h.kind == "two parts":
        pattern = "; ".join(f"{design.label(p)}: {fault_pattern(design.parts[p], e.value, e.ci95)}"
                            for p, e in h.estimates.items())
    return Suspect(label, h.parts, h.kind, est.value, est.ci95, spec.nominal,
                   {"resistor": "Ohm", "capacitor": "F", "inductor": "H"}[spec.kind], evidence, against,
                   h.evaluation.rms, pattern, tied, explains)
