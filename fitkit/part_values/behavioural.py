"""Route 1: part values from a behavioural fit.

Fit the capture with the behavioural form that matches the circuit's
transfer function (first-order, first-order-decay or second-order), turn the
fitted shape (with its covariance, already widened for correlated residuals
by the engine) into the circuit's normalised transfer-function coefficients,
and map those through the circuit's coefficient equations:

* values: fitkit.circuits.solve_parts (every physical solution);
* covariance: first-order propagation, cov(coefficients) = G cov(ln shape) G^T
  with G by central differences, then fitkit.circuits.log_part_covariance.

When the coefficient equations have no exact solution (more informative
coefficients than unknowns, e.g. a second-order circuit with one unknown
part), the values are the closest physical point in the metric of the
coefficients' covariance (generalised least squares, scipy.optimize).

The numerator's overall scale (the gain) is taken from the circuit at the
solution, not from the data (the step amplitude at the input is not used
here), so it carries no information: its variance is zero and the
generalised least squares of log_part_covariance ignores it.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Mapping, Sequence

import numpy as np
from scipy import optimize

from ..circuits import PartSolution, coefficient_jacobian, log_part_covariance, solve_parts, transfer_function
from ..circuits.coefficients import coefficient_vector, flatten
from ..conditioning.segment import StepSegment
from ..errors import CircuitError, FitError
from ..forms import get_form
from ..forms.base import Form
from ..fitting.form_fit import FormFit, fit_form
from ..fitting.uncertainty import log_interval
from .circuit_form import normalisation_kind
from .problem import PartProblem, ensure_values

#: Relative step in ln(shape) for the coefficient Jacobian.
LOG_STEP = 1e-6


def solve_starts(n_unknowns: int) -> int:
    """Multi-start count for solve_parts: 8 for one unknown, 6 more per extra unknown, at most 20
    (one unknown has at most a few roots; more unknowns need the wider search)."""
    return min(20, 2 + 6 * n_unknowns)


@dataclass(frozen=True)
class RouteOneSolution:
    """One solution of route 1: values, log standard errors and 95 % intervals (SI)."""

    solution: PartSolution
    log_stderr: Mapping[str, float]
    ci95: Mapping[str, tuple[float, float] | None]

    def to_dict(self) -> dict:
        from ..results import json_number
        return {"values": {k: json_number(v) for k, v in self.solution.values.items()},
                "relative_stderr": {k: json_number(v) for k, v in self.log_stderr.items()},
                "ci95": {k: None if v is None else [json_number(v[0]), json_number(v[1])]
                         for k, v in self.ci95.items()},
                "design_distance": json_number(self.solution.design_distance)}


@dataclass(frozen=True)
class RouteOne:
    """Outcome of route 1: the behavioural fit and every solution, best ranked first."""

    form: str
    fit: FormFit
    solutions: tuple[RouteOneSolution, ...]
    method: str = "exact solutions of the coefficient equations"

    def to_dict(self) -> dict:
        return {"form": self.form, "method": self.method, "solutions": [s.to_dict() for s in self.solutions]}


def matching_form(problem: PartProblem) -> Form | None:
    """The behavioural form whose transfer function has the circuit's structure, or None."""
    tf = transfer_function(problem.solve_circuit, ensure_values(problem))
    num = np.trim_zeros(np.asarray(tf.numerator), "f")
    kind = normalisation_kind(tf)
    if tf.order == 1:
        if kind == "dc" and num.size == 1:
            return get_form("first-order")
        if kind == "high" and num.size == 2 and num[-1] == 0:
            return get_form("first-order-decay")
    if tf.order == 2 and kind == "dc" and num.size == 1:
        return get_form("second-order")
    if tf.order == 2 and kind == "fixed" and num.size == 2 and num[-1] == 0:
        # a band-pass k s / (a2 s^2 + a1 s + 1): its two forms split at Q = 1/2, taken from the
        # circuit at its start values (Q = sqrt(a2) / a1)
        den = np.asarray(tf.denominator, dtype=float)
        den = den / den[-1]
        q = math.sqrt(den[0]) / den[1] if den[0] > 0 and den[1] > 0 else math.nan
        return get_form("underdamped-band-pass" if q > 0.5 else "two-real-pole-band-pass")
    return None


def _target(form: Form, shape: Mapping[str, float], num_scale: float) -> tuple[np.ndarray, np.ndarray]:
    """Normalised (num, den) of the form: den's constant 1, num's lowest non-zero = num_scale."""
    num, den = form.transfer_function(**shape)
    num, den = np.asarray(num, dtype=float), np.asarray(den, dtype=float)
    den_low = den[np.nonzero(den)[0][-1]]
    num_low = num[np.nonzero(num)[0][-1]]
    return num / num_low * num_scale, den / den_low


def _num_scale(problem: PartProblem, values: Mapping[str, float]) -> float:
    num = np.asarray(transfer_function(problem.solve_circuit, values).numerator)
    return float(num[np.nonzero(num)[0][-1]])


def route_one(segments: Sequence[StepSegment], problem: PartProblem, *,
              measured_input: bool | None = None) -> RouteOne | None:
    """Fit the matching behavioural form and solve the parts; None when no form matches.

    Raises FitError when the behavioural fit fails, CircuitError when the
    fitted response has no physical solution for the parts.
    """
    form = matching_form(problem)
    if form is None:
        return None
    ff = fit_form(segments, form, measured_input=measured_input)
    if not ff.converged:
        raise FitError(f"the {form.name} fit behind the part solution did not converge ({ff.fit.message})")
    sc, names = ff.joint.scaling, list(ff.fit.names)
    keys = ["log_" + p.name for p in form.shape]
    idx = [names.index(k) for k in keys]
    theta = np.array([ff.fit.values[k] for k in keys])
    cov_theta = ff.correction.covariance[np.ix_(idx, idx)]

    def shape_of(th: np.ndarray) -> dict[str, float]:
        return {p.name: sc.shape_from_log_scaled(p, v) for p, v in zip(form.shape, th)}

    circuit, fitted = problem.solve_circuit, problem.fitted
    scale = _num_scale(problem, ensure_values(problem))

    def coef(th: np.ndarray, nd: int, dd: int) -> np.ndarray:
        """The circuit-layout coefficient vector of the form at log-shape th."""
        return flatten(*_target(form, shape_of(th), scale), nd, dd)
    solutions: list[PartSolution] = []
    for _ in range(4):  # the gain may depend on the parts: iterate to a fixed point
        num, den = _target(form, shape_of(theta), scale)
        solutions = solve_parts(circuit, fitted, num, den, problem.design or {},
                                n_starts=solve_starts(len(fitted)))
        if not solutions:
            break
        new_scale = _num_scale(problem, solutions[0].values)
        if math.isclose(new_scale, scale, rel_tol=1e-9):
            break
        scale = new_scale
    method = "exact solutions of the coefficient equations"
    if not solutions:
        # More coefficients than unknowns (or noise beyond the physical region): the
        # closest physical point in the metric of the coefficients' covariance.
        solutions = _weighted_solution(problem, coef, theta, cov_theta)
        method = "weighted least squares on the coefficients (more coefficients than unknowns)"
    if not solutions:
        raise CircuitError(f"the fitted {form.name} response has no physical solution for "
                           f"{', '.join(fitted)} in circuit {circuit.name!r}",
                           hint="check the known part values and the circuit against the board")
    out = []
    for sol in solutions:
        cj = coefficient_jacobian(circuit, fitted, sol.values)
        S = _coefficient_covariance(coef, theta, cov_theta, cj.num_degree, cj.den_degree)
        cov_ln = log_part_covariance(cj, S)
        s_log = {n: float(math.sqrt(cov_ln[i, i])) if cov_ln[i, i] >= 0 else math.nan
                 for i, n in enumerate(fitted)}
        ci = {n: (log_interval(sol.values[n], s_log[n], ff.tq) if math.isfinite(s_log[n]) else None)
              for n in fitted}
        out.append(RouteOneSolution(sol, s_log, ci))
    return RouteOne(form.name, ff, tuple(out), method)


def _coefficient_covariance(coef, theta: np.ndarray, cov_theta: np.ndarray, nd: int, dd: int) -> np.ndarray:
    """G cov(theta) G^T with G = d(coefficient vector)/d(theta) by central differences."""
    G = np.column_stack([(coef(theta + LOG_STEP * e, nd, dd) - coef(theta - LOG_STEP * e, nd, dd)) / (2 * LOG_STEP)
                         for e in np.eye(theta.size)])
    return G @ cov_theta @ G.T


def _weighted_solution(problem: PartProblem, coef, theta: np.ndarray,
                       cov_theta: np.ndarray) -> list[PartSolution]:
    """The physical part values whose coefficients are closest to the fitted ones, weighting
    each direction by the inverse of the coefficients' covariance (generalised least squares).

    coef(theta, nd, dd) -> coefficient vector. The solution's ``residual`` is the RMS of the
    whitened coefficient misfit (about 1 when the misfit is at the noise level)."""
    circuit, fitted = problem.solve_circuit, problem.fitted
    start = ensure_values(problem)
    cj0 = coefficient_jacobian(circuit, fitted, start)
    nd, dd = cj0.num_degree, cj0.den_degree
    target = coef(theta, nd, dd)
    S = _coefficient_covariance(coef, theta, cov_theta, nd, dd)
    w, U = np.linalg.eigh(S)
    keep = w > 1e-12 * max(float(np.max(w)), 1e-300)
    if not np.any(keep):
        return []
    whiten = (U[:, keep] / np.sqrt(w[keep])).T

    def residual(x: np.ndarray) -> np.ndarray:
        values = dict(zip(fitted, np.exp(np.clip(x, -200.0, 200.0))))
        try:
            c = coefficient_vector(circuit, fitted, values, nd, dd)
        except ValueError:
            return np.full(int(np.sum(keep)), 1e6)
        r = whiten @ (c - target)
        return np.where(np.isfinite(r), r, 1e6)

    base = np.log([start[n] for n in fitted])
    offsets = [np.zeros(base.size)] + [f * math.log(3.0) * e for e in np.eye(base.size) for f in (-1, 1)]
    best = None
    for off in offsets:
        try:
            fit = optimize.least_squares(residual, base + off, method="lm", xtol=1e-12, ftol=1e-12)
        except (ValueError, np.linalg.LinAlgError):
            continue
        if np.all(np.isfinite(fit.x)) and (best is None or fit.cost < best.cost):
            best = fit
    if best is None:
        return []
    values = {n: float(v) for n, v in zip(fitted, np.exp(best.x))}
    design = problem.design
    dev = {n: (values[n] - design[n]) / design[n] for n in fitted if n in design}
    dist = math.sqrt(float(np.mean([math.log(values[n] / design[n]) ** 2 for n in dev]))) if dev else None
    rms = float(np.sqrt(np.mean(best.fun ** 2)))
    return [PartSolution(values, {n: circuit.part(n).unit for n in fitted}, rms, dist, dev)]
