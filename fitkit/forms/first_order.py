"""First-order rise: a single real pole (RC low-pass, RL current, ...).

unit_step(t) = 1 - exp(-t / tau) for t >= 0, H(s) = 1 / (1 + s tau).
Derived (textbook first-order results): 10-90 % rise time tau ln 9,
2 % settling time tau ln 50, -3 dB bandwidth 1 / (2 pi tau), no overshoot.
"""

from __future__ import annotations

import math

import numpy as np

from .base import Form, ParamSpec, causal, rise_time_scale


def unit_step(t_rel: np.ndarray, *, tau: float) -> np.ndarray:
    """1 - exp(-t/tau) after the edge, 0 before; t_rel and tau in seconds."""
    after, t = causal(t_rel)
    return np.where(after, -np.expm1(-t / tau), 0.0)


def transfer_function(*, tau: float) -> tuple[np.ndarray, np.ndarray]:
    """H(s) = 1 / (tau s + 1)."""
    return np.array([1.0]), np.array([tau, 1.0])


def guess(t_rel: np.ndarray, y_norm: np.ndarray) -> list[dict[str, float]]:
    """Starting taus spread around the 63 % crossing time."""
    scale = rise_time_scale(t_rel, y_norm)
    return [{"tau": scale * f} for f in (0.5, 1.0, 2.0)]


def derived(*, tau: float) -> dict[str, float]:
    return {
        "tau": tau,
        "bandwidth_3db": 1.0 / (2.0 * math.pi * tau),
        "rise_time": tau * math.log(9.0),
        "overshoot": 0.0,
        "settling_time_2pct": tau * math.log(50.0),
    }


FIRST_ORDER = Form(
    name="first-order",
    summary="single real pole, low-pass rise: 1 - exp(-t/tau)",
    shape=(ParamSpec("tau", "s", "time", "time constant"),),
    unit_step=unit_step,
    # no closed-form step_derivatives: the slope jumps from 0 to 1/tau at the edge,
    # and Newton steps on an edge delay with that exact slope cycle across the kink
    # wherever the edge passes a sample (central differences smooth it over 1e-5
    # time units, and the delay solve converges: tests/test_fitting_many_edges.py)
    transfer_function=transfer_function,
    guess=guess,
    derived=derived,
    derived_units={"tau": "s", "bandwidth_3db": "Hz", "rise_time": "s", "overshoot": "%",
                   "settling_time_2pct": "s"},
    order=1,
)
