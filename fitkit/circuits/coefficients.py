"""Transfer-function coefficients as functions of the unknown part values.

This is what the fits need from a circuit. With the canonical normalisation
(den's lowest-order non-zero coefficient = 1, see mna.py) the coefficients
that carry information are all of num and all of den except that fixed 1;
:func:`coefficient_vector` lays them out in that order:

    [num_0 .. num_m (descending powers), den_0 .. den_{n-1} (descending, without the 1)]

with ``labels`` such as "num s^0", "den s^2". :func:`coefficient_jacobian`
gives d(coefficient)/d(ln part value) by central differences in log space
(part values are positive and span decades, so log is the natural scale).
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any, Mapping, Sequence

import numpy as np

from ..results import json_number
from .description import Circuit
from .transfer import transfer_function

#: Relative step in ln(part value) for the central differences.
LOG_STEP = 1e-5


def _as_mapping(unknowns: Sequence[str], values: Mapping[str, float] | Sequence[float]) -> dict[str, float]:
    if isinstance(values, Mapping):
        return {n: float(values[n]) for n in unknowns}
    values = list(values)
    if len(values) != len(unknowns):
        raise ValueError(f"{len(unknowns)} unknowns but {len(values)} values")
    return {n: float(v) for n, v in zip(unknowns, values)}


def coefficients(circuit: Circuit, unknowns: Sequence[str],
                 values: Mapping[str, float] | Sequence[float]) -> tuple[np.ndarray, np.ndarray]:
    """Normalised (num, den), descending powers of s, with the unknown parts set to ``values``.

    ``values`` is a mapping part name -> SI value, or a sequence aligned with ``unknowns``.
    """
    tf = transfer_function(circuit, _as_mapping(unknowns, values))
    return tf.numerator, tf.denominator


def coefficient_labels(num_degree: int, den_degree: int) -> tuple[str, ...]:
    """Labels of the coefficient vector: "num s^k" (k = m..0), "den s^k" (k = n..1)."""
    return (tuple(f"num s^{k}" for k in range(num_degree, -1, -1))
            + tuple(f"den s^{k}" for k in range(den_degree, 0, -1)))


def flatten(num: np.ndarray, den: np.ndarray, num_degree: int, den_degree: int) -> np.ndarray:
    """The coefficient vector for fixed degrees (left-padding with zeros).

    Raises ValueError when a polynomial has a higher degree than given.
    """
    num = np.trim_zeros(np.asarray(num, dtype=float), "f") if np.any(num) else np.zeros(1)
    den = np.asarray(den, dtype=float)
    if num.size - 1 > num_degree or den.size - 1 > den_degree:
        raise ValueError("degree larger than the fixed structure")
    n_full = np.concatenate([np.zeros(num_degree + 1 - num.size), num])
    d_full = np.concatenate([np.zeros(den_degree + 1 - den.size), den])
    return np.concatenate([n_full, d_full[:-1]])


def coefficient_vector(circuit: Circuit, unknowns: Sequence[str],
                       values: Mapping[str, float] | Sequence[float],
                       num_degree: int | None = None, den_degree: int | None = None) -> np.ndarray:
    """The coefficient vector (see module docstring) at ``values``.

    Degrees default to those found at ``values``; give them to keep the layout
    fixed while values vary.
    """
    num, den = coefficients(circuit, unknowns, values)
    nd = len(num) - 1 if num_degree is None else num_degree
    dd = len(den) - 1 if den_degree is None else den_degree
    return flatten(num, den, nd, dd)


@dataclass(frozen=True)
class CoefficientJacobian:
    """Coefficients and their sensitivities at one set of part values.

    unknowns: the part names (columns).
    point: their values in SI units.
    labels: coefficient names (rows), see coefficient_labels.
    values: the coefficient vector (SI: coefficient of s^k in s^k units).
    jacobian: d(coefficient)/d(ln part value), shape (rows, columns).
    num_degree, den_degree: the polynomial degrees of the layout.
    """

    unknowns: tuple[str, ...]
    point: tuple[float, ...]
    labels: tuple[str, ...]
    values: np.ndarray
    jacobian: np.ndarray
    num_degree: int
    den_degree: int

    def to_dict(self) -> dict[str, Any]:
        return {"unknowns": list(self.unknowns), "point": [json_number(v) for v in self.point],
                "labels": list(self.labels), "values": [json_number(v) for v in self.values],
                "jacobian": [[json_number(v) for v in row] for row in self.jacobian]}


def coefficient_jacobian(circuit: Circuit, unknowns: Sequence[str],
                         values: Mapping[str, float] | Sequence[float],
                         step: float = LOG_STEP) -> CoefficientJacobian:
    """Coefficient vector and its Jacobian w.r.t. ln(unknown part values), by central differences.

    The layout (degrees) is that found at ``values``; perturbed evaluations
    keep it. Accuracy about step^2 relative (1e-10 with the default step).
    """
    point = _as_mapping(unknowns, values)
    num, den = coefficients(circuit, unknowns, point)
    nd, dd = len(num) - 1, len(den) - 1
    c0 = flatten(num, den, nd, dd)
    J = np.zeros((c0.size, len(unknowns)))
    for j, name in enumerate(unknowns):
        up = dict(point, **{name: point[name] * math.exp(step)})
        down = dict(point, **{name: point[name] * math.exp(-step)})
        try:
            c_up = coefficient_vector(circuit, unknowns, up, nd, dd)
            c_down = coefficient_vector(circuit, unknowns, down, nd, dd)
        except ValueError:
            raise circuit.error(f"the transfer function changes order when {name} varies near "
                                f"{point[name]:.4g}: the values make a pole and zero cancel by accident",
                                hint="analyse at slightly different (design) values") from None
        J[:, j] = (c_up - c_down) / (2 * step)
    return CoefficientJacobian(tuple(unknowns), tuple(point[n] for n in unknowns),
                               coefficient_labels(nd, dd), c0, J, nd, dd)


def log_part_covariance(cj: CoefficientJacobian, coefficient_covariance: np.ndarray) -> np.ndarray:
    """Covariance of ln(unknown part values) implied by a covariance of the coefficient vector.

    First-order propagation by generalised least squares:
    cov(ln p) = (J^T S^+ J)^+ with J = cj.jacobian and S the coefficient
    covariance (same layout as cj.values; pseudo-inverses so that exactly
    known coefficients, such as a structural 1, can have zero variance). With
    as many informative coefficients as unknowns this is J^-1 S J^-T. The
    relative standard error of part k is sqrt(cov[k, k]).
    """
    S = np.asarray(coefficient_covariance, dtype=float)
    if S.shape != (cj.values.size, cj.values.size):
        raise ValueError(f"coefficient covariance must be {cj.values.size} x {cj.values.size}")
    J = cj.jacobian
    return np.linalg.pinv(J.T @ np.linalg.pinv(S, hermitian=True) @ J, hermitian=True)
