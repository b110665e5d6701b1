"""A circuit's step response as a fitting form whose parameters are part values.

The direct route (see direct.py) fits a capture with the unknown part values
themselves as the parameters. The fitting engine fits *forms*
(fitkit.forms.base.Form): a normalised unit-step response with positive
shape parameters fitted in log space, plus per-edge levels. So the circuit
is wrapped as a form:

* shape parameters = the unknown parts, in ohms / farads / henries, of kind
  "ratio" (the engine fits ln(value), so values stay positive and a
  relative error is the natural scale);
* unit_step(t) = the circuit's step response (nodal analysis ->
  TransferFunction.step_response, exact for a step) divided by a
  normalisation: the DC gain when it is non-zero (the response settles at 1),
  else the high-frequency gain (a high-pass: jumps to 1 and decays to 0),
  else a constant fixed at the start values (a band-pass);
* derived = the fitted circuit's tau / f0 / Q / DC gain (TransferFunction.quantities()).

The engine hands unit_step times in its own scaled unit (seconds / time_unit),
so the form is built for one scaling: ``time_unit`` seconds per scaled unit
(get it from fitkit.fitting.engine.make_scaling before building the form).
"""

from __future__ import annotations

import math
from collections import OrderedDict
from typing import Mapping, Sequence

import numpy as np

from ..circuits import Circuit, TransferFunction, transfer_function
from ..forms.base import Form, ParamSpec

#: Units of the quantities TransferFunction.quantities() returns.
QUANTITY_UNITS = {"dc_gain": "", "tau": "s", "f0": "Hz", "Q": "", "zeta": "", "tau_slow": "s",
                  "tau_fast": "s", "tau_slowest": "s"}
#: How many transfer functions the form keeps (the fit revisits the same values often).
CACHE_SIZE = 64


def normalisation_kind(tf: TransferFunction) -> str:
    """"dc" (settles at the DC gain), "high" (jumps to the high-frequency gain, decays) or "fixed"."""
    dc = tf.dc_gain
    if math.isfinite(dc) and abs(dc) > 1e-12 * max(abs(c) for c in tf.numerator):
        return "dc"
    if len(tf.numerator) == len(tf.denominator) and tf.numerator[0] != 0:
        return "high"
    return "fixed"


def modal_step_response(tf: TransferFunction, t: np.ndarray) -> np.ndarray | None:
    """Unit-step response by partial fractions, or None when two poles (nearly) coincide.

    With H(s) = D + sum_i r_i / (s - p_i) (simple poles p_i, residues
    r_i = N(p_i) / den'(p_i)), the step response is
    y(t) = D + sum_i r_i (exp(p_i t) - 1) / p_i for t >= 0, and 0 before.
    Much cheaper than the matrix exponential, and exact for simple poles; the
    residues grow as 1/(p_i - p_j), so poles closer than 1e-4 relative (or a
    pole at 0) are left to TransferFunction.step_response.
    """
    num, den = np.asarray(tf.numerator, dtype=float), np.asarray(tf.denominator, dtype=float)
    if len(num) > len(den) or tf.order == 0:
        return None
    lead = den[0]
    num, den = num / lead, den / lead
    direct = 0.0
    if len(num) == len(den):
        direct = num[0]
        num = num[1:] - direct * den[1:]
    poles = np.roots(den)
    mag = np.abs(poles)
    if np.any(mag == 0) or not np.all(np.isfinite(poles)):
        return None
    gaps = np.abs(poles[:, None] - poles[None, :])
    np.fill_diagonal(gaps, np.inf)
    if np.min(gaps / np.maximum(mag[:, None], mag[None, :])) < 1e-4:
        return None
    residues = np.polyval(num, poles) / np.polyval(np.polyder(den), poles)
    t = np.asarray(t, dtype=float)
    after = t >= 0
    tc = np.where(after, t, 0.0)
    with np.errstate(over="ignore", invalid="ignore"):
        y = direct + np.real(np.tensordot(np.expm1(np.multiply.outer(tc, poles)), residues / poles, axes=1))
    if not np.all(np.isfinite(y)):
        return None
    return np.where(after, y, 0.0)


def step_response_any_shape(tf: TransferFunction, t: np.ndarray) -> np.ndarray:
    """Unit-step response for a 1-D or 2-D time array (seconds): by partial fractions
    when the poles are simple, else tf.step_response (matrix exponential), column by
    column for a 2-D array so each column stays evenly spaced (its fast path)."""
    t = np.asarray(t, dtype=float)
    fast = modal_step_response(tf, t)
    if fast is not None:
        return fast
    if t.ndim <= 1:
        return tf.step_response(t)
    out = np.empty_like(t)
    for j in range(t.shape[1]):
        out[:, j] = tf.step_response(t[:, j])
    return out


def circuit_form(circuit: Circuit, unknowns: Sequence[str], time_unit: float,
                 starts: Sequence[Mapping[str, float]], name: str) -> Form:
    """The circuit as a Form with the ``unknowns`` as shape parameters (SI values).

    circuit: with its measurement chain (included in the response) and every
        other part known.
    time_unit: seconds per scaled time unit of the engine's scaling.
    starts: part values (SI) the form offers as its starting guesses.
    name: the form's name, e.g. "circuit:rc-ladder-2".
    """
    unknowns = tuple(unknowns)
    if not starts:
        raise ValueError("circuit_form needs at least one start")
    cache: OrderedDict[tuple[float, ...], TransferFunction] = OrderedDict()

    def tf_of(shape: Mapping[str, float]) -> TransferFunction:
        key = tuple(float(shape[n]) for n in unknowns)
        tf = cache.get(key)
        if tf is None:
            tf = transfer_function(circuit, dict(zip(unknowns, key)))
            cache[key] = tf
            if len(cache) > CACHE_SIZE:
                cache.popitem(last=False)
        return tf

    tf0 = tf_of(starts[0])
    kind = normalisation_kind(tf0)
    fixed_scale = 1.0
    if kind == "fixed":
        probe = np.linspace(0.0, 10.0 * tf0.time_scale, 2001)
        fixed_scale = float(np.max(np.abs(tf0.step_response(probe)))) or 1.0

    def scale_of(tf: TransferFunction) -> float:
        if kind == "dc":
            return tf.dc_gain
        if kind == "high":
            return tf.numerator[0] / tf.denominator[0]
        return fixed_scale

    def unit_step(t_rel: np.ndarray, **shape: float) -> np.ndarray:
        tf = tf_of(shape)
        return step_response_any_shape(tf, np.asarray(t_rel, dtype=float) * time_unit) / scale_of(tf)

    def transfer(**shape: float) -> tuple[np.ndarray, np.ndarray]:
        """Normalised H(s), s in rad/s (SI), whose step response is unit_step."""
        tf = tf_of(shape)
        return tf.numerator / scale_of(tf), tf.denominator

    def guess(_t_rel: np.ndarray, _y_norm: np.ndarray) -> list[dict[str, float]]:
        return [{n: float(s[n]) for n in unknowns} for s in starts]

    def derived(**shape: float) -> dict[str, float]:
        return tf_of(shape).quantities()

    specs = tuple(ParamSpec(n, circuit.part(n).unit, "ratio", f"{circuit.part(n).kind} {n}")
                  for n in unknowns)
    return Form(name=name, summary=f"step response of circuit {circuit.name} with parts "
                f"{', '.join(unknowns)} fitted directly",
                shape=specs, unit_step=unit_step, transfer_function=transfer, guess=guess,
                derived=derived, derived_units=QUANTITY_UNITS, order=tf0.order,
                final_value=1.0 if kind == "dc" else 0.0, auto_candidate=False)
