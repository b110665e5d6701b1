"""Critically damped second order: a double real pole (Q = 1/2, zeta = 1).

    H(s) = 1 / (1 + s tau)^2,   unit_step(t) = 1 - exp(-t/tau) (1 + t/tau).

The fastest second-order step response without overshoot; two equal RC stages
with a buffer between them. Derived: tau, f0 = 1/(2 pi tau), Q = 1/2,
zeta = 1, omega0, and the numerical bandwidth (analytically
sqrt(sqrt(2) - 1)/(2 pi tau)), rise time, overshoot (0) and 2 % settling time.
"""

from __future__ import annotations

import numpy as np

from .base import Form, ParamSpec, causal
from .metrics import half_power_frequency, step_metrics
from .shape_measures import measure_response
from .two_real_pole import POLE_PAIR_UNITS, TIMING_UNITS, pole_pair_quantities

#: t63 / tau of 1 - exp(-x)(1 + x): the root of exp(-x)(1 + x) = exp(-1), x = 2.1462 (computed).
T63_OVER_TAU = 2.1462


def unit_step(t_rel: np.ndarray, *, tau: float) -> np.ndarray:
    """1 - exp(-t/tau)(1 + t/tau) after the edge, 0 before; seconds."""
    after, t = causal(t_rel)
    x = t / tau
    return np.where(after, 1.0 - np.exp(-x) * (1.0 + x), 0.0)


def step_derivatives(t_rel: np.ndarray, *, tau: float) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """(unit_step, d/dt, d2/dt2) of :func:`unit_step` in 1, 1/s, 1/s^2, 0 before the edge:
    (t / tau^2) exp(-t/tau) and (1 - t/tau) exp(-t/tau) / tau^2 after it."""
    after, t = causal(t_rel)
    x = t / tau
    decay = np.exp(-x)
    return (np.where(after, 1.0 - decay * (1.0 + x), 0.0), np.where(after, x * decay / tau, 0.0),
            np.where(after, (1.0 - x) * decay / (tau * tau), 0.0))


def transfer_function(*, tau: float) -> tuple[np.ndarray, np.ndarray]:
    """H(s) = 1 / (tau^2 s^2 + 2 tau s + 1)."""
    return np.array([1.0]), np.array([tau * tau, 2.0 * tau, 1.0])


def derived(*, tau: float) -> dict[str, float]:
    """tau (s), f0 (Hz), Q, zeta, omega0 (rad/s), bandwidth_3db (Hz), rise_time (s),
    overshoot (%), settling_time_2pct (s)."""
    num, den = transfer_function(tau=tau)
    m = step_metrics(lambda t: unit_step(t, tau=tau), horizon=12.0 * tau, resolution=tau / 250.0)
    return {
        "tau": tau,
        **pole_pair_quantities(tau, tau),
        "bandwidth_3db": half_power_frequency(num, den, scale=1.0 / tau),
        "rise_time": m["rise_time"],
        "overshoot": m["overshoot"],
        "settling_time_2pct": m["settling_time_2pct"],
    }


def guess(t_rel: np.ndarray, y_norm: np.ndarray) -> list[dict[str, float]]:
    """Taus spread around t63 / 2.146."""
    tau = measure_response(t_rel, y_norm).time_scale / T63_OVER_TAU
    return [{"tau": tau * f} for f in (0.5, 0.8, 1.0, 1.25, 2.0)]


CRITICALLY_DAMPED = Form(
    name="critically-damped",
    summary="double real pole, Q = 1/2: 1 - exp(-t/tau)(1 + t/tau)",
    shape=(ParamSpec("tau", "s", "time", "time constant of the double pole"),),
    unit_step=unit_step,
    step_derivatives=step_derivatives,
    transfer_function=transfer_function,
    guess=guess,
    derived=derived,
    derived_units={"tau": "s", **POLE_PAIR_UNITS, **TIMING_UNITS},
    order=2,
    auto_candidate=False,  # fitted when named, and by auto only as the fallback (fitting.selection)
)
