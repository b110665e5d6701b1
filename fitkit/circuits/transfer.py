"""The transfer function of a circuit and what follows from it.

``transfer_function(circuit)`` runs the nodal analysis (mna.py) and returns a
:class:`TransferFunction`: numerator and denominator in descending powers of
s, normalised so the denominator's lowest-order non-zero coefficient is 1 (for
a circuit with no pole at s = 0, den[-1] = 1 and num[-1] is the DC gain).
From it: poles and zeros (rad/s), DC gain, the characteristic quantities an
engineer reads (time constant, natural frequency f0 in Hz, Q) and the
unit-step response in volts per volt of step.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any, Mapping

import numpy as np
from scipy import linalg

from ..errors import CircuitError
from ..results import json_number
from .description import Circuit
from .mna import polynomials


@dataclass(frozen=True)
class TransferFunction:
    """H(s) = num(s) / den(s), coefficients in descending powers of s (SI: s in rad/s).

    Normalised so den's lowest-order non-zero coefficient is 1.
    ``cancelled`` counts pole-zero pairs divided out (parts the measured node cannot see).
    """

    num: tuple[float, ...]
    den: tuple[float, ...]
    cancelled: int = 0

    @property
    def numerator(self) -> np.ndarray:
        return np.asarray(self.num, dtype=float)

    @property
    def denominator(self) -> np.ndarray:
        return np.asarray(self.den, dtype=float)

    @property
    def order(self) -> int:
        """Number of poles."""
        return len(self.den) - 1

    @property
    def poles(self) -> np.ndarray:
        """Poles in rad/s (complex), sorted by magnitude."""
        return _clean_roots(np.roots(self.denominator))

    @property
    def zeros(self) -> np.ndarray:
        """Finite zeros in rad/s (complex), sorted by magnitude."""
        return _clean_roots(np.roots(self.numerator) if len(self.num) > 1 else np.array([], dtype=complex))

    @property
    def dc_gain(self) -> float:
        """H(0); +-inf when there is a pole at s = 0."""
        if self.den[-1] == 0:
            return math.copysign(math.inf, self.num[-1]) if self.num[-1] != 0 else float("nan")
        return self.num[-1] / self.den[-1]

    @property
    def time_scale(self) -> float:
        """A characteristic time in seconds: (den[0]/den[-1])^(1/order) (geometric mean time constant)."""
        den = self.denominator
        nz = np.nonzero(den)[0]
        if self.order == 0 or nz.size < 2:
            return 1.0
        return (abs(den[nz[0]]) / abs(den[nz[-1]])) ** (1.0 / (nz[-1] - nz[0]))

    def __call__(self, s: complex | np.ndarray) -> complex | np.ndarray:
        """H evaluated at complex frequency s (rad/s)."""
        return np.polyval(self.numerator, s) / np.polyval(self.denominator, s)

    def frequency_response(self, f_hz: np.ndarray) -> np.ndarray:
        """H(j 2 pi f) for frequencies in Hz."""
        return self(2j * np.pi * np.asarray(f_hz, dtype=float))

    def quantities(self) -> dict[str, float]:
        """Characteristic quantities, SI units.

        Always "dc_gain". First order: "tau" (s). Second order: "f0" (Hz),
        "Q", "zeta", and "tau1" (slower), "tau2" (faster) (s) when the poles are
        real, named as the two-real-pole form names them. Higher order:
        "tau_dominant" (s, of the slowest pole) and, if the slowest poles are a
        complex pair, its "f0" and "Q".
        """
        out: dict[str, float] = {"dc_gain": float(self.dc_gain)}
        den = self.denominator
        if self.order == 1 and den[-1] != 0:
            out["tau"] = den[0] / den[1]
        elif self.order == 2 and den[-1] != 0 and den[0] != 0:
            a2, a1, a0 = den
            w0 = math.sqrt(a0 / a2) if a0 / a2 > 0 else float("nan")
            out["f0"] = w0 / (2 * math.pi)
            out["Q"] = math.sqrt(a0 * a2) / a1 if a1 != 0 and a0 * a2 > 0 else math.inf
            out["zeta"] = 1.0 / (2 * out["Q"]) if out["Q"] else math.inf
            disc = a1 * a1 - 4 * a0 * a2
            if disc >= -1e-12 * a1 * a1 and a1 > 0:
                r = math.sqrt(max(disc, 0.0))
                out["tau1"] = (a1 + r) / (2 * a0)
                out["tau2"] = 2 * a2 / (a1 + r)
        elif self.order > 2:
            p = self.poles
            p = p[np.abs(p) > 0]
            if p.size:
                slow = p[np.argmin(np.abs(p.real))]
                out["tau_dominant"] = 1.0 / abs(slow.real) if slow.real != 0 else math.inf
                if abs(slow.imag) > 1e-9 * abs(slow):
                    out["f0"] = abs(slow) / (2 * math.pi)
                    out["Q"] = abs(slow) / (2 * abs(slow.real)) if slow.real != 0 else math.inf
        return {k: float(v) for k, v in out.items()}

    def step_response(self, t: np.ndarray) -> np.ndarray:
        """Unit-step response y(t) for t in seconds (0 before t = 0), volts per volt.

        ``t`` may have any shape. By partial fractions when the poles are
        simple (:func:`modal_step_response`, a few elementwise exponentials),
        else by the matrix exponential of the state-space form (exact for a
        step, stable for repeated poles; a 2-D ``t`` is done column by column
        so each column keeps its evenly spaced fast path). Raises
        CircuitError when the transfer function is improper (an impulse).
        """
        t = np.asarray(t, dtype=float)
        if len(self.num) > len(self.den):
            raise CircuitError("the step response contains an impulse (more zeros than poles)",
                               hint="measure a node whose response is finite, or add the missing part")
        y = modal_step_response(self, t)
        if y is not None:
            return y
        if t.ndim <= 1:
            return self.matrix_exponential_step_response(t.ravel()).reshape(t.shape)
        flat = t.reshape(t.shape[0], -1)
        out = np.column_stack([self.matrix_exponential_step_response(flat[:, j]) for j in range(flat.shape[1])])
        return out.reshape(t.shape)

    def matrix_exponential_step_response(self, t: np.ndarray) -> np.ndarray:
        """Unit-step response at 1-D times t (s) by the matrix exponential (the fallback
        of :meth:`step_response` for repeated poles; slower, valid for any poles).

        The state is propagated with scipy.linalg.expm, in time scaled by
        ``time_scale`` to keep the matrices well conditioned.
        """
        t = np.asarray(t, dtype=float)
        num, den = self.numerator, self.denominator
        if len(num) > len(den):
            raise CircuitError("the step response contains an impulse (more zeros than poles)",
                               hint="measure a node whose response is finite, or add the missing part")
        y = np.zeros_like(t)
        after = t >= 0
        if self.order == 0:
            y[after] = num[-1] / den[-1]
            return y
        T = self.time_scale
        k = np.arange(len(den) - 1, -1, -1)
        den_z = den / T ** k                       # polynomial in z = s T
        num_z = num / T ** np.arange(len(num) - 1, -1, -1)
        from scipy import signal  # imported here: scipy.signal costs ~1 s at start-up
        A, B, Cm, Dm = signal.tf2ss(num_z, den_z)
        n = A.shape[0]
        M = np.zeros((n + 1, n + 1))
        M[:n, :n] = A
        M[:n, n] = B[:, 0]
        tau = t[after] / T
        if tau.size == 0:
            return y
        states = _propagate(M, tau, n)
        y[after] = states @ Cm[0] + Dm[0, 0]
        return y

    def to_dict(self) -> dict[str, Any]:
        return {"num": [json_number(c) for c in self.num], "den": [json_number(c) for c in self.den],
                "poles": [[json_number(p.real), json_number(p.imag)] for p in self.poles],
                "zeros": [[json_number(z.real), json_number(z.imag)] for z in self.zeros],
                "dc_gain": json_number(self.dc_gain),
                "quantities": {k: json_number(v) for k, v in self.quantities().items()},
                "cancelled_pole_zero_pairs": self.cancelled}


#: Poles closer than this, relative to the larger one, count as repeated: the
#: partial-fraction residues grow as 1 / (p_i - p_j), so the step response then
#: comes from the matrix exponential instead.
REPEATED_POLES = 1e-4
#: ... and so does a response whose modes sum to more than this many times its
#: own size (nearly repeated poles: large residues that cancel). The rounding
#: error grows about as the square of this ratio; at 100 it stays below 1e-10
#: of the response (measured against the matrix exponential on 2,000 random
#: stable transfer functions of order 1 to 4).
MODAL_AMPLIFICATION = 100.0


def modal_step_response(tf: TransferFunction, t: np.ndarray) -> np.ndarray | None:
    """Unit-step response by partial fractions; None when two poles (nearly) coincide.

    With H(s) = D + sum_i r_i / (s - p_i) for simple poles p_i and residues
    r_i = N(p_i) / den'(p_i) (partial-fraction expansion, e.g. Oppenheim and
    Willsky, Signals and Systems, 2nd ed., 1997, sec. 9.3 -- from memory),
    the response to a unit step is

        y(t) = D + sum_i (r_i / p_i) (e^(p_i t) - 1)     for t >= 0, 0 before,

    with the term r t for a simple pole at s = 0 (an integrator); conjugate
    pairs are summed as twice the real part of one. Time is scaled by
    ``tf.time_scale`` before the roots are found. Only elementwise operations are used (no matrix products),
    so the cost does not depend on the BLAS threads of a busy machine.
    ``t``: seconds, any shape. Returns None for an improper or zero-order
    transfer function, poles closer than REPEATED_POLES (relative), modes
    that sum to more than MODAL_AMPLIFICATION times the response (nearly
    repeated poles), or a non-finite result.
    """
    num, den = tf.numerator, tf.denominator
    if len(num) > len(den) or tf.order == 0 or den[0] == 0:
        return None
    T = tf.time_scale
    num_z = num / T ** np.arange(len(num) - 1, -1, -1)
    den_z = den / T ** np.arange(len(den) - 1, -1, -1)
    num_z, den_z = num_z / den_z[0], den_z / den_z[0]
    direct = 0.0
    if len(num_z) == len(den_z):
        direct = float(num_z[0])
        num_z = num_z[1:] - direct * den_z[1:]
    poles = np.roots(den_z)
    if poles.size != tf.order or not np.all(np.isfinite(poles)):
        return None
    if poles.size > 1:
        mag = np.abs(poles)
        gaps = np.abs(poles[:, None] - poles[None, :])
        np.fill_diagonal(gaps, np.inf)
        if np.any(gaps <= REPEATED_POLES * np.maximum(mag[:, None], mag[None, :])):
            return None
    residues = np.polyval(num_z, poles) / np.polyval(np.polyder(den_z), poles)
    t = np.asarray(t, dtype=float)
    z = np.where(t >= 0, t, 0.0) / T
    y = np.full(z.shape, direct)
    with np.errstate(over="ignore", invalid="ignore"):
        for p, r in zip(poles, residues):
            if p.imag < 0 and np.any(np.isclose(poles, p.conjugate(), rtol=1e-12, atol=0)):
                continue                                  # counted with its conjugate below
            if p == 0:
                y += (r * z).real                        # integrator: r t
            elif p.imag == 0:
                y += (r.real / p.real) * np.expm1(p.real * z)
            else:
                term = ((r / p) * np.expm1(p * z)).real
                y += 2.0 * term if p.imag > 0 else term
    if not np.all(np.isfinite(y)):
        return None
    dc = direct - float(np.sum(residues / poles).real) if np.all(poles != 0) else 0.0
    size = max(abs(direct), abs(dc), float(np.max(np.abs(y), initial=0.0)))
    # each mode's size over the window: |r| min(1/|p|, t_max) (|r| t_max for a pole at 0)
    modes = float(np.sum(np.abs(residues) * np.minimum(1.0 / np.maximum(np.abs(poles), 1e-300),
                                                       float(np.max(z, initial=0.0)))))
    if not modes <= MODAL_AMPLIFICATION * size:
        return None
    return np.where(t >= 0, y, 0.0)


def _clean_roots(r: np.ndarray) -> np.ndarray:
    """Roots sorted by magnitude; imaginary parts below 1e-6 of the magnitude (rounding
    of repeated real roots) set to zero."""
    r = np.asarray(r, dtype=complex)
    r = np.where(np.abs(r.imag) <= 1e-6 * np.abs(r), r.real + 0j, r)
    return r[np.lexsort((r.imag, np.abs(r)))]


#: Unevenly spaced times beyond this many are evaluated on an even grid and interpolated.
UNEVEN_DIRECT = 64
#: The grid's step times the fastest mode's rate |lambda|max: the cubic spline's relative
#: error is then of order (h |lambda|)^4 / 384, about 3e-11.
UNEVEN_GRID_STEP = 0.01
#: Points of that grid: at least the first (cheap), at most the second (a response far
#: faster than its record: each time then takes its own matrix exponential).
UNEVEN_GRID_MIN, UNEVEN_GRID_MAX = 1_000, 200_000


def _grid_points(M: np.ndarray, n: int, tau: np.ndarray) -> int:
    """Points of the even grid from min(tau) to max(tau) that _propagate reads uneven
    times off (0: evaluate each time on its own): a step of UNEVEN_GRID_STEP / |lambda|max,
    the fastest mode of A, between UNEVEN_GRID_MIN and UNEVEN_GRID_MAX points."""
    span = float(tau.max() - tau.min())
    if tau.min() < 0 or not span > 0:
        return 0
    fastest = float(np.max(np.abs(np.linalg.eigvals(M[:n, :n])))) if n else 0.0
    wanted = int(math.ceil(span * fastest / UNEVEN_GRID_STEP)) + 1
    return max(wanted, UNEVEN_GRID_MIN) if wanted <= UNEVEN_GRID_MAX else 0


def _propagate(M: np.ndarray, tau: np.ndarray, n: int) -> np.ndarray:
    """States x(tau) (rows) of x' = A x + B, x(0) = 0, with M = [[A, B], [0, 0]].

    Evenly spaced times are propagated by powers of one step's matrix exponential.
    More than UNEVEN_DIRECT uneven times (tau >= 0, in units of the time scale)
    are read off a cubic spline through an even grid over their span
    (_grid_points, fine against the fastest mode): the states are smooth for
    tau >= 0 and the spline's error is of order h^4 / 384 times the
    fourth derivative (de Boor, A Practical Guide to Splines, 1978, ch. IV), where
    one matrix exponential per sample cost seconds to minutes per fit."""
    steps = np.diff(tau)
    even = tau.size > 2 and np.allclose(steps, steps[0], rtol=1e-9, atol=0) and steps[0] > 0
    points = _grid_points(M, n, tau) if not even and tau.size > UNEVEN_DIRECT else 0
    if points:
        from scipy.interpolate import CubicSpline
        grid = np.linspace(float(tau.min()), float(tau.max()), points)
        return CubicSpline(grid, _propagate(M, grid, n), axis=0)(tau)
    if not even:
        return np.array([linalg.expm(M * ti)[:n, n] for ti in tau])
    step = linalg.expm(M * steps[0])
    first = linalg.expm(M * tau[0])[:n, n]
    # Augmented state [x; 1] evolves by powers of `step`; build them in blocks.
    block = 256
    powers = [np.eye(n + 1)]
    for _ in range(block - 1):
        powers.append(step @ powers[-1])
    P = np.array(powers)                                  # (block, n+1, n+1)
    jump = step @ powers[-1]                              # step^block
    out = np.empty((tau.size, n))
    v = np.append(first, 1.0)
    for start in range(0, tau.size, block):
        stop = min(start + block, tau.size)
        out[start:stop] = (P[: stop - start] @ v)[:, :n]
        v = jump @ v
    return out


def transfer_function(circuit: Circuit, values: Mapping[str, float] | None = None) -> TransferFunction:
    """H(s) from the driven node's source to the measured node, by nodal analysis.

    ``values`` (part name -> SI value) fills in or overrides part values;
    unknown parts otherwise use their design values. The measurement chain,
    if the circuit has one, is included. Raises CircuitError on an invalid
    circuit or a part without a value.
    """
    num, den, _, cancelled = polynomials(circuit, values)
    return TransferFunction(tuple(float(c) + 0.0 for c in num), tuple(float(c) + 0.0 for c in den), cancelled)
