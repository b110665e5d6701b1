"""The tolerance envelope: the step responses a design allows.

Every toleranced part is drawn independently and uniformly within its
tolerance band (a part's tolerance is a guaranteed limit, not a standard
deviation, and production lots are often flat within it or binned; uniform is
the plainer and wider assumption of the two; common practice, no source),
``trials`` times with a fixed seed, and all worst-case corners (each part at
either end of its band) are added when there are at most ``MAX_CORNER_PARTS``
parts (2^n corners). For each board the circuit (with its measurement chain)
gives a unit-step response and its behavioural quantities (tau, f0, Q, DC
gain; fitkit.circuits.TransferFunction.quantities).

The envelope is the pointwise minimum and maximum of the responses; the
allowed range of each quantity is its minimum and maximum over all boards
drawn (corners included). These ranges are the default acceptance limits
when the design gives none.
"""

from __future__ import annotations

import itertools
import math
from dataclasses import dataclass
from typing import Any, Mapping

import numpy as np

from ..circuits import transfer_function
from ..errors import CircuitError
from ..results import json_number
from .design import Design, analysed_circuit

MAX_CORNER_PARTS = 8
DISTRIBUTION = "uniform within each part's tolerance, independent parts"


def behavioural_quantities(tf) -> dict[str, float]:
    """tau / f0 / Q / gain of a transfer function, named as the check judges them."""
    q = tf.quantities()
    out = {"gain": q["dc_gain"]}
    if "tau" in q:
        out["tau"] = q["tau"]
    for k in ("f0", "Q"):
        if k in q:
            out[k] = q[k]
    return out


@dataclass(frozen=True)
class Envelope:
    """The design's allowed responses on a time grid.

    time: seconds after the edge; low, high, nominal: unit-step responses (V per V of step).
    ranges: quantity -> (min, max) over all boards drawn, SI units.
    nominal_quantities: the nominal board's quantities.
    trials, corners: boards drawn at random and at the corners.
    """

    time: np.ndarray
    low: np.ndarray
    high: np.ndarray
    nominal: np.ndarray
    ranges: Mapping[str, tuple[float, float]]
    nominal_quantities: Mapping[str, float]
    trials: int
    corners: int
    distribution: str = DISTRIBUTION

    def to_dict(self) -> dict[str, Any]:
        return {"trials": self.trials, "corners": self.corners, "distribution": self.distribution,
                "allowed_ranges": {k: [json_number(a), json_number(b)] for k, a, b in
                                   ((k, *v) for k, v in self.ranges.items())},
                "nominal": {k: json_number(v) for k, v in self.nominal_quantities.items()}}


def tolerance_envelope(design: Design, time: np.ndarray, *, trials: int = 200, seed: int = 0,
                       measured_input: bool = False) -> Envelope:
    """Monte Carlo over the tolerances plus worst-case corners; see the module docstring.

    time: seconds after the edge at which to evaluate the responses.
    """
    time = np.asarray(time, dtype=float)
    rng = np.random.default_rng(seed)
    names = list(design.parts)
    lows = np.array([design.parts[n].low for n in names])
    highs = np.array([design.parts[n].high for n in names])
    boards = [lows + (highs - lows) * rng.random(len(names)) for _ in range(int(trials))]
    n_corners = 0
    if len(names) <= MAX_CORNER_PARTS:
        for pick in itertools.product((0, 1), repeat=len(names)):
            boards.append(np.where(np.array(pick) == 1, highs, lows))
            n_corners += 1
    nominal_circuit = analysed_circuit(design.circuit, measured_input)
    nominal_tf = transfer_function(nominal_circuit)
    nominal = nominal_tf.step_response(time)
    nominal_q = behavioural_quantities(nominal_tf)
    low, high = nominal.copy(), nominal.copy()
    ranges = {k: [v, v] for k, v in nominal_q.items()}
    for values in boards:
        circuit = analysed_circuit(design.circuit.with_values(dict(zip(names, values))), measured_input)
        try:
            tf = transfer_function(circuit)
            y = tf.step_response(time)
        except CircuitError:
            continue
        np.minimum(low, y, out=low)
        np.maximum(high, y, out=high)
        for k, v in behavioural_quantities(tf).items():
            if k in ranges and math.isfinite(v):
                ranges[k][0] = min(ranges[k][0], v)
                ranges[k][1] = max(ranges[k][1], v)
    return Envelope(time, low, high, nominal, {k: (a, b) for k, (a, b) in ranges.items()}, nominal_q,
                    int(trials), n_corners)


@dataclass(frozen=True)
class EnvelopeComparison:
    """The measured response against the envelope.

    fraction_outside: share of samples after the edge outside the envelope by
        more than ``margin`` (V); max_excursion: largest distance outside (V);
    margin: 3 x the noise rms (V): excursions smaller than that are noise.
    """

    fraction_outside: float
    max_excursion: float
    margin: float
    n_samples: int

    def to_dict(self) -> dict[str, Any]:
        return {"fraction_outside": json_number(self.fraction_outside),
                "max_excursion": json_number(self.max_excursion), "margin": json_number(self.margin),
                "samples_compared": self.n_samples}


def compare(envelope: Envelope, time: np.ndarray, output: np.ndarray, *, baseline: float, step: float,
            noise_rms: float) -> EnvelopeComparison:
    """Compare one segment (time after the edge, s; output, V) with the envelope
    scaled to volts as baseline + step * response."""
    time = np.asarray(time, dtype=float)
    keep = time >= 0
    lo = baseline + step * np.interp(time[keep], envelope.time, envelope.low)
    hi = baseline + step * np.interp(time[keep], envelope.time, envelope.high)
    lo, hi = np.minimum(lo, hi), np.maximum(lo, hi)
    y = np.asarray(output, dtype=float)[keep]
    excess = np.maximum(lo - y, 0) + np.maximum(y - hi, 0)
    margin = 3 * noise_rms if math.isfinite(noise_rms) else 0.0
    n = int(keep.sum())
    frac = float(np.mean(excess > margin)) if n else float("nan")
    return EnvelopeComparison(frac, float(excess.max()) if n else float("nan"), margin, n)
