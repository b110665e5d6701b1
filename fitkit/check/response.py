"""How well one fixed set of part values explains a capture: the common yardstick
for every hypothesis of the board check.

For a circuit with all part values fixed, each step segment is modelled as

    v_out(t) = baseline + A * h(t - t_edge - shift)

with h the circuit's unit-step response (fitkit.circuits.transfer_function).
With a measured input channel, A is the measured input step
(input_after - input_before) and the model is the circuit seen from the
driven pad (the generator's source resistance is outside it; the probe at the
output stays in); only the baseline is solved, linearly. Without an input,
the generator's step is not known, so A is solved linearly too and the
source resistance is kept; the edge time is then refined by a small bounded
search for a shift (the output alone places the edge only roughly).

The residual sum of squares (V^2) and the number of fitted quantities give
AICc = n ln(RSS/n) + 2k + 2k(k+1)/(n-k-1) (Hurvich and Tsai, Biometrika 76,
1989), the criterion by which hypotheses are ranked.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Sequence

import numpy as np
from scipy.optimize import minimize_scalar

from ..circuits import Circuit, transfer_function
from ..circuits.description import SOURCE_PART
from ..conditioning.segment import StepSegment
from ..errors import CircuitError


def uses_measured_input(segments: Sequence[StepSegment]) -> bool:
    """True when every segment carries a measured input step."""
    return all(s.input is not None and s.input_before is not None and s.input_after is not None
               and abs(s.input_after - s.input_before) > 0 for s in segments)


def analysed_circuit(circuit: Circuit, measured_input: bool) -> Circuit:
    """The circuit with its measurement chain as parts; without the source
    resistance when the input is measured at the driven pad."""
    full = circuit.with_chain_parts()
    if measured_input and circuit.chain.source_resistance is not None:
        from dataclasses import replace
        parts = tuple(p for p in full.parts if p.name != SOURCE_PART)
        return replace(full, parts=parts, drive=circuit.drive)
    return full


@dataclass(frozen=True)
class Evaluation:
    """The fit of fixed part values to the segments.

    rss: residual sum of squares (V^2); n: samples used; nuisance: the number
    of linear/shift quantities solved (baselines, amplitudes, shift);
    rms: sqrt(rss/n) (V); lag1: lag-1 autocorrelation of the residuals;
    fitted: the modelled output per segment (V); shift: edge-time shift (s).
    """

    rss: float
    n: int
    nuisance: int
    rms: float
    lag1: float
    fitted: tuple[np.ndarray, ...]
    shift: float

    def aicc(self, n_parts: int) -> float:
        """AICc with ``n_parts`` fitted part values on top of the nuisance quantities."""
        k = self.nuisance + n_parts
        n = self.n
        rss = max(self.rss, 1e-300)
        return n * math.log(rss / n) + 2 * k + (2 * k * (k + 1) / (n - k - 1) if n - k - 1 > 0 else math.inf)


def step_response(tf, t: np.ndarray) -> np.ndarray:
    """Unit-step response of a TransferFunction at times t (s), 0 before t = 0.

    By the modal form: with A = V diag(lambda) V^-1 (time scaled by the
    transfer function's time_scale), x(t) = V diag((e^(lambda t) - 1)/lambda) V^-1 B
    and y = C x + D. This avoids one matrix exponential per call (slow when
    the BLAS runs many threads on a busy machine). Falls back to
    TransferFunction.step_response when the modes are nearly repeated
    (eigenvector matrix condition number above 1e8) or a pole sits at 0.
    """
    from scipy import signal
    t = np.asarray(t, dtype=float)
    num, den = tf.numerator, tf.denominator
    if tf.order == 0 or len(num) > len(den):
        return tf.step_response(t)
    T = tf.time_scale
    den_z = den / T ** np.arange(len(den) - 1, -1, -1)
    num_z = num / T ** np.arange(len(num) - 1, -1, -1)
    A, B, C, D = signal.tf2ss(num_z, den_z)
    lam, V = np.linalg.eig(A)
    if np.linalg.cond(V) > 1e8 or np.min(np.abs(lam)) < 1e-12:
        return tf.step_response(t)
    w = np.linalg.solve(V, B[:, 0])
    cv = C[0] @ V
    z = np.maximum(t, 0.0) / T
    modes = np.expm1(np.outer(z, lam)) / lam               # (n_t, n)
    y = (modes * (cv * w)).sum(axis=1).real + D[0, 0]
    y[t < 0] = 0.0
    return y


def _unit_step(circuit: Circuit, t: np.ndarray) -> np.ndarray | None:
    """h(t) of the circuit, or None when it cannot be evaluated."""
    try:
        h = step_response(transfer_function(circuit), t)
    except (CircuitError, ValueError, np.linalg.LinAlgError, OverflowError):
        return None
    return h if np.all(np.isfinite(h)) else None


def _segment_fit(seg: StepSegment, circuit: Circuit, measured: bool, shift: float):
    t = seg.time - seg.edge_time - shift
    h = _unit_step(circuit, t)
    if h is None:
        return math.inf, seg.output * 0.0
    y = seg.output
    if measured:
        a = seg.input_after - seg.input_before
        b = float(np.mean(y - a * h))
        fit = b + a * h
    else:
        X = np.column_stack([np.ones_like(h), h])
        coef, *_ = np.linalg.lstsq(X, y, rcond=None)
        fit = X @ coef
    r = y - fit
    return float(r @ r), fit


def evaluate(segments: Sequence[StepSegment], circuit: Circuit, measured_input: bool | None = None,
             shift_search: bool | None = None) -> Evaluation:
    """Fit the fixed circuit (chain not yet added) to the segments; see the module docstring."""
    segments = tuple(segments)
    measured = uses_measured_input(segments) if measured_input is None else measured_input
    model = analysed_circuit(circuit, measured)
    search = (not measured) if shift_search is None else shift_search

    def total(shift: float) -> float:
        return sum(_segment_fit(s, model, measured, shift)[0] for s in segments)

    shift = 0.0
    if search:
        dt = float(np.median(np.diff(segments[0].time)))
        scale = transfer_function(model).time_scale
        bound = max(5 * dt, 0.1 * scale)
        res = minimize_scalar(total, bounds=(-bound, bound), method="bounded",
                              options={"xatol": dt / 20, "maxiter": 40})
        if math.isfinite(res.fun) and res.fun < total(0.0):
            shift = float(res.x)
    fits = [_segment_fit(s, model, measured, shift) for s in segments]
    rss = float(sum(f[0] for f in fits))
    n = int(sum(s.n_points for s in segments))
    nuisance = len(segments) * (1 if measured else 2) + (1 if search else 0)
    if math.isfinite(rss):
        r = np.concatenate([s.output - f[1] for s, f in zip(segments, fits)])
        r = r - r.mean()
        den = float(r @ r)
        lag1 = float(r[1:] @ r[:-1] / den) if den > 0 else 0.0
    else:
        lag1 = 0.0
    return Evaluation(rss, n, nuisance, math.sqrt(rss / n) if math.isfinite(rss) else math.inf, lag1,
                      tuple(f[1] for f in fits), shift)
