"""Fault hypotheses fitted by the engine: the same fit as `fitkit fit --topology`.

A hypothesis is the design's circuit (with its measurement chain, as the
capture sees it; design.analysed_circuit) with some parts changed:

* "all nominal" and "swap": every part value fixed; only the levels and, with
  no input channel, the edge time are fitted;
* "single part": one part free, every other part at nominal;
* "two parts": two parts free.

Free parts are fitted by fitkit.part_values's direct fit (the circuit wrapped as a
form and handed to fitkit.fitting.fit_segments), so the edge time, delay,
levels, starts, correlated-residual correction and intervals are exactly
those of `fitkit fit --topology`. Every hypothesis is scored on the same
samples by the engine's criterion (fitkit.fitting.information.corrected_aic)
with the engine's own parameter count.

A fitted part that ends beyond ``PLAUSIBLE_SPAN`` times its nominal value, or
whose interval is not determined, ran to where the capture gives it no
support: the hypothesis "does not explain the capture" and no value is
reported for it.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Mapping, Sequence

import numpy as np

from ..conditioning.segment import StepSegment
from ..errors import CircuitError, FitError
from ..fitting import fit_segments
from ..fitting.information import corrected_aic, residual_sum
from ..part_values.direct import direct_fits, scaled_circuit_form
from ..part_values.problem import prepare_problem
from ..results import Estimate, FitResult
from .design import Design, analysed_circuit

#: A part fitted beyond nominal / PLAUSIBLE_SPAN .. nominal * PLAUSIBLE_SPAN ran away.
PLAUSIBLE_SPAN = 100.0
#: Errors a hypothesis fit may end in; the hypothesis is then not available.
FIT_ERRORS = (FitError, CircuitError, OverflowError, ZeroDivisionError, FloatingPointError,
              ValueError, np.linalg.LinAlgError)


@dataclass(frozen=True)
class HypothesisFit:
    """One explanation of the capture, fitted by the engine.

    kind: "all nominal", "single part", "swap" or "two parts".
    parts: the circuit parts changed (free or exchanged).
    values: the values used or found for those parts (SI).
    estimates: the free parts' Estimates (value, 95 % interval; SI).
    rss: residual sum of squares over the fitted samples (V^2); n: samples.
    n_parameters: the engine's count (free parts, levels, edge times).
    result: the engine's FitResult (None when no fit was made).
    runaway: a free part ran beyond PLAUSIBLE_SPAN of nominal or has no interval.
    held: other parts moved within their tolerance to explain the capture (SI).
    """

    kind: str
    parts: tuple[str, ...]
    values: Mapping[str, float]
    estimates: Mapping[str, Estimate]
    rss: float
    n: int
    n_parameters: int
    result: FitResult | None = field(default=None, repr=False)
    runaway: bool = False
    held: Mapping[str, float] = field(default_factory=dict)

    @property
    def aicc(self) -> float:
        return corrected_aic(self.rss, self.n, self.n_parameters)

    @property
    def variance_inflation(self) -> float:
        """Samples over effective samples of the engine's fit (>= 1; 1 without a fit): how
        much correlated noise inflates the sum-of-squares term of the criterion."""
        d = self.result.diagnostics if self.result is not None else None
        if d is None or not d.n_samples or not (d.effective_samples > 0) or not math.isfinite(d.effective_samples):
            return 1.0
        return max(d.n_samples / d.effective_samples, 1.0)

    def effective_aicc(self, inflation: float) -> float:
        """The criterion with the sum-of-squares term over ``inflation``
        (fitkit.fitting.information.corrected_aic): an extra parameter must gain as much
        on the effective samples as it costs."""
        return corrected_aic(self.rss, self.n, self.n_parameters, inflation)

    @property
    def rms(self) -> float:
        return math.sqrt(self.rss / self.n) if self.n and math.isfinite(self.rss) else math.inf


def unexplained(part: str) -> HypothesisFit:
    """The single-part hypothesis of ``part`` when no fit of it could be made: it does not
    explain the capture (ranked last, no value)."""
    return HypothesisFit("single part", (part,), {}, {}, math.inf, 0, 0, None, runaway=True)


def _ran_away(design: Design, estimates: Mapping[str, Estimate]) -> bool:
    for part, est in estimates.items():
        nominal = design.parts[part].nominal if part in design.parts else None
        if est.ci95 is None or not est.determined or not (est.value > 0 and math.isfinite(est.value)):
            return True
        if nominal and abs(math.log(est.value / nominal)) > math.log(PLAUSIBLE_SPAN):
            return True
    return False


def fit_fixed(design: Design, segments: Sequence[StepSegment], values: Mapping[str, float], kind: str,
              parts: Sequence[str], measured: bool, file: str = "") -> HypothesisFit | None:
    """The circuit at ``values`` (others nominal), only levels and edge times fitted."""
    circuit = analysed_circuit(design.circuit.with_values(dict(values)), measured)
    anchor = next(iter(design.parts))
    value = float(dict(values).get(anchor, design.parts[anchor].nominal))
    try:
        form = scaled_circuit_form(segments, circuit.with_unknowns([anchor]), [anchor], [{anchor: value}],
                                   measured)
        with np.errstate(all="ignore"):
            result = fit_segments(segments, form, fixed={anchor: value}, measured_input=measured,
                                  correlation="off", derived=False, file=file)
    except FIT_ERRORS:
        return None
    rss, n = residual_sum(result)
    return HypothesisFit(kind, tuple(parts), dict(values), {}, rss, n, result.diagnostics.n_parameters, result)


def fit_free(design: Design, segments: Sequence[StepSegment], free: Sequence[str],
             starts: Sequence[Mapping[str, float]], measured: bool, *, kind: str,
             held: Mapping[str, float] | None = None, file: str = "",
             intervals: str = "covariance") -> HypothesisFit | None:
    """The parts ``free`` fitted by the engine from each start, others at nominal (or ``held``).

    intervals: the engine's interval method; "covariance" ranks hypotheses quickly,
    ``final_intervals`` refits the leaders with "auto" (profile likelihood where needed).
    None when the capture does not determine them together or no start converges.
    """
    free = tuple(free)
    circuit = analysed_circuit(design.circuit.with_values(dict(held or {})), measured).with_unknowns(free)
    try:
        problem = prepare_problem(circuit, free, design_values={p: design.parts[p].nominal for p in free})
        if set(problem.fitted) != set(free):
            return None
        with np.errstate(all="ignore"):
            fits, _ = direct_fits(segments, problem, starts, measured_input=measured, file=file,
                                  intervals=intervals)
    except FIT_ERRORS:
        return None
    if not fits:
        return None
    best = min(fits, key=lambda f: f.rss)
    estimates = {p: best.result.parameters[p] for p in free}
    return HypothesisFit(kind, free, {p: e.value for p, e in estimates.items()}, estimates, best.rss,
                         best.n_points, best.n_parameters, best.result, _ran_away(design, estimates),
                         dict(held or {}))


def fit_single(design: Design, segments: Sequence[StepSegment], part: str, measured: bool,
               noise: float, explained_ratio: float, file: str = "") -> HypothesisFit | None:
    """One part free, the others at nominal: from the nominal value first, then, when
    that does not explain the capture, from a decade off on either side, the side the
    fit moved to first (a decade-off part is the commonest assembly fault, and the fit
    can stop in a nearer local minimum on the way, on either side: a series RLC with C
    a decade low rings faster, and a fit from nominal C can climb to a local minimum
    above it)."""
    nominal = design.parts[part].nominal
    best = fit_free(design, segments, [part], [{part: nominal}], measured, kind="single part", file=file)
    if best is not None and not best.runaway and best.rms <= explained_ratio * noise:
        return best
    moved_up = best is not None and not best.runaway and best.values.get(part, nominal) > nominal
    factors = (10.0, 0.1) if moved_up else (0.1, 10.0)
    for factor in factors:
        other = fit_free(design, segments, [part], [{part: nominal * factor}], measured, kind="single part",
                         file=file)
        if other is not None and (best is None or _preferred(other, best)):
            best = other
    return best


def _preferred(a: HypothesisFit, b: HypothesisFit) -> bool:
    """a is a better explanation than b: not a runaway when b is, else the lower RSS."""
    if a.runaway != b.runaway:
        return not a.runaway
    return a.rss < b.rss


def final_intervals(design: Design, segments: Sequence[StepSegment], h: HypothesisFit, measured: bool,
                    file: str = "") -> HypothesisFit:
    """A ranked hypothesis refitted from its own values with the engine's full interval
    method (profile likelihood where the sum of squares is asymmetric), as `fit` reports."""
    if h.kind not in ("single part", "two parts") or h.runaway:
        return h
    free = tuple(p for p in h.parts) + tuple(h.held)
    start = {**dict(h.values), **dict(h.held)}
    again = fit_free(design, segments, free, [start], measured, kind=h.kind, file=file, intervals="auto")
    if again is None or again.runaway:
        return h
    estimates = {p: again.estimates[p] for p in h.parts}
    return HypothesisFit(h.kind, h.parts, {p: e.value for p, e in estimates.items()}, estimates, again.rss,
                         again.n, again.n_parameters, again.result, False,
                         {p: again.values[p] for p in h.held})


def within_tolerance_refit(design: Design, segments: Sequence[StepSegment], single: HypothesisFit,
                           measured: bool, file: str = "") -> HypothesisFit:
    """The single-part hypothesis with one other part also free, kept when that part stays
    within its tolerance band and the criterion improves.

    "This part is wrong" does not mean "every other part is exactly nominal": a
    neighbour 3 % off (within its 5 %) can pull a one-part fit far from the
    wrong part's real value (on an output-only capture the edge time absorbs
    what would tell them apart). The refit lets each other part move; a
    result with that part outside its band is another hypothesis (two parts),
    not this one.

    The extra part is kept only when it pays for itself on the effective samples
    (HypothesisFit.effective_aicc with the single fit's variance inflation): with
    band-limited noise the sum of squares falls by several times chi-square(1) for
    any extra parameter, and the raw criterion took a neighbour within tolerance
    nearly always, giving one of two interchangeable leaders a fit the other did
    not get (an 11 nF C1 in an equal ladder led by R2 with C2 at -4 %).
    """
    part = single.parts[0]
    best = single
    inflation = single.variance_inflation
    for other, spec in design.parts.items():
        if other == part:
            continue
        start = {part: single.values[part], other: spec.nominal}
        pair = fit_free(design, segments, (part, other), [start], measured, kind="single part", file=file)
        if pair is None or pair.runaway or not (spec.low <= pair.values[other] <= spec.high):
            continue
        if pair.effective_aicc(inflation) < best.effective_aicc(inflation):
            best = HypothesisFit("single part", (part,), {part: pair.values[part]}, {part: pair.estimates[part]},
                                 pair.rss, pair.n, pair.n_parameters, pair.result, False,
                                 {other: pair.values[other]})
    return best
