"""Route 2: fit the capture with the unknown part values as the parameters.

The circuit is wrapped as a form (circuit_form.py) and handed to the
fitting engine (fitkit.fitting.fit_segments), so the direct fit gets the
engine's joint multi-edge model, starts, measured-input mode, profile or
covariance intervals and the correlated-residual correction unchanged; the
intervals of the parts come straight from that fit (log scale).

Levels (decided here, and stated in the result): the per-edge baseline and
step (ideal-step mode), or the per-edge baseline and one shared gain
(measured-input mode), are free parameters. They are not tied to the
circuit's DC gain times the input step: scope and ADC captures often carry
an unknown attenuation or scaling (the real ladder capture is in normalised
ADC units), so only the response's shape and timing inform the parts. This
is why identifiability is judged with the gain taken as unknown.

One fit is run from each start (every solution of route 1), because the
coefficient equations can have several physical solutions that the data
cannot tell apart (the unbuffered ladder's quadratic).
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Mapping, Sequence

import numpy as np

from ..conditioning.segment import StepSegment
from ..errors import FitError
from ..fitting import fit_segments
from ..fitting.form_fit import make_scaling
from ..fitting.information import corrected_aic, has_measured_input, residual_sum
from ..results import FitResult
from .circuit_form import circuit_form
from .problem import PartProblem

#: Two direct fits whose part values agree to this relative amount are the same solution.
SAME_SOLUTION = 1e-3


@dataclass(frozen=True)
class DirectFit:
    """One converged direct fit: the engine's result, its RSS (V^2), points and parameter count."""

    start: Mapping[str, float]
    result: FitResult
    rss: float
    n_points: int
    n_parameters: int

    @property
    def values(self) -> dict[str, float]:
        return {n: e.value for n, e in self.result.parameters.items() if n in self.start}

    @property
    def aicc(self) -> float:
        """The engine's corrected Akaike criterion (fitkit.fitting.information.corrected_aic)."""
        return corrected_aic(self.rss, self.n_points, self.n_parameters)


def direct_fits(segments: Sequence[StepSegment], problem: PartProblem, starts: Sequence[Mapping[str, float]],
                *, measured_input: bool | None = None, intervals: str = "auto", file: str = "",
                warnings: Sequence[str] = ()) -> tuple[list[DirectFit], list[str]]:
    """One direct fit from each start; (distinct converged fits, notes on failed starts)."""
    segments = tuple(segments)
    measured = has_measured_input(segments) if measured_input is None else measured_input
    form = scaled_circuit_form(segments, problem.solve_circuit, problem.fitted, starts, measured)
    fits: list[DirectFit] = []
    notes: list[str] = []
    for start in starts:
        start = {n: float(start[n]) for n in problem.fitted}
        try:
            with np.errstate(all="ignore"):
                result = fit_segments(segments, form, intervals=intervals, measured_input=measured,
                                      start=start, file=file, warnings=warnings)
        except FitError as err:
            notes.append(f"the direct fit from {_describe(start)} failed: {err.message}")
            continue
        values = {n: result.parameters[n].value for n in problem.fitted}
        if any(all(abs(math.log(values[n] / f.values[n])) < SAME_SOLUTION for n in values) for f in fits):
            continue
        rss, n_points = residual_sum(result)
        fits.append(DirectFit(start, result, rss, n_points, result.diagnostics.n_parameters))
    return fits, notes


def scaled_circuit_form(segments: Sequence[StepSegment], circuit, fitted: Sequence[str],
                        starts: Sequence[Mapping[str, float]], measured_input: bool):
    """The circuit as a form in the engine's scaled time unit for these segments
    (circuit_form.circuit_form after fitkit.fitting.form_fit.make_scaling)."""
    name = "circuit:" + circuit.name
    probe_form = circuit_form(circuit, fitted, 1.0, starts, name)
    scaling = make_scaling(segments, probe_form, measured_input)
    return circuit_form(circuit, fitted, scaling.time_unit, starts, name)


def _describe(values: Mapping[str, float]) -> str:
    from ..units import format_value
    return ", ".join(f"{n} = {format_value(v)}" for n, v in values.items())
