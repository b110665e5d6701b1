"""Scaled units inside the fit: parameters of order one.

Time is measured from each edge in units of the first time-constant guess,
volts from the first segment's baseline in units of its step. A form's shape
parameters are fitted as the natural log of their scaled value, so they stay
positive and a factor-of-two error is the same distance whether tau is 1 ns or
10 s. (Parameters of order one keep the least-squares problem well
conditioned; common practice, no source.)
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from ..conditioning.segment import StepSegment
from ..forms.base import Form, ParamSpec


def reference_step(seg: StepSegment, form: Form | None = None) -> float:
    """The signed size (V) of a segment's response, the 100 % of its normalised shape.

    ``final - baseline`` for a response that settles to a new level; for one
    that returns to its baseline (or a form whose step response ends at 0),
    the conditioning's ``step_size`` or else the peak excursion of the output.
    Never zero (falls back to the output's range, then 1).
    """
    decays = getattr(seg, "returns_to_baseline", False) or (
        form is not None and getattr(form, "final_value", 1.0) == 0.0)
    step = float(seg.step)
    if decays or not (math.isfinite(step) and step != 0.0):
        size = float(getattr(seg, "step_size", math.nan))
        if decays or not math.isfinite(size) or size == 0.0:
            dev = np.asarray(seg.output, dtype=float) - seg.baseline
            after = np.asarray(seg.time) >= seg.edge_time
            dev = dev[after] if np.any(after) else dev
            size = float(dev[np.argmax(np.abs(dev))]) if dev.size else math.nan
        step = size
    if not (math.isfinite(step) and step != 0.0):
        step = float(np.ptp(seg.output)) if seg.output.size else 1.0
    return step if step != 0.0 else 1.0


#: Long records are block-averaged to about this many points before the rough
#: read-offs that seed a fit (time scale, guesses, trial delays).
ROUGH_POINTS = 8000
#: A scaled log shape value beyond +- this means the fit has run away (e^60 = 1e26 time units).
RUNAWAY_LOG = 60.0


def decimated(t: np.ndarray, y: np.ndarray, max_points: int = ROUGH_POINTS) -> tuple[np.ndarray, np.ndarray]:
    """Block means of (t, y) in blocks of ceil(n / max_points) samples (unchanged when short).

    Only for starting values: the guesses read crossings and time scales off a
    lightly smoothed trace, which block means of a long record give just as
    well at a fraction of the cost.
    """
    t = np.asarray(t, dtype=float)
    y = np.asarray(y, dtype=float)
    k = int(math.ceil(t.size / max_points))
    if k <= 1:
        return t, y
    n = (t.size // k) * k
    return t[:n].reshape(-1, k).mean(axis=1), y[:n].reshape(-1, k).mean(axis=1)


@dataclass(frozen=True)
class Scaling:
    """Units of the fit.

    time_unit: seconds per scaled time unit (> 0).
    volt_origin: volts at scaled 0 (the first segment's baseline).
    volt_unit: volts per scaled volt unit (> 0; the first segment's |step|).
    input_unit: volts per scaled input unit (the first input step), 1 when there is no input.
    """

    time_unit: float
    volt_origin: float
    volt_unit: float
    input_unit: float = 1.0

    def shape_unit(self, spec: ParamSpec) -> float:
        """Physical value of one scaled unit of a shape parameter (SI)."""
        if spec.kind == "time":
            return self.time_unit
        if spec.kind == "frequency":
            return 1.0 / self.time_unit
        return 1.0

    def shape_to_log_scaled(self, spec: ParamSpec, value: float) -> float:
        """ln(value / unit) for a positive physical shape value."""
        return math.log(value / self.shape_unit(spec))

    def shape_from_log_scaled(self, spec: ParamSpec, log_scaled: float) -> float:
        """The physical value of a scaled log. A log beyond +-RUNAWAY_LOG means
        the fit has run away: it is clipped there, as the joint model clips it
        (fitkit.fitting.joint_model.JointModel.shape_scaled), and the fit's
        interval then says the value is not determined (no overflow)."""
        return math.exp(min(max(log_scaled, -RUNAWAY_LOG), RUNAWAY_LOG)) * self.shape_unit(spec)
