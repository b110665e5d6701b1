"""Underdamped second order: a ringing step response, f0 and Q with Q > 1/2.

Same response and transfer function as "second-order" (fitkit.forms.second_order),
restricted to Q > 1/2 (damping ratio zeta < 1), with the quantities read off
a ringing response added (textbook results, Ogata, *Modern Control
Engineering*, transient-response chapter; chapter from memory):

    damped frequency  fd = f0 sqrt(1 - zeta^2)             (Hz)
    peak time         tp = 1 / (2 fd) = pi / wd            (s)
    percent overshoot 100 exp(-pi zeta / sqrt(1 - zeta^2)) (%)
"""

from __future__ import annotations

import math

import numpy as np

from .base import Form, ParamSpec
from .second_order import (SECOND_ORDER_UNITS, percent_overshoot, ringing_starts,
                           second_order_quantities, step_derivatives, transfer_function,
                           unit_step)
from .shape_measures import measure_response


def derived(*, f0: float, Q: float) -> dict[str, float]:
    """The second-order quantities plus damped_frequency (Hz) and peak_time (s); nan for Q <= 1/2."""
    out = second_order_quantities(f0=f0, Q=Q)
    zeta = 1.0 / (2.0 * Q)
    root = math.sqrt((1.0 - zeta) * (1.0 + zeta)) if zeta < 1.0 else math.nan
    out["damped_frequency"] = f0 * root
    out["peak_time"] = 1.0 / (2.0 * f0 * root)
    out["overshoot"] = percent_overshoot(Q)
    return out


def guess(t_rel: np.ndarray, y_norm: np.ndarray) -> list[dict[str, float]]:
    """Starts from overshoot, ringing period and peak time, plus a spread of Q over the rise time."""
    return [s for s in ringing_starts(measure_response(t_rel, y_norm)) if s["Q"] > 0.5]


UNDERDAMPED = Form(
    name="underdamped",
    summary="ringing second order (Q > 1/2): decaying oscillation at the damped frequency",
    shape=(ParamSpec("f0", "Hz", "frequency", "natural frequency"),
           ParamSpec("Q", "", "ratio", "quality factor, 1/(2 zeta)", lower=0.5)),
    unit_step=unit_step,
    step_derivatives=step_derivatives,
    transfer_function=transfer_function,
    guess=guess,
    derived=derived,
    derived_units={**SECOND_ORDER_UNITS, "damped_frequency": "Hz", "peak_time": "s"},
    order=2,
)
