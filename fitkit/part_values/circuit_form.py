"""A circuit's step response as a fitting form whose parameters are part values.

The direct route (see direct.py) fits a capture with the unknown part values
themselves as the parameters. The fitting engine fits *forms*
(fitkit.forms.base.Form): a normalised unit-step response with positive
shape parameters fitted in log space, plus per-edge levels. So the circuit
is wrapped as a form:

* shape parameters = the unknown parts, in ohms / farads / henries, of kind
  "ratio" (the engine fits ln(value), so values stay positive and a
  relative error is the natural scale);
* unit_step(t) = the circuit's step response (H(s) from a
  circuits.parametric.PartFamily, which equals the nodal analysis at a few
  microseconds per call -> TransferFunction.step_response, exact for a step) divided by a
  normalisation: the DC gain when it is non-zero (the response settles at 1),
  else the high-frequency gain (a high-pass: jumps to 1 and decays to 0),
  else a constant fixed at the start values (a band-pass);
* derived = the fitted circuit's tau / f0 / Q / DC gain (TransferFunction.quantities()).

The engine hands unit_step times in its own scaled unit (seconds / time_unit),
so the form is built for one scaling: ``time_unit`` seconds per scaled unit
(get it from fitkit.fitting.form_fit.make_scaling before building the form).
"""

from __future__ import annotations

import math
from collections import OrderedDict
from typing import Mapping, Sequence

import numpy as np

from ..circuits import Circuit, TransferFunction
from ..circuits.parametric import PartFamily
from ..forms.base import Form, ParamSpec

#: The DC gain the fitted parts give (TransferFunction.quantities()'s "dc_gain"), named apart
#: from the measured gain (output step / input step) every fit reports as "gain".
CIRCUIT_DC_GAIN = "circuit_dc_gain"
#: Units of the derived quantities (TransferFunction.quantities(), dc_gain renamed).
QUANTITY_UNITS = {CIRCUIT_DC_GAIN: "", "tau": "s", "f0": "Hz", "Q": "", "zeta": "", "tau1": "s",
                  "tau2": "s", "tau_dominant": "s"}
#: How many transfer functions the form keeps (the fit revisits the same values often).
CACHE_SIZE = 64
#: How many step responses (per set of times) the form keeps.
RESPONSE_CACHE_SIZE = 16


def normalisation_kind(tf: TransferFunction) -> str:
    """"dc" (settles at the DC gain), "high" (jumps to the high-frequency gain, decays) or "fixed"."""
    dc = tf.dc_gain
    if math.isfinite(dc) and abs(dc) > 1e-12 * max(abs(c) for c in tf.numerator):
        return "dc"
    if len(tf.numerator) == len(tf.denominator) and tf.numerator[0] != 0:
        return "high"
    return "fixed"


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
    family = PartFamily(circuit, unknowns, starts[0])     # H(s) in microseconds, not a nodal analysis per call

    def tf_of(shape: Mapping[str, float]) -> TransferFunction:
        key = tuple(float(shape[n]) for n in unknowns)
        tf = cache.get(key)
        if tf is None:
            tf = family.transfer_function(dict(zip(unknowns, key)))
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

    responses: OrderedDict[tuple, np.ndarray] = OrderedDict()

    def unit_step(t_rel: np.ndarray, **shape: float) -> np.ndarray:
        # A joint fit asks for the same times once per edge (edges of equal length): keep the last few.
        t_rel = np.asarray(t_rel, dtype=float)
        key = (tuple(float(shape[n]) for n in unknowns), t_rel.shape, t_rel.tobytes())
        y = responses.get(key)
        if y is None:
            tf = tf_of(shape)
            y = tf.step_response(t_rel * time_unit) / scale_of(tf)
            responses[key] = y
            if len(responses) > RESPONSE_CACHE_SIZE:
                responses.popitem(last=False)
        else:
            responses.move_to_end(key)
        return y.copy()

    def transfer(**shape: float) -> tuple[np.ndarray, np.ndarray]:
        """Normalised H(s), s in rad/s (SI), whose step response is unit_step."""
        tf = tf_of(shape)
        return tf.numerator / scale_of(tf), tf.denominator

    def guess(_t_rel: np.ndarray, _y_norm: np.ndarray) -> list[dict[str, float]]:
        return [{n: float(s[n]) for n in unknowns} for s in starts]

    def derived(**shape: float) -> dict[str, float]:
        q = tf_of(shape).quantities()
        q[CIRCUIT_DC_GAIN] = q.pop("dc_gain")
        return q

    specs = tuple(ParamSpec(n, circuit.part(n).unit, "ratio", f"{circuit.part(n).kind} {n}")
                  for n in unknowns)
    return Form(name=name, summary=f"step response of circuit {circuit.name} with parts "
                f"{', '.join(unknowns)} fitted directly",
                shape=specs, unit_step=unit_step, transfer_function=transfer, guess=guess,
                derived=derived, derived_units=QUANTITY_UNITS, order=tf0.order,
                final_value=1.0 if kind == "dc" else 0.0, auto_candidate=False,
                # only a response with a high-frequency gain jumps at the edge (a high-pass);
                # a band-pass rises from its baseline, so its edge time can be fitted
                jumps_at_edge=kind == "high")
