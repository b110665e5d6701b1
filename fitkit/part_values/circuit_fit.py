"""Component values from captures: fit_circuit and fit_circuit_segments.

The whole path, in order:

1. identifiability first (problem.py): which unknowns one step capture can
   determine; undetermined ones are held and never reported as measured;
2. route 1 (behavioural.py): the matching behavioural form, mapped through
   the coefficient equations to every physical solution, with intervals;
3. route 2 (direct.py): the direct fit in part values from each route-1
   solution; its intervals are the ones reported;
4. the two routes are compared (each value inside the other's 95 % interval),
   solutions ranked by nearness to the design values, the nearest preferred
   values (IEC 60063 E12, E24, E96) and the measurement chain's effect added.
"""

from __future__ import annotations

import math
from dataclasses import replace
from typing import Any, Mapping, Sequence

from ..capture import Capture
from ..circuits import Circuit, measurement_chain_effect, nearest_preferred
from ..conditioning.segment import StepSegment
from ..errors import CircuitError, FitError
from ..results import CircuitDetails, Estimate, FitResult, json_number
from .behavioural import RouteOne, route_one
from ..fitting.information import has_measured_input
from .direct import DirectFit, direct_fits
from .known_tolerance import with_known_tolerances
from .problem import PartProblem, ensure_values, prepare_problem

#: Series reported for the nearest preferred values.
PREFERRED_SERIES = ("E12", "E24", "E96")
#: A part whose relative standard error exceeds this is reported as poorly determined (about +-20 % at 95 %).
POORLY_DETERMINED = 0.10


def fit_circuit(capture: Capture, circuit: Circuit, *, unknowns: Sequence[str] | None = None,
                input: str | int | None = None, output: str | int | None = None,
                edge_time: float | None = None, average: bool = False,
                design_values: Mapping[str, float] | None = None, intervals: str = "auto",
                known_tolerances: Mapping[str, float] | None = None) -> FitResult:
    """Find the steps in ``capture`` and solve the circuit's unknown parts from them.

    unknowns: parts to solve (default: those marked unknown in ``circuit``).
    input, output, edge_time (s), average: as for fitkit.fitting.fit_capture.
    design_values: part -> SI value, to rank several solutions (default: the circuit's).
    known_tolerances: known part -> relative tolerance (0.01 for +-1 %), carried into
        the solved parts' intervals (known_tolerance.py).
    Returns a FitResult with ``components`` (see fit_circuit_segments).
    """
    from ..conditioning import analyse_steps

    analysis = analyse_steps(capture, input=input, output=output, edge_time=edge_time, average=average)
    warnings = list(capture.warnings) + list(getattr(analysis, "flags", ()))
    for seg in analysis.segments:
        warnings.extend(f for f in seg.flags if f not in warnings)
    path = capture.provenance.path or ""
    try:
        return fit_circuit_segments(analysis.segments, circuit, unknowns=unknowns, design_values=design_values,
                                    intervals=intervals, file=path, warnings=warnings,
                                    known_tolerances=known_tolerances)
    except (FitError, CircuitError) as err:
        if err.path is None and path:
            raise type(err)(err.message, path=path, hint=err.hint) from None
        raise


def fit_circuit_segments(segments: Sequence[StepSegment], circuit: Circuit, *,
                         unknowns: Sequence[str] | None = None, measured_input: bool | None = None,
                         design_values: Mapping[str, float] | None = None,
                         start_values: Mapping[str, float] | None = None, intervals: str = "auto",
                         file: str = "", warnings: Sequence[str] = (),
                         known_tolerances: Mapping[str, float] | None = None) -> FitResult:
    """Solve the unknown parts of ``circuit`` from step segments; both routes, all solutions.

    Returns a FitResult with model "circuit:<name>"; ``components`` holds an
    Estimate (value, stderr, ci95, unit "Ohm"/"F"/"H", determined) per
    unknown part (undetermined ones: value NaN, determined=False);
    ``parameters`` the levels of the first edge; ``derived`` tau / f0 / Q /
    DC gain of the fitted circuit with propagated intervals; ``circuit`` (a
    fitkit.results.CircuitDetails): solutions, identifiability, preferred,
    chain_effect, behavioural_route, routes_agree, determination, rss (V^2),
    aicc, n_samples, n_parameters, level_model.
    Raises CircuitError when no unknown can be determined, FitError when no fit converges.
    """
    segments = tuple(segments)
    if not segments:
        raise FitError("no step segments to fit", path=file or None,
                       hint="check that the capture holds at least one edge")
    measured = has_measured_input(segments) if measured_input is None else measured_input
    problem = prepare_problem(circuit, unknowns, design_values=design_values, gain_known=False)
    notes: list[str] = list(problem.warnings)
    r1: RouteOne | None = None
    try:
        r1 = route_one(segments, problem, measured_input=measured)
        if r1 is None:
            notes.append("no behavioural form matches this circuit's transfer function; "
                         "the parts come from the direct fit alone")
    except (FitError, CircuitError) as err:
        notes.append(f"the behavioural route gave no part values ({err.message}); direct fit only")
    starts: list[dict[str, float]] = []
    if start_values:
        starts.append({n: float(start_values.get(n, v)) for n, v in ensure_values(problem).items()})
    if r1 is not None:
        starts.extend(dict(s.solution.values) for s in r1.solutions)
    if not starts:
        starts.append(ensure_values(problem))
    fits, failed = direct_fits(segments, problem, starts, measured_input=measured, intervals=intervals,
                               file=file, warnings=list(warnings))
    if not fits and any("none of its parameters is determined" in f for f in failed):
        raise FitError(f"this capture does not determine {', '.join(problem.fitted)} separately here: the fitted "
                       "response sits where the solutions of the circuit's equations merge (for example two "
                       "stages that look alike), so the parts trade off against each other", path=file or None,
                       hint="give one of these parts with --known, or capture with a faster sample rate and less noise")
    if not fits:
        raise FitError("the direct fit in part values did not converge from any start"
                       + (f" ({failed[0]})" if failed else ""), path=file or None,
                       hint="check the circuit and known parts against the board, or fit a form first")
    fits = _ranked(fits, problem)
    result = _assemble(fits, r1, problem, measured, notes)
    return _with_tolerances(result, problem, known_tolerances or {})


def _with_tolerances(result: FitResult, problem: PartProblem, tolerances: Mapping[str, float]) -> FitResult:
    """Carry the known parts' tolerances into the components' intervals."""
    if not tolerances:
        return result
    circuit = problem.solve_circuit
    for name in tolerances:
        part = circuit.part(name)
        if part.unknown or part.value is None:
            raise circuit.error(f"a tolerance was given for {name}, which is not a known part",
                                hint=f"give its value with the tolerance (--known {name}=VALUE+-1%)")
    known = {n: float(circuit.part(n).value) for n in tolerances}
    components = with_known_tolerances(result.components, circuit, known, tolerances)
    note = ("intervals include the known parts' tolerances ("
            + ", ".join(f"{n} +-{100 * t:g} %" for n, t in tolerances.items()) + ")")
    return replace(result, components=components, warnings=tuple(result.warnings) + (note,))


# -- assembling -------------------------------------------------------------------

def _design_distance(values: Mapping[str, float], design: Mapping[str, float]) -> float | None:
    keys = [n for n in values if n in design]
    if not keys:
        return None
    return math.sqrt(sum(math.log(values[n] / design[n]) ** 2 for n in keys) / len(keys))


def _ranked(fits: list[DirectFit], problem: PartProblem) -> list[DirectFit]:
    if any(_design_distance(f.values, problem.design) is not None for f in fits):
        return sorted(fits, key=lambda f: (_design_distance(f.values, problem.design), f.rss))
    return sorted(fits, key=lambda f: f.rss)


def _component(part: str, est: Estimate | None, problem: PartProblem) -> Estimate:
    unit = problem.circuit.part(part).unit
    if est is None or not problem.determined(part) or not est.determined:
        why = ("not determined by one step capture: supply its value" if not problem.determined(part)
               else "not determined by the data")
        return Estimate(part, math.nan, None, None, unit, why, False)
    return replace(est, name=part, unit=unit)


def _preferred(value: float) -> dict[str, Any]:
    out: dict[str, Any] = {}
    for series in PREFERRED_SERIES:
        nearest, dev = nearest_preferred(value, series)
        out[series] = nearest
        out[f"{series}_deviation"] = dev
    out["deviation"] = out["E24_deviation"]
    return out


def _agreement(direct: Mapping[str, Estimate], r1: RouteOne | None) -> tuple[bool | None, dict[str, Any]]:
    """Whether route 1's nearest solution and the direct fit lie inside each other's intervals."""
    if r1 is None or not r1.solutions:
        return None, {}
    parts = [n for n, e in direct.items() if e.determined]
    if not parts:
        return None, {}
    best = min(r1.solutions, key=lambda s: sum(abs(math.log(s.solution.values[n] / direct[n].value))
                                               for n in parts))
    detail, ok = {}, True
    for n in parts:
        v1, ci1, e2 = best.solution.values[n], best.ci95.get(n), direct[n]
        agree = (ci1 is not None and e2.ci95 is not None and ci1[0] <= e2.value <= ci1[1]
                 and e2.ci95[0] <= v1 <= e2.ci95[1])
        ok = ok and agree
        detail[n] = {"behavioural": json_number(v1), "direct": json_number(e2.value), "agree": agree}
    return ok, detail


def _solutions(fits: list[DirectFit], problem: PartProblem) -> list[dict[str, Any]]:
    """Every solution found, as JSON-ready records (values, intervals, distance from the design)."""
    solutions = []
    for f in fits:
        d = _design_distance(f.values, problem.design)
        solutions.append({
            "values": {n: json_number(v) for n, v in f.values.items()},
            "ci95": {n: (None if f.result.parameters[n].ci95 is None
                         else [json_number(x) for x in f.result.parameters[n].ci95]) for n in f.values},
            "design_distance": json_number(d),
            "deviation_from_design": {n: json_number((f.values[n] - problem.design[n]) / problem.design[n])
                                      for n in f.values if n in problem.design},
            "rss": json_number(f.rss), "aicc": json_number(f.aicc)})
    return solutions


def _assemble(fits: list[DirectFit], r1: RouteOne | None, problem: PartProblem, measured: bool,
              notes: list[str]) -> FitResult:
    best = fits[0]
    res = best.result
    components = {n: _component(n, res.parameters.get(n), problem) for n in problem.unknowns}
    parameters = {k: v for k, v in res.parameters.items() if k not in problem.fitted}
    warnings = list(res.warnings)
    for n in problem.fitted:  # the engine's own "not determined" wording for parts is replaced below
        warnings = [w for w in warnings if not w.startswith(f"{n} is not determined")]
    determination: dict[str, Any] = {}
    preferred: dict[str, Any] = {}
    for n, e in components.items():
        if not e.determined:
            determination[n] = {"status": "not determined", "relative_stderr": None}
            warnings.append(f"{n} is not determined by this capture; no value is reported for it")
            continue
        rel = e.stderr / e.value if e.stderr is not None and e.value > 0 else math.nan
        poor = not (rel <= POORLY_DETERMINED)
        determination[n] = {"status": "poorly determined" if poor else "well determined",
                            "relative_stderr": json_number(rel)}
        if poor:
            warnings.append(f"{n} is poorly determined: relative standard error {100 * rel:.0f} % "
                            f"(95 % interval {e.ci95[0]:.3g} to {e.ci95[1]:.3g} {e.unit})"
                            if e.ci95 else f"{n} is poorly determined")
        preferred[n] = _preferred(e.value)
    agree, agree_detail = _agreement(components, r1)
    if agree is False:
        warnings.append("the behavioural and direct routes disagree beyond their 95 % intervals: "
                        + ", ".join(n for n, d in agree_detail.items() if not d["agree"]))
    if len(fits) > 1:
        if problem.design:
            warnings.append(f"{len(fits)} sets of part values fit this capture equally well; "
                            "ranked by nearness to the design values (see the solutions list)")
        else:
            warnings.append(f"{len(fits)} sets of part values fit this capture equally well; give design "
                            "values to rank them (the first shown is only the one with the smallest residual)")
    chain = problem.circuit.chain
    chain_effect = None
    if not chain.is_empty:
        values = {n: (e.value if e.determined else ensure_values(problem)[n]) for n, e in components.items()
                  if n in problem.fitted}
        chain_effect = measurement_chain_effect(problem.solve_circuit, values=values).to_dict()
    solutions = _solutions(fits, problem)
    seen: list[str] = []
    for w in notes + warnings:
        if w not in seen:
            seen.append(w)
    level_model = ("per-edge baseline and one shared gain, driven by the measured input" if measured
                   else "per-edge baseline and step, ideal step")
    details = CircuitDetails(
        circuit=problem.circuit.name,
        form_summary=f"circuit {problem.circuit.name}: parts {', '.join(problem.fitted)} fitted directly",
        unknowns=tuple(problem.unknowns),
        held={n: json_number(v) for n, v in problem.held.items()},
        solutions=tuple(solutions),
        identifiability=problem.report.to_dict(),
        preferred=preferred,
        determination=determination,
        chain_effect=chain_effect,
        measurement_chain=chain.to_dict(),
        behavioural_route=None if r1 is None else r1.to_dict(),
        routes_agree=agree,
        routes_comparison=agree_detail,
        level_model=level_model + "; levels are not tied to the circuit's DC gain, so only the shape "
                    "and timing of the response inform the parts",
        rss=best.rss, aicc=best.aicc, n_samples=best.n_points, n_parameters=best.n_parameters)
    return replace(res, model="circuit:" + problem.circuit.name, parameters=parameters,
                   components=components, warnings=tuple(seen), circuit=details,
                   selection_reason=f"parts of circuit {problem.circuit.name} fitted directly")
