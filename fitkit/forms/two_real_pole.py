"""Two real poles: an overdamped second order (two RC stages, a slow amplifier with a pole pair).

    H(s) = 1 / ((1 + s tau1)(1 + s tau2)),   tau1 >= tau2 > 0.

The textbook step response (partial fractions)
1 - (tau1 exp(-t/tau1) - tau2 exp(-t/tau2)) / (tau1 - tau2) divides by
tau1 - tau2. Rewritten exactly as

    y(t) = 1 - exp(-t/tau1) [1 + (t/tau1) (1 - exp(-d t)) / (d t)],
    d = 1/tau2 - 1/tau1 >= 0,

with (1 - exp(-x))/x from expm1 (fitkit.forms.stable_math.relative_decay),
it is exact for every tau2 <= tau1, including tau2 = tau1, where it becomes
the critically damped 1 - exp(-t/tau)(1 + t/tau).

Parametrisation: the shape parameters tau1 and tau2 are both free positive
time constants and ``unit_step`` is symmetric in them (it sorts them), so a
fit may wander across tau1 = tau2 without leaving the form; ``canonical``
and ``derived`` report them sorted, tau1 >= tau2.
Derived: tau1, tau2, f0 = 1/(2 pi sqrt(tau1 tau2)), Q = sqrt(tau1 tau2)/(tau1 + tau2)
(<= 1/2), zeta = 1/(2Q), omega0, and the numerical bandwidth, rise time,
overshoot (0) and 2 % settling time.
"""

from __future__ import annotations

import math

import numpy as np

from .base import Form, ParamSpec, causal
from .metrics import half_power_frequency, step_metrics
from .second_order import overdamped_starts
from .shape_measures import measure_response
from .stable_math import relative_decay


def unit_step(t_rel: np.ndarray, *, tau1: float, tau2: float) -> np.ndarray:
    """Step response of 1/((1 + s tau1)(1 + s tau2)), symmetric in the taus; seconds."""
    slow, fast = max(tau1, tau2), min(tau1, tau2)
    after, t = causal(t_rel)
    d = (slow - fast) / (slow * fast)
    x = t / slow
    return np.where(after, 1.0 - np.exp(-x) * (1.0 + x * relative_decay(d * t)), 0.0)


def transfer_function(*, tau1: float, tau2: float) -> tuple[np.ndarray, np.ndarray]:
    """H(s) = 1 / (tau1 tau2 s^2 + (tau1 + tau2) s + 1)."""
    return np.array([1.0]), np.array([tau1 * tau2, tau1 + tau2, 1.0])


def canonical(shape) -> dict[str, float]:
    """The shape with tau1 >= tau2."""
    a, b = shape["tau1"], shape["tau2"]
    return {"tau1": max(a, b), "tau2": min(a, b)}


def pole_pair_quantities(tau1: float, tau2: float) -> dict[str, float]:
    """f0 (Hz), Q, zeta and omega0 (rad/s) of the pole pair 1/((1 + s tau1)(1 + s tau2))."""
    root = math.sqrt(tau1 * tau2)
    q = root / (tau1 + tau2)
    return {"f0": 1.0 / (2.0 * math.pi * root), "Q": q, "zeta": 1.0 / (2.0 * q), "omega0": 1.0 / root}


def derived(*, tau1: float, tau2: float) -> dict[str, float]:
    """tau1 >= tau2 (s), f0 (Hz), Q, zeta, omega0 (rad/s), bandwidth_3db (Hz),
    rise_time (s), overshoot (%), settling_time_2pct (s)."""
    s = canonical({"tau1": tau1, "tau2": tau2})
    num, den = transfer_function(**s)
    total = s["tau1"] + s["tau2"]
    m = step_metrics(lambda t: unit_step(t, **s), horizon=8.0 * total, resolution=total / 500.0)
    return {
        **s,
        **pole_pair_quantities(s["tau1"], s["tau2"]),
        "bandwidth_3db": half_power_frequency(num, den, scale=1.0 / total),
        "rise_time": m["rise_time"],
        "overshoot": m["overshoot"],
        "settling_time_2pct": m["settling_time_2pct"],
    }


def guess(t_rel: np.ndarray, y_norm: np.ndarray) -> list[dict[str, float]]:
    """Pole pairs from equal to 20:1, their sum near the 63 % crossing time."""
    return overdamped_starts(measure_response(t_rel, y_norm))


POLE_PAIR_UNITS = {"f0": "Hz", "Q": "", "zeta": "", "omega0": "rad/s"}
TIMING_UNITS = {"bandwidth_3db": "Hz", "rise_time": "s", "overshoot": "%", "settling_time_2pct": "s"}

TWO_REAL_POLE = Form(
    name="two-real-pole",
    summary="two real poles, overdamped: 1/((1 + s tau1)(1 + s tau2)), tau1 >= tau2",
    shape=(ParamSpec("tau1", "s", "time", "slower time constant"),
           ParamSpec("tau2", "s", "time", "faster time constant (the two may swap during a fit)")),
    unit_step=unit_step,
    transfer_function=transfer_function,
    guess=guess,
    derived=derived,
    derived_units={"tau1": "s", "tau2": "s", **POLE_PAIR_UNITS, **TIMING_UNITS},
    order=2,
    canonical=canonical,
)
