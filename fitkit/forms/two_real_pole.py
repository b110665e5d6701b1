"""Two real poles: an overdamped second order (two RC stages, a slow amplifier with a pole pair).

    H(s) = 1 / ((1 + s tau1)(1 + s tau2)),   tau1 >= tau2 > 0.

Fit coordinates. The response is symmetric in tau1 and tau2, so in those
coordinates the Jacobian is singular at tau1 = tau2 (d/d(tau1 - tau2) = 0
there) and the map back from the pole pair, tau1,2 = tau0 (1 +- sqrt(1 - 4 Q^2)) / (2 Q),
has a square-root singularity at Q = 1/2. The form is therefore fitted in
coordinates that are regular at the double pole:

    tau0 = sqrt(tau1 tau2)            (s; = 1 / (2 pi f0))
    Q    = tau0 / (tau1 + tau2)       (<= 1/2; zeta = 1/(2Q))

The denominator tau0^2 s^2 + (tau0/Q) s + 1 is smooth in (tau0, Q), and so is
the step response: it is the second-order response of
:mod:`fitkit.forms.second_order`, which is stable and continuous through
critical damping. The fit may land slightly beyond Q = 1/2 (into mild
ringing); the engine's estimates then report the nearest point of the form's
range, Q = 1/2 (see fitkit.fitting.region_estimates.bounded_region), so ``shape``
declares Q <= 1/2.

Results are reported in the trade's names: ``reported_shape`` (tau1 >= tau2)
replaces the fit coordinates among a fit's parameters, and
``region_quantities`` gives tau1, tau2, tau0, f0, Q, zeta and omega0 in
closed form, cheap enough to evaluate over the confidence region of
(tau0, Q), whose range gives their intervals.

For convenience every function here also accepts the pair as the trade's
time constants, ``tau1=..., tau2=...`` (in either order), in place of
``tau0=..., Q=...``; that is the exact closed form
    y(t) = 1 - exp(-t/tau1) [1 + (t/tau1) (1 - exp(-d t)) / (d t)],  d = 1/tau2 - 1/tau1 >= 0,
with (1 - exp(-x))/x from expm1 (no division by tau1 - tau2).
Derived: tau1, tau2, tau0, f0, Q, zeta, omega0, and the numerical bandwidth,
rise time, overshoot (0) and 2 % settling time.
"""

from __future__ import annotations

import math
from typing import Mapping

import numpy as np

from .base import Form, ParamSpec, causal
from .metrics import half_power_frequency, step_metrics
from .second_order import overdamped_starts
from .second_order import step_derivatives as second_order_derivatives
from .second_order import unit_step as second_order_step
from .shape_measures import measure_response
from .stable_math import relative_decay

#: Q of two equal real poles (critical damping): the top of this form's range.
Q_EQUAL_POLES = 0.5
#: 1 - 4 Q^2 above -ROUNDING is taken as 0 (equal poles) in :func:`time_constants`.
ROUNDING = 1e-12


def fit_coordinates(tau1: float, tau2: float) -> dict[str, float]:
    """{"tau0": sqrt(tau1 tau2) (s), "Q": sqrt(tau1 tau2)/(tau1 + tau2)} of a real pole pair."""
    root = math.sqrt(tau1 * tau2)
    return {"tau0": root, "Q": root / (tau1 + tau2)}


def time_constants(tau0, Q):
    """(tau1, tau2), tau1 >= tau2, in seconds, from tau0 (s) and Q <= 1/2; vectorised.

    tau1 = tau0 (1 + sqrt(1 - 4Q^2)) / (2Q) and tau2 = tau0^2 / tau1 =
    tau0 2Q / (1 + sqrt(1 - 4Q^2)) (no cancellation for small Q; both exactly
    tau0 at Q = 1/2); Q above 1/2 (complex poles) gives nan.
    """
    tau0 = np.asarray(tau0, dtype=float)
    q = np.asarray(Q, dtype=float)
    with np.errstate(invalid="ignore", divide="ignore"):
        disc = (1.0 - 2.0 * q) * (1.0 + 2.0 * q)
        # a rounding error's worth beyond Q = 1/2 (exp of log 1/2) still counts as the double pole
        root = np.sqrt(np.where(disc >= 0.0, disc, np.where(disc > -ROUNDING, 0.0, np.nan)))
        tau1 = tau0 * (1.0 + root) / (2.0 * q)
        tau2 = tau0 * (2.0 * q) / (1.0 + root)
    if tau1.ndim == 0:
        return float(tau1), float(tau2)
    return tau1, tau2


def pair_coordinates(shape: Mapping[str, float]) -> tuple[float, float]:
    """(tau0, Q) from either coordinate set."""
    if "tau0" in shape:
        return float(shape["tau0"]), float(shape["Q"])
    c = fit_coordinates(float(shape["tau1"]), float(shape["tau2"]))
    return c["tau0"], c["Q"]


def _taus_step(t_rel: np.ndarray, tau1: float, tau2: float) -> np.ndarray:
    """Step response from the time constants, exact at tau1 = tau2 (expm1 form)."""
    slow, fast = max(tau1, tau2), min(tau1, tau2)
    after, t = causal(t_rel)
    d = (slow - fast) / (slow * fast)
    x = t / slow
    return np.where(after, 1.0 - np.exp(-x) * (1.0 + x * relative_decay(d * t)), 0.0)


def unit_step(t_rel: np.ndarray, **shape: float) -> np.ndarray:
    """Step response of 1/(tau0^2 s^2 + (tau0/Q) s + 1) (or of 1/((1 + s tau1)(1 + s tau2)));
    t_rel in seconds, 0 before the edge. Smooth in (tau0, Q) through Q = 1/2."""
    if "tau0" not in shape:
        return _taus_step(t_rel, float(shape["tau1"]), float(shape["tau2"]))
    tau0, q = pair_coordinates(shape)
    return second_order_step(t_rel, f0=1.0 / (2.0 * math.pi * tau0), Q=q)


def step_derivatives(t_rel: np.ndarray, **shape: float) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """(unit_step, d/dt, d2/dt2) in 1, 1/s, 1/s^2: the second-order closed forms at
    f0 = 1/(2 pi tau0) (:func:`.second_order.step_derivatives`, stable through Q = 1/2)."""
    tau0, q = pair_coordinates(shape)
    return second_order_derivatives(t_rel, f0=1.0 / (2.0 * math.pi * tau0), Q=q)


def transfer_function(**shape: float) -> tuple[np.ndarray, np.ndarray]:
    """H(s) = 1 / (tau0^2 s^2 + (tau0/Q) s + 1) = 1 / (tau1 tau2 s^2 + (tau1 + tau2) s + 1)."""
    if "tau0" not in shape:
        tau1, tau2 = float(shape["tau1"]), float(shape["tau2"])
        return np.array([1.0]), np.array([tau1 * tau2, tau1 + tau2, 1.0])
    tau0, q = pair_coordinates(shape)
    return np.array([1.0]), np.array([tau0 * tau0, tau0 / q, 1.0])


def canonical(shape: Mapping[str, float]) -> dict[str, float]:
    """The shape with tau1 >= tau2 when given as time constants; (tau0, Q) is already canonical."""
    if "tau0" in shape:
        return dict(shape)
    a, b = shape["tau1"], shape["tau2"]
    return {"tau1": max(a, b), "tau2": min(a, b)}


def pole_pair_quantities(tau1: float, tau2: float) -> dict[str, float]:
    """f0 (Hz), Q, zeta and omega0 (rad/s) of the pole pair 1/((1 + s tau1)(1 + s tau2))."""
    root = math.sqrt(tau1 * tau2)
    q = root / (tau1 + tau2)
    return {"f0": 1.0 / (2.0 * math.pi * root), "Q": q, "zeta": 1.0 / (2.0 * q), "omega0": 1.0 / root}


def region_quantities(*, tau0, Q) -> dict[str, np.ndarray]:
    """tau1, tau2, tau0 (s), f0 (Hz), Q, zeta, omega0 (rad/s) in closed form; vectorised
    over arrays of tau0 (s) and Q <= 1/2 (nan beyond)."""
    tau0 = np.asarray(tau0, dtype=float)
    q = np.asarray(Q, dtype=float)
    tau1, tau2 = time_constants(tau0, q)
    return {"tau1": tau1, "tau2": tau2, "tau0": tau0, "f0": 1.0 / (2.0 * math.pi * tau0), "Q": q,
            "zeta": 1.0 / (2.0 * q), "omega0": 1.0 / tau0}


def derived(**shape: float) -> dict[str, float]:
    """tau1 >= tau2 (s), tau0 (s), f0 (Hz), Q, zeta, omega0 (rad/s), bandwidth_3db (Hz),
    rise_time (s), overshoot (%), settling_time_2pct (s); from (tau0, Q) or (tau1, tau2).

    Just beyond Q = 1/2 (where a fit may land) the pair has no real time
    constants (nan) but the other quantities continue smoothly, so their
    derivatives at the double pole are two-sided.
    """
    tau0, q = pair_coordinates(shape)
    if "tau0" in shape:
        tau1, tau2 = time_constants(tau0, q)
    else:
        tau1, tau2 = (canonical(shape)[k] for k in ("tau1", "tau2"))
    num, den = transfer_function(tau0=tau0, Q=q)
    total = tau0 / min(q, Q_EQUAL_POLES)
    m = step_metrics(lambda t: unit_step(t, tau0=tau0, Q=q), horizon=8.0 * total, resolution=total / 500.0)
    return {
        "tau1": tau1,
        "tau2": tau2,
        "tau0": tau0,
        "f0": 1.0 / (2.0 * math.pi * tau0),
        "Q": q,
        "zeta": 1.0 / (2.0 * q),
        "omega0": 1.0 / tau0,
        "bandwidth_3db": half_power_frequency(num, den, scale=1.0 / total),
        "rise_time": m["rise_time"],
        "overshoot": m["overshoot"],
        "settling_time_2pct": m["settling_time_2pct"],
    }


def guess(t_rel: np.ndarray, y_norm: np.ndarray) -> list[dict[str, float]]:
    """Pole pairs from equal to 20:1, their sum near the 63 % crossing time, as (tau0, Q)."""
    return [fit_coordinates(s["tau1"], s["tau2"]) for s in overdamped_starts(measure_response(t_rel, y_norm))]


POLE_PAIR_UNITS = {"f0": "Hz", "Q": "", "zeta": "", "omega0": "rad/s"}
TIMING_UNITS = {"bandwidth_3db": "Hz", "rise_time": "s", "overshoot": "%", "settling_time_2pct": "s"}

TWO_REAL_POLE = Form(
    name="two-real-pole",
    summary="two real poles, overdamped: 1/((1 + s tau1)(1 + s tau2)), tau1 >= tau2",
    shape=(ParamSpec("tau0", "s", "time", "geometric mean of the two time constants, 1/(2 pi f0)"),
           ParamSpec("Q", "", "ratio", "quality factor of the pole pair, 1/2 when the poles are equal",
                     upper=Q_EQUAL_POLES)),
    unit_step=unit_step,
    step_derivatives=step_derivatives,
    transfer_function=transfer_function,
    guess=guess,
    derived=derived,
    derived_units={"tau1": "s", "tau2": "s", "tau0": "s", **POLE_PAIR_UNITS, **TIMING_UNITS},
    order=2,
    canonical=canonical,
    reported_shape=(ParamSpec("tau1", "s", "time", "slower time constant"),
                    ParamSpec("tau2", "s", "time", "faster time constant")),
    region_quantities=region_quantities,
    fit_coordinates=fit_coordinates,
)
