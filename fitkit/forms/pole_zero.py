"""One real zero with two real poles: lead / lag networks, compensated dividers, op-amp stages.

    H(s) = (1 + s tau_z) / ((1 + s tau1)(1 + s tau2)),   tau1 >= tau2 > 0,  tau_z > 0.

tau_z may lie below the poles (lag-like response, slower tail) or above them
(lead: a fast rise that overshoots and then relaxes back). The step response is
the two-pole response plus tau_z times its derivative; with
d = 1/tau2 - 1/tau1 >= 0 and (1 - exp(-x))/x from expm1 it reads

    y(t) = 1 - exp(-t/tau1) [1 + (t/tau1) (1 - tau_z/tau2) (1 - exp(-d t))/(d t)],

exact for equal poles too (no division by tau1 - tau2).
Like "two-real-pole", the form is symmetric in tau1 and tau2 and reports them
sorted. Derived: tau_z, tau1, tau2, f0, Q, zeta, omega0 of the pole pair, and the
numerical bandwidth, rise time, overshoot and 2 % settling time.
"""

from __future__ import annotations

import numpy as np

from .base import Form, ParamSpec, causal
from .metrics import half_power_frequency, step_metrics
from .shape_measures import ResponseShape, crossing_time, measure_response
from .stable_math import relative_decay
from .two_real_pole import POLE_PAIR_UNITS, TIMING_UNITS, pole_pair_quantities


def unit_step(t_rel: np.ndarray, *, tau_z: float, tau1: float, tau2: float) -> np.ndarray:
    """Step response of (1 + s tau_z)/((1 + s tau1)(1 + s tau2)); seconds; 0 before the edge."""
    slow, fast = max(tau1, tau2), min(tau1, tau2)
    after, t = causal(t_rel)
    d = (slow - fast) / (slow * fast)
    x = t / slow
    return np.where(after, 1.0 - np.exp(-x) * (1.0 + x * (1.0 - tau_z / fast) * relative_decay(d * t)), 0.0)


def transfer_function(*, tau_z: float, tau1: float, tau2: float) -> tuple[np.ndarray, np.ndarray]:
    """H(s) = (tau_z s + 1) / (tau1 tau2 s^2 + (tau1 + tau2) s + 1)."""
    return np.array([tau_z, 1.0]), np.array([tau1 * tau2, tau1 + tau2, 1.0])


def canonical(shape) -> dict[str, float]:
    """The shape with tau1 >= tau2."""
    a, b = shape["tau1"], shape["tau2"]
    return {"tau_z": shape["tau_z"], "tau1": max(a, b), "tau2": min(a, b)}


def derived(*, tau_z: float, tau1: float, tau2: float) -> dict[str, float]:
    """tau_z, tau1 >= tau2 (s), f0 (Hz), Q, zeta, omega0 (rad/s) of the poles, bandwidth_3db (Hz),
    rise_time (s), overshoot (%), settling_time_2pct (s)."""
    s = canonical({"tau_z": tau_z, "tau1": tau1, "tau2": tau2})
    num, den = transfer_function(**s)
    total = s["tau1"] + s["tau2"]
    m = step_metrics(lambda t: unit_step(t, **s), horizon=8.0 * total,
                     resolution=total / 500.0)
    return {
        **s,
        **pole_pair_quantities(s["tau1"], s["tau2"]),
        "bandwidth_3db": half_power_frequency(num, den, scale=1.0 / total),
        "rise_time": m["rise_time"],
        "overshoot": m["overshoot"],
        "settling_time_2pct": m["settling_time_2pct"],
    }


def _relaxation_time(t_rel: np.ndarray, y_norm: np.ndarray, shape: ResponseShape) -> float:
    """Seconds after the peak for the overshoot to fall to 1/e of itself (nan if not seen)."""
    t_rel, y_norm = np.asarray(t_rel, dtype=float), np.asarray(y_norm, dtype=float)
    later = t_rel > shape.peak_time
    fall = crossing_time(t_rel[later], y_norm[later] - 1.0, shape.overshoot * np.exp(-1.0), rising=False)
    return fall - shape.peak_time


def guess(t_rel: np.ndarray, y_norm: np.ndarray) -> list[dict[str, float]]:
    """Lag-like starts around the 63 % time; lead-like starts (tau_z above the poles) from the
    overshoot and its relaxation time when the response overshoots."""
    shape = measure_response(t_rel, y_norm)
    scale = shape.time_scale
    starts = [{"tau_z": scale * z, "tau1": scale * p1, "tau2": scale * p2}
              for z, p1, p2 in ((0.3, 1.0, 0.3), (0.1, 1.0, 0.1), (0.5, 1.0, 0.5), (2.0, 1.0, 0.3))]
    if shape.overshoot > 0:
        relax = _relaxation_time(t_rel, y_norm, shape)
        if np.isfinite(relax) and relax > 0:
            # after the fast pole, y ~ 1 + (tau_z/tau1 - 1) exp(-t/tau1): tau_z ~ tau1 (1 + overshoot)
            for fast in (0.5 * shape.peak_time, 0.2 * shape.peak_time):
                starts.insert(0, {"tau_z": relax * (1.0 + shape.overshoot), "tau1": relax,
                                  "tau2": min(fast, 0.5 * relax)})
    return starts


POLE_ZERO = Form(
    name="pole-zero",
    summary="one real zero and two real poles (lead or lag): (1 + s tau_z)/((1 + s tau1)(1 + s tau2))",
    shape=(ParamSpec("tau_z", "s", "time", "time constant of the zero"),
           ParamSpec("tau1", "s", "time", "slower pole time constant"),
           ParamSpec("tau2", "s", "time", "faster pole time constant (the two may swap during a fit)")),
    unit_step=unit_step,
    transfer_function=transfer_function,
    guess=guess,
    derived=derived,
    derived_units={"tau_z": "s", "tau1": "s", "tau2": "s", **POLE_PAIR_UNITS, **TIMING_UNITS},
    order=2,
    auto_candidate=False,
    canonical=canonical,
)
