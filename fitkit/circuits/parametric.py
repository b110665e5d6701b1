"""The transfer function of one circuit as a few of its parts vary: fast, for the fits.

A fit in part values asks for H(s) hundreds of times with only the unknown
parts changed. Running the nodal analysis each time (mna.polynomials: two
rounds of sampling on the unit circle, root finding for pole-zero
cancellation) costs milliseconds per call. It need not be repeated:

Each part enters the nodal equations (G + s C) x = b as one rank-one stamp,
scaled by its conductance 1/R, its capacitance C or its inductance L. By the
matrix determinant lemma, det(G + s C) and the Cramer numerator of the
measured node are therefore affine in each of these parameters separately
(multi-affine in all of them together). So with n unknown parts, the
un-normalised numerator and denominator polynomials at 2^n corner values
(each parameter at its start value p0 and at 2 p0) determine them exactly
for every value:

    P(p) = sum over corners c of  prod_k [ f_k if c_k is high else 1 - f_k ] P(c),
    f_k = p_k / p0_k - 1.

A :class:`PartFamily` does the 2^n nodal analyses once, then builds each
requested TransferFunction with a few multiply-adds and the canonical
normalisation of mna.py (den's lowest-order non-zero coefficient 1). It
checks itself against the full nodal analysis at the start values and at a
second point when it is built; when the check fails, when the circuit
cancels pole-zero pairs (the reduced degree is not multi-affine), when an
amplifier gain is among the unknowns, or when values run outside the range
where the result is finite, it simply calls
:func:`fitkit.circuits.transfer_function` instead.
"""

from __future__ import annotations

import itertools
import math
from typing import Mapping, Sequence

import numpy as np

from .description import Circuit
from .mna import build_mna, unnormalised_polynomials
from .transfer import TransferFunction, transfer_function

#: Largest relative coefficient difference from the full nodal analysis accepted in the self-check.
SELF_CHECK_TOLERANCE = 1e-8
#: Most unknowns handled by corners (2^n nodal analyses); beyond this the family just calls the analysis.
MAX_CORNER_UNKNOWNS = 6


def _parameter(kind: str, value: float) -> float:
    """The quantity a part's stamp is proportional to: 1/R, C or L (SI)."""
    return 1.0 / value if kind == "resistor" else value


def _value(kind: str, parameter: float) -> float:
    return 1.0 / parameter if kind == "resistor" else parameter


class PartFamily:
    """H(s) of ``circuit`` as the parts ``unknowns`` vary, built around ``start`` (part -> SI value).

    ``family.transfer_function(values)`` equals
    ``transfer_function(circuit, values)`` to about 1e-10 relative per
    coefficient (checked at build time), at a few microseconds per call.
    ``exact`` tells whether the fast corner route is in use.
    """

    def __init__(self, circuit: Circuit, unknowns: Sequence[str], start: Mapping[str, float]):
        self.circuit = circuit
        self.unknowns = tuple(unknowns)
        self.start = {n: float(start[n]) for n in self.unknowns}
        self.kinds = tuple(circuit.part(n).kind for n in self.unknowns)
        self.reference = transfer_function(circuit, self.start)
        self.exact = False
        self.evaluations = 0          # TransferFunctions built (either route), for tests and profiling
        self.analyses = 1             # full nodal analyses run (1 for the reference)
        if (self.reference.cancelled == 0 and "amplifier" not in self.kinds
                and 0 < len(self.unknowns) <= MAX_CORNER_UNKNOWNS):
            try:
                self._build_corners()
                self.exact = self._self_check()
            except (ValueError, np.linalg.LinAlgError, ZeroDivisionError, OverflowError):
                self.exact = False

    # -- building ---------------------------------------------------------------------
    def _build_corners(self) -> None:
        ref = self.reference
        self._p0 = np.array([_parameter(k, self.start[n]) for n, k in zip(self.unknowns, self.kinds)])
        self._w0 = 1.0 / ref.time_scale
        system = build_mna(self.circuit, self.start)
        self._n_points = max(16, 2 * (system.reactive + 1))
        log_ref = None
        nums, dens = [], []
        for bits in itertools.product((0, 1), repeat=len(self.unknowns)):
            values = {n: _value(k, p * (2.0 if b else 1.0))
                      for n, k, p, b in zip(self.unknowns, self.kinds, self._p0, bits)}
            num, den, log_ref = unnormalised_polynomials(build_mna(self.circuit, values), self._w0,
                                                         self._n_points, log_ref)
            nums.append(num)
            dens.append(den)
        self._bits = np.array(list(itertools.product((0, 1), repeat=len(self.unknowns))), dtype=bool)
        self._num_corners = np.array(nums)
        self._den_corners = np.array(dens)
        self._s_powers = self._w0 ** -np.arange(self._n_points)
        self._num_degree = len(ref.num) - 1
        self._den_degree = len(ref.den) - 1
        self._num_zero = np.array(ref.num)[::-1] == 0          # structural zeros, ascending powers
        self._den_zero = np.array(ref.den)[::-1] == 0
        self._den_lowest = int(np.nonzero(~self._den_zero)[0][0])

    def _self_check(self) -> bool:
        """The corner route against the full analysis at the start and at a second point."""
        other = {n: v * (1.6 if i % 2 == 0 else 1 / 1.45) for i, (n, v) in enumerate(self.start.items())}
        for values in (self.start, other):
            fast = self._corner_route(values)
            full = transfer_function(self.circuit, values)
            self.analyses += 1
            if fast is None or full.cancelled or len(fast.num) != len(full.num) or len(fast.den) != len(full.den):
                return False
            for a, b in ((fast.numerator, full.numerator), (fast.denominator, full.denominator)):
                if np.any((a == 0) != (b == 0)):
                    return False
                nz = b != 0
                if np.any(np.abs(a[nz] - b[nz]) > SELF_CHECK_TOLERANCE * np.abs(b[nz])):
                    return False
        return True

    # -- evaluating ---------------------------------------------------------------------
    def _corner_route(self, values: Mapping[str, float]) -> TransferFunction | None:
        p = np.array([_parameter(k, float(values[n])) for n, k in zip(self.unknowns, self.kinds)])
        f = p / self._p0 - 1.0
        weights = np.prod(np.where(self._bits, f[None, :], 1.0 - f[None, :]), axis=1)
        num = (weights @ self._num_corners) * self._s_powers          # ascending powers of s
        den = (weights @ self._den_corners) * self._s_powers
        lowest = den[self._den_lowest]
        if not (np.all(np.isfinite(num)) and np.all(np.isfinite(den))) or lowest == 0:
            return None
        num = np.where(self._num_zero, 0.0, num[: self._num_degree + 1] / lowest)
        den = np.where(self._den_zero, 0.0, den[: self._den_degree + 1] / lowest)
        if den[-1] == 0 or not np.all(np.isfinite(num)) or not np.all(np.isfinite(den)):
            return None
        den[self._den_lowest] = 1.0
        return TransferFunction(tuple(float(c) + 0.0 for c in num[::-1]),
                                tuple(float(c) + 0.0 for c in den[::-1]), 0)

    def transfer_function(self, values: Mapping[str, float]) -> TransferFunction:
        """H(s) with the unknown parts at ``values`` (part -> SI value; others as in the circuit).

        Raises CircuitError as fitkit.circuits.transfer_function does when the
        fast route cannot be used and the full analysis fails.
        """
        self.evaluations += 1
        if self.exact and all(math.isfinite(float(values[n])) and float(values[n]) > 0 for n in self.unknowns):
            tf = self._corner_route(values)
            if tf is not None:
                return tf
        self.analyses += 1
        return transfer_function(self.circuit, {n: float(values[n]) for n in self.unknowns})
