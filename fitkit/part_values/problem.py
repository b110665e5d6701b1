"""What is to be solved: the circuit, its unknown parts, and what one capture can tell.

Before any fit, ``prepare_problem`` asks the circuit layer
(fitkit.circuits.identifiability) which unknowns one step capture determines.
The overall gain is used only when the input step is measured (an input
channel); without one, only the response's shape counts.

* Every unknown determined: all are fitted.
* Some determined: the parts the user must supply are held at their design
  value (else a typical value), the rest are fitted, and only the determined
  ones are reported as measured; the warnings say which values to supply.
* None determined: CircuitError naming what is determined (for an RC
  low-pass, the product R1*C1) and which part values to give.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Mapping, Sequence

from ..circuits import Circuit, IdentifiabilityReport, identifiability
from ..circuits.identifiability import analysis_point
from ..errors import CircuitError


@dataclass(frozen=True)
class PartProblem:
    """The solving task.

    circuit: the circuit with exactly ``unknowns`` unknown (measurement chain kept).
    unknowns: every part the user asked to solve.
    fitted: the unknowns actually fitted (all but ``held``).
    held: undetermined unknowns held at an assumed value (part -> SI value).
    solve_circuit: ``circuit`` with the held parts made known at those values
        and only ``fitted`` unknown.
    design: design values (SI) of the unknowns that have one.
    report: the identifiability report (on all unknowns).
    gain_known: whether the input step amplitude is measured.
    warnings: plain sentences for the result.
    """

    circuit: Circuit
    unknowns: tuple[str, ...]
    fitted: tuple[str, ...]
    held: Mapping[str, float]
    solve_circuit: Circuit
    design: Mapping[str, float]
    report: IdentifiabilityReport
    gain_known: bool
    warnings: tuple[str, ...]

    def determined(self, part: str) -> bool:
        return part in self.report.determined


def prepare_problem(circuit: Circuit, unknowns: Sequence[str] | None = None, *,
                    design_values: Mapping[str, float] | None = None,
                    gain_known: bool = False) -> PartProblem:
    """Set up the solving task; raise CircuitError when nothing can be determined."""
    if unknowns is not None:
        unknowns = tuple(unknowns)
        for n in unknowns:
            circuit.part(n)
        if set(unknowns) != set(circuit.unknowns):
            missing = [p.name for p in circuit.parts
                       if p.name not in unknowns and p.value is None and p.kind != "amplifier"]
            if missing:
                raise circuit.error(f"part {missing[0]} has no value and is not among the parts to solve",
                                    hint=f"give its value (e.g. --known {missing[0]}=VALUE) or solve it too")
            circuit = circuit.with_unknowns(unknowns)
    unknowns = tuple(circuit.unknowns)
    if not unknowns:
        raise circuit.error("no part is marked unknown, so there is nothing to solve",
                            hint="mark the parts to solve with value = \"?\" or name them with --unknown")
    for p in circuit.parts:
        if p.kind == "amplifier" and p.unknown:
            raise circuit.error(f"solving an amplifier gain ({p.name}) is not supported",
                                hint="give its gain; solve resistors, capacitors and inductors")
    design = dict(circuit.design_values())
    for name, value in (design_values or {}).items():
        circuit.part(name)
        if name in unknowns:
            design[name] = float(value)
    report = identifiability(circuit, unknowns, design or None, gain_known=gain_known)
    warnings: list[str] = []
    if not report.determined:
        what = (f"only the combination {report.combinations[0]} is determined" if report.combinations
                else f"only {report.rank} combination(s) of them are determined")
        raise circuit.error(
            f"one step capture cannot determine {', '.join(report.undetermined)} separately ({what})",
            hint=f"give the value of {' and '.join(report.must_supply)} "
                 f"(e.g. --known {report.must_supply[0]}=VALUE) and solve the rest")
    point = analysis_point(circuit, unknowns, design)
    held = {n: point[n] for n in report.must_supply}
    if report.undetermined:
        warnings.extend(report.messages)
        warnings.append("held at an assumed value for the fit (not measured): " + ", ".join(held)
                        + "; the other undetermined parts depend on that assumption and are not reported as measured")
    fitted = tuple(n for n in unknowns if n not in held)
    solve_circuit = circuit.with_values(held)
    if held:
        solve_circuit = _make_known(solve_circuit, held)
    return PartProblem(circuit, unknowns, fitted, held, solve_circuit,
                       {k: v for k, v in design.items() if k in unknowns}, report, gain_known,
                       tuple(warnings))


def _make_known(circuit: Circuit, held: Mapping[str, float]) -> Circuit:
    from dataclasses import replace
    parts = tuple(replace(p, unknown=False, design=None, value=float(held[p.name])) if p.name in held else p
                  for p in circuit.parts)
    return replace(circuit, parts=parts)


def ensure_values(problem: PartProblem) -> dict[str, float]:
    """A starting value for every fitted part: design value, else a typical value."""
    return analysis_point(problem.solve_circuit, problem.fitted, problem.design)


__all__ = ["PartProblem", "prepare_problem", "ensure_values", "CircuitError"]
