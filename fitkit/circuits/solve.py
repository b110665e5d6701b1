"""Unknown part values from target transfer-function coefficients: every physical solution.

The coefficient equations of a circuit are polynomial in the part values, so
they may have several positive solutions: the unbuffered two-stage RC ladder
with R1, R2 known gives a quadratic in C1 (two solutions in general), and two
buffered stages can be swapped. ``solve_parts`` finds them all by multi-start
root-finding in log space (Levenberg-Marquardt on relative coefficient
errors, starts spread over +-2 decades around a scale guess, fixed seed),
keeps the exact solutions, removes duplicates and ranks them by nearness to
the design values (root mean square of ln(value / design)).
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any, Mapping, Sequence

import numpy as np
from scipy import optimize

from ..results import json_number
from .coefficients import flatten
from .description import Circuit
from .identifiability import identifiability
from .parametric import PartFamily

#: Relative RMS coefficient error below which a point counts as a solution.
SOLUTION_TOLERANCE = 1e-7
#: Two solutions closer than this in every ln(value) are the same.
SAME_SOLUTION = 1e-4


@dataclass(frozen=True)
class PartSolution:
    """One set of unknown part values that reproduces the target coefficients.

    values: part name -> value in SI units.
    units: part name -> SI unit.
    residual: RMS relative error of the coefficients at these values.
    design_distance: RMS of ln(value / design) over parts with a design
        value (None when no design value was given); 0 = exactly the design.
    deviation_from_design: part name -> (value - design) / design.
    """

    values: Mapping[str, float]
    units: Mapping[str, str]
    residual: float
    design_distance: float | None
    deviation_from_design: Mapping[str, float]

    def to_dict(self) -> dict[str, Any]:
        return {"values": {k: json_number(v) for k, v in self.values.items()},
                "units": dict(self.units), "residual": json_number(self.residual),
                "design_distance": json_number(self.design_distance),
                "deviation_from_design": {k: json_number(v) for k, v in self.deviation_from_design.items()}}


def _typical(values: list[float], fallback: float) -> float:
    return math.exp(float(np.mean(np.log(values)))) if values else fallback


def scale_guess(circuit: Circuit, unknowns: Sequence[str], den: np.ndarray) -> dict[str, float]:
    """A starting value for each unknown from the target's time scale and the known parts."""
    den = np.asarray(den, dtype=float)
    nz = np.nonzero(den)[0]
    T = (abs(den[nz[0]]) / abs(den[nz[-1]])) ** (1.0 / (nz[-1] - nz[0])) if nz.size > 1 else 1e-3
    known = [p for p in circuit.parts if not p.unknown and p.value is not None]
    r = _typical([p.value for p in known if p.kind == "resistor"], 10e3)
    c = _typical([p.value for p in known if p.kind == "capacitor"], T / r)
    guess = {}
    for name in unknowns:
        kind = circuit.part(name).kind
        guess[name] = {"resistor": T / c, "capacitor": T / r, "inductor": T * r, "amplifier": 2.0}[kind]
    return guess


def solve_parts(circuit: Circuit, unknowns: Sequence[str], target_num: Sequence[float],
                target_den: Sequence[float], design: Mapping[str, float] | None = None, *,
                n_starts: int = 20, seed: int = 0) -> list[PartSolution]:
    """All positive part values for ``unknowns`` that give the target transfer function.

    target_num, target_den: descending powers of s, normalised as in mna.py
    (den's lowest-order non-zero coefficient 1; other scalings are
    normalised here). design: part name -> design value (SI), default the
    circuit's design values; used for the starts and for ranking.
    Returns the solutions, nearest to the design first (or smallest residual
    first without design values); an empty list when none is found. Raises
    CircuitError when the unknowns are not all determined by one capture, or
    when the target's order does not fit the circuit.
    """
    unknowns = tuple(unknowns)
    for n in unknowns:
        circuit.part(n)
    design = dict(circuit.design_values() if design is None else design)
    num = np.trim_zeros(np.asarray(target_num, dtype=float), "f")
    den = np.trim_zeros(np.asarray(target_den, dtype=float), "f")
    if den.size == 0 or not np.all(np.isfinite(den)) or not np.all(np.isfinite(num)):
        raise circuit.error("the target transfer function is empty or not finite",
                            hint="give finite coefficients in descending powers of s")
    low = den[np.nonzero(den)[0][-1]]
    num, den = num / low, den / low
    if num.size == 0:
        num = np.zeros(1)

    report = identifiability(circuit, unknowns, design or None)
    if not report.all_determined:
        raise circuit.error(f"one step capture cannot determine {', '.join(report.undetermined)}",
                            hint=f"give the value of {' and '.join(report.must_supply)}")

    guess = scale_guess(circuit, unknowns, den)
    guess.update({k: v for k, v in design.items() if k in guess})
    nd, dd = num.size - 1, den.size - 1
    target = flatten(num, den, nd, dd)
    rows = np.nonzero(target)[0]
    scale = np.abs(target[rows])

    family = PartFamily(circuit, unknowns, guess)   # the coefficients without a nodal analysis per call

    def residual(log_values: np.ndarray) -> np.ndarray:
        with np.errstate(all="ignore"):
            values = dict(zip(unknowns, np.exp(np.clip(log_values, -200.0, 200.0))))
            try:
                tf = family.transfer_function(values)
                c = flatten(tf.numerator, tf.denominator, nd, dd)
            except ValueError:     # CircuitError included: values out of any usable range
                return np.full(rows.size, 1e3)
            r = (c[rows] - target[rows]) / scale
        return np.where(np.isfinite(r), r, 1e3)

    at_guess = (family.reference.numerator, family.reference.denominator)
    extra_num = num[: max(0, num.size - at_guess[0].size)]
    if at_guess[1].size - 1 != dd or np.any(extra_num != 0) or rows.size < len(unknowns):
        raise circuit.error(f"the target ({dd} poles, {num.size - 1} zeros) does not fit this circuit's "
                            f"transfer function ({at_guess[1].size - 1} poles, {at_guess[0].size - 1} zeros)",
                            hint="check the fitted form against the circuit, or the unknown parts")

    rng = np.random.default_rng(seed)
    base = np.log([guess[n] for n in unknowns])
    starts = [base] + [base + rng.uniform(-2 * math.log(10), 2 * math.log(10), base.size)
                       for _ in range(n_starts - 1)]
    found: list[np.ndarray] = []
    for x0 in starts:
        try:
            fit = optimize.least_squares(residual, x0, method="lm", xtol=1e-14, ftol=1e-14, gtol=1e-14,
                                         max_nfev=40 * (len(unknowns) + 1))
        except (ValueError, np.linalg.LinAlgError, OverflowError):
            continue
        rms = float(np.sqrt(np.mean(fit.fun ** 2)))
        if not (np.all(np.isfinite(fit.x)) and rms < SOLUTION_TOLERANCE):
            continue
        if any(np.max(np.abs(fit.x - f)) < SAME_SOLUTION for f in found):
            continue
        found.append(fit.x)

    solutions = [_solution(circuit, unknowns, x, float(np.sqrt(np.mean(residual(x) ** 2))), design)
                 for x in found]
    if any(s.design_distance is not None for s in solutions):
        solutions.sort(key=lambda s: (s.design_distance, s.residual))
    else:
        solutions.sort(key=lambda s: (s.residual, tuple(s.values.values())))
    return solutions


def _solution(circuit: Circuit, unknowns: Sequence[str], x: np.ndarray, rms: float,
              design: Mapping[str, float]) -> PartSolution:
    values = {n: float(v) for n, v in zip(unknowns, np.exp(x))}
    dev = {n: (values[n] - design[n]) / design[n] for n in unknowns if n in design}
    dist = (math.sqrt(float(np.mean([math.log(values[n] / design[n]) ** 2 for n in dev])))
            if dev else None)
    return PartSolution(values, {n: circuit.part(n).unit for n in unknowns}, rms, dist, dev)
