"""Verdicts from intervals, never from point estimates.

Every verdict compares a 95 % interval with a range:

* "within": the whole interval lies inside the range;
* "outside": the whole interval lies outside it;
* "cannot tell": the interval straddles a limit;
* "not determined": the capture does not fix the quantity.

Behavioural quantities (tau, f0, Q, gain) use the behavioural fit's interval
against the design's limits, or, when the design gives none, against the
range the tolerance envelope allows.

Parts are checked one at a time: a part's implied value is the value that
explains the capture with every other part at nominal (diagnosis.py). Since
the other parts are really anywhere within their tolerances, the interval is
widened, before it is judged, by how far those tolerances can move this
part's implied value: linearised, on the log scale, the other part q moves
the implied ln(value of p) by s_q = (J_p . J_q) / (J_p . J_p) per unit of
ln(q), J being the scale-free Jacobian of the transfer-function coefficients
(fitkit.circuits.identifiability.scale_free_jacobian); the widening is
sum_q |s_q| * ln(1 + tol_q), worst case. A part is then "outside" only when
it is among the leading suspects (the capture is explained at least as well
by it as by any other single change) and its widened interval misses the
tolerance band; another part whose single-part value misses the band is
"outside if alone": its interval misses the band only if it alone changed,
and the capture is better explained otherwise. When two or more tied
leaders each name a fault (a part outside, a swap, a pair), only one of them
is the board's fault and the capture cannot tell which: each leading part
that would read "outside" reads "one of tied outside" instead, with a note
naming the alternatives ("one of R21, C22 is outside; the capture cannot
tell which"). In an equal-stage ladder R21 and C22 are interchangeable from
the output, and marking both "outside" said two parts were wrong.

Overall: "fail" when a quantity is outside its limits or a leading suspect
is outside its tolerance (or one of tied leading suspects is); "pass" when every judged quantity is within its
limits and no part is outside (a part that cannot be told on its own, such as
R or C of an RC low-pass whose product alone is measured, does not block a
pass: the board behaves as designed); "inconclusive" otherwise, with what
would resolve it.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, replace
from typing import Any, Mapping, Sequence

from ..circuits.identifiability import scale_free_jacobian
from ..errors import FitkitError
from ..results import Estimate, json_number
from .design import Design

WITHIN, OUTSIDE, CANNOT_TELL, NOT_DETERMINED = "within", "outside", "cannot tell", "not determined"
#: A part whose own interval misses its band, while another part explains the capture better.
OUTSIDE_IF_ALONE = "outside if alone"
#: A leading part outside its band, tied with other leaders that name other faults: one of them is.
ONE_OF_TIED_OUTSIDE = "one of tied outside"


def interval_verdict(ci: tuple[float, float] | None, low: float, high: float) -> str:
    """within / outside / cannot tell for an interval against [low, high]."""
    if ci is None or not all(math.isfinite(x) for x in ci):
        return NOT_DETERMINED
    a, b = sorted(ci)
    if a >= low and b <= high:
        return WITHIN
    if b < low or a > high:
        return OUTSIDE
    return CANNOT_TELL


@dataclass(frozen=True)
class QuantityVerdict:
    """A behavioural quantity against its limits (SI units)."""

    name: str
    value: float | None
    ci95: tuple[float, float] | None
    unit: str
    low: float
    high: float
    limit_source: str
    nominal: float | None
    verdict: str

    def to_dict(self) -> dict[str, Any]:
        return {"value": json_number(self.value),
                "ci95": None if self.ci95 is None else [json_number(x) for x in self.ci95],
                "unit": self.unit, "limits": [json_number(self.low), json_number(self.high)],
                "limit_source": self.limit_source, "nominal": json_number(self.nominal), "verdict": self.verdict}


@dataclass(frozen=True)
class PartVerdict:
    """One part against its tolerance (SI units).

    value, ci95: implied value with every other part at nominal (single-part fit).
    judged_interval: ci95 widened by the other parts' tolerances (what is judged).
    """

    part: str
    circuit_part: str
    value: float | None
    ci95: tuple[float, float] | None
    judged_interval: tuple[float, float] | None
    nominal: float
    tolerance: str
    low: float
    high: float
    unit: str
    verdict: str
    note: str = ""

    def to_dict(self) -> dict[str, Any]:
        pair = lambda p: None if p is None else [json_number(p[0]), json_number(p[1])]  # noqa: E731
        return {"circuit_part": self.circuit_part, "value": json_number(self.value), "ci95": pair(self.ci95),
                "interval_with_other_tolerances": pair(self.judged_interval),
                "nominal": json_number(self.nominal), "tolerance": self.tolerance,
                "tolerance_band": [json_number(self.low), json_number(self.high)], "unit": self.unit,
                "verdict": self.verdict, "note": self.note}


def judge_quantities(fit_estimates: Mapping[str, Estimate], limits: Mapping[str, tuple[float, float]],
                     design_limits: Sequence[str], nominal: Mapping[str, float]) -> tuple[QuantityVerdict, ...]:
    """One QuantityVerdict per quantity that has both an estimate and limits."""
    out = []
    for name, (lo, hi) in limits.items():
        est = fit_estimates.get(name)
        if est is None:
            continue
        ci = est.ci95 if est.determined else None
        source = "design file" if name in design_limits else "tolerance envelope"
        out.append(QuantityVerdict(name, est.value if est.determined else None, ci, est.unit, lo, hi, source,
                                   nominal.get(name), interval_verdict(ci, lo, hi)))
    return tuple(out)


def tolerance_widening(design: Design, gain_known: bool) -> dict[str, float]:
    """Per part, the log-scale widening of its single-part interval from the other
    parts' tolerances (see the module docstring)."""
    names = list(design.parts)
    circuit = design.circuit.with_chain_parts()
    try:
        J = scale_free_jacobian(circuit, names, design.nominal_values(), gain_known=gain_known)
    except FitkitError:
        return {n: 0.0 for n in names}
    out = {}
    for i, p in enumerate(names):
        jp = J[:, i]
        norm = float(jp @ jp)
        if norm <= 0:
            out[p] = math.inf
            continue
        w = 0.0
        for j, q in enumerate(names):
            if j != i:
                w += abs(float(jp @ J[:, j]) / norm) * _log_half_width(design.parts[q])
        out[p] = w
    return out


def _log_half_width(spec) -> float:
    """The wider side of a part's tolerance band on the log scale (a 5 % band is
    ln(1/0.95) = 0.0513 below nominal and ln(1.05) = 0.0488 above)."""
    return max(abs(math.log(spec.low / spec.nominal)), abs(math.log(spec.high / spec.nominal)))


def judge_parts(design: Design, estimates: Mapping[str, Estimate], leaders: Sequence[str],
                undetermined: Sequence[str], widening: Mapping[str, float],
                tied: Sequence[tuple[str, tuple[str, ...]]] = ()) -> tuple[PartVerdict, ...]:
    """One PartVerdict per toleranced part; see the module docstring.

    tied: the tied leading hypotheses in rank order, (kind, circuit parts) each
    ("single part", "swap" or "two parts").
    """
    return _one_of_tied(design, _judge_each(design, estimates, leaders, undetermined, widening), tied)


def _judge_each(design: Design, estimates: Mapping[str, Estimate], leaders: Sequence[str],
                undetermined: Sequence[str], widening: Mapping[str, float]) -> tuple[PartVerdict, ...]:
    """Each part judged on its own single-part interval (module docstring)."""
    units = {"resistor": "Ohm", "capacitor": "F", "inductor": "H"}
    out = []
    for name, spec in design.parts.items():
        est = estimates.get(name)
        base = dict(part=spec.designator, circuit_part=name, nominal=spec.nominal, tolerance=spec.tolerance_text,
                    low=spec.low, high=spec.high, unit=units[spec.kind])
        if est is not None and est.ci95 is None and name not in undetermined:
            out.append(PartVerdict(value=None, ci95=None, judged_interval=None, verdict=CANNOT_TELL,
                                   note="changing it alone does not explain the capture", **base))
            continue
        if name in undetermined or est is None or est.ci95 is None:
            out.append(PartVerdict(value=None, ci95=None, judged_interval=None, verdict=NOT_DETERMINED,
                                   note="this capture does not determine it on its own", **base))
            continue
        w = widening.get(name, 0.0)
        judged = (est.ci95[0] * math.exp(-w), est.ci95[1] * math.exp(w)) if math.isfinite(w) else None
        verdict = interval_verdict(judged, spec.low, spec.high)
        note = ""
        if verdict == OUTSIDE and name not in leaders:
            verdict, note = OUTSIDE_IF_ALONE, "another part explains the capture better"
        elif verdict == CANNOT_TELL and judged is not None and interval_verdict(est.ci95, spec.low, spec.high) == WITHIN:
            note = "within if the other parts are at nominal; their tolerances could hide a small deviation"
        out.append(PartVerdict(value=est.value, ci95=est.ci95, judged_interval=judged, verdict=verdict,
                               note=note, **base))
    return tuple(out)


def _one_of_tied(design: Design, parts: tuple[PartVerdict, ...],
                 tied: Sequence[tuple[str, tuple[str, ...]]]) -> tuple[PartVerdict, ...]:
    """Leading parts judged outside become "one of tied outside" when two or more tied
    hypotheses each name a fault (module docstring)."""
    verdict = {p.circuit_part: p.verdict for p in parts}
    faults = [(kind, names) for kind, names in tied
              if kind != "single part" or verdict.get(names[0]) == OUTSIDE]
    if len(faults) < 2:
        return parts
    label = design.label
    if all(kind == "single part" for kind, _ in faults):
        note = f"one of {', '.join(label(names[0]) for _, names in faults)} is outside"
    else:
        note = " or ".join(f"{label(names[0])} outside" if kind == "single part"
                           else f"{' and '.join(map(label, names))} "
                           + ("swapped" if kind == "swap" else "both off") for kind, names in faults)
    note += "; the capture cannot tell which"
    named = {n for _, names in faults for n in names}
    return tuple(replace(p, verdict=ONE_OF_TIED_OUTSIDE, note=note)
                 if p.verdict == OUTSIDE and p.circuit_part in named else p for p in parts)


def overall_verdict(quantities: Sequence[QuantityVerdict], parts: Sequence[PartVerdict]) -> str:
    """pass / fail / inconclusive; see the module docstring."""
    if any(q.verdict == OUTSIDE for q in quantities) or any(p.verdict in (OUTSIDE, ONE_OF_TIED_OUTSIDE)
                                                             for p in parts):
        return "fail"
    judged = [q for q in quantities if q.verdict != NOT_DETERMINED]
    if judged and all(q.verdict == WITHIN for q in judged):
        return "pass"
    return "inconclusive"


def resolve_hints(quantities: Sequence[QuantityVerdict], parts: Sequence[PartVerdict], *,
                  tied: Sequence[str], sample_interval: float, fastest_time: float | None,
                  record_length: float, slowest_time: float | None, edges: int) -> tuple[str, ...]:
    """What would turn an inconclusive check into a pass or a fail."""
    hints = []
    open_q = [q.name for q in quantities if q.verdict in (CANNOT_TELL, NOT_DETERMINED)]
    if open_q:
        hints.append(f"the interval of {', '.join(open_q)} straddles a limit: capture more edges and "
                     "average them (--average), or use a quieter vertical range, to narrow it")
    if slowest_time and record_length < 5 * slowest_time:
        hints.append(f"a longer capture: the record after the edge covers {record_length / slowest_time:.1f} "
                     "slowest time constants; 5 or more let the response settle")
    if fastest_time and sample_interval > fastest_time / 10:
        hints.append("a finer sample interval: the fastest time constant spans only "
                     f"{fastest_time / sample_interval:.1f} samples; 10 or more resolve it")
    if len(tied) > 1:
        hints.append(f"a known value for one of {', '.join(tied)} (measure it in circuit): the capture cannot "
                     "tell them apart")
    if not hints and any(p.verdict == CANNOT_TELL for p in parts):
        hints.append("a known value for another part (measured in circuit) would narrow the part intervals")
    if edges == 1 and not hints:
        hints.append("more edges (a square wave) averaged together would narrow every interval")
    return tuple(hints)

