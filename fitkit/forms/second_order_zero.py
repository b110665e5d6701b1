"""Second order with a real zero of either sign: extra overshoot, or a first move the wrong way.

    H(s) = w0^2 (1 + s tau_z) / (s^2 + (w0/Q) s + w0^2)   left-half-plane zero at s = -1/tau_z
    H(s) = w0^2 (1 - s tau_z) / (s^2 + (w0/Q) s + w0^2)   right-half-plane zero at s = +1/tau_z

Parametrisation: tau_z > 0 in every form (so it is fitted in log space like every
shape parameter) and the sign of the zero belongs to the form, one form per
sign. The step response is the low-pass step plus or minus tau_z times its
derivative, the low-pass impulse response w0^2 exp(-alpha t) sinh(b t)/b
(the effect of a zero on a step response: Franklin, Powell & Emami-Naeini,
*Feedback Control of Dynamic Systems*, section on the effect of zeros;
from memory):

    y(t) = 1 - (even + alpha odd) +- tau_z w0^2 odd      (fitkit.forms.second_order.damped_parts)

A right-half-plane zero starts the response with slope -tau_z w0^2: it first
moves the wrong way (an undershoot), then settles at 1. A left-half-plane
zero adds +tau_z w0^2 to the initial slope and overshoots more than the poles
alone would. As tau_z -> 0 either form becomes the plain second order: tau_z is
then reported as not determined (the data show no zero).

Forms:

* "underdamped-zero"        f0, Q > 1/2, tau_z; left-half-plane zero (extra overshoot);
* "underdamped-undershoot"  f0, Q > 1/2, tau_z; right-half-plane zero;
* "two-real-pole-undershoot" tau_z, tau1 >= tau2; (1 - s tau_z)/((1 + s tau1)(1 + s tau2)),
  evaluated with the expm1 form of "pole-zero" (fitkit.forms.pole_zero) at
  -tau_z. The left-half-plane zero on real poles is "pole-zero" itself. These
  are fitted in (tau_z, tau1, tau2) like "pole-zero": the confidence-region
  machinery that fits "two-real-pole" in (tau0, Q) handles two fit
  coordinates only.

The undershoot forms are tried by the automatic choice when a response first moves the
wrong way (fitkit.fitting.selection.UNDERSHOOT_CANDIDATES); the left-half-plane zero only when named.
Derived: f0, Q, zeta, omega0 of the poles, tau_z and the zero's frequency
1/(2 pi tau_z), and from the form's own response the -3 dB bandwidth, rise time,
overshoot and 2 % settling time (fitkit.forms.metrics), plus the undershoot
(% of the final value) for a right-half-plane zero.
"""

from __future__ import annotations

import math

import numpy as np

from . import pole_zero
from .base import Form, ParamSpec, causal
from .metrics import half_power_frequency, step_metrics, undershoot
from .second_order import SECOND_ORDER_UNITS, damped_parts, response_window, ringing_starts
from .shape_measures import measure_response
from .two_real_pole import POLE_PAIR_UNITS, TIMING_UNITS, pole_pair_quantities

#: tau_z w0 spread of the starting guesses (the zero from a tenth to three times 1/w0).
ZERO_SPREAD = (0.3, 1.0, 3.0)


def zero_step(t_rel: np.ndarray, f0: float, Q: float, tau_z: float, sign: float) -> np.ndarray:
    """Step response of w0^2 (1 + sign s tau_z)/(s^2 + (w0/Q) s + w0^2); t_rel and tau_z in s, f0 in Hz."""
    after, t = causal(t_rel)
    w0 = 2.0 * math.pi * f0
    even, odd = damped_parts(t, w0, Q)
    return np.where(after, 1.0 - (even + (w0 / (2.0 * Q) - sign * tau_z * w0 * w0) * odd), 0.0)


def zero_tf(f0: float, Q: float, tau_z: float, sign: float) -> tuple[np.ndarray, np.ndarray]:
    """H(s) = w0^2 (sign tau_z s + 1) / (s^2 + (w0/Q) s + w0^2)."""
    w0 = 2.0 * math.pi * f0
    return np.array([sign * tau_z * w0 * w0, w0 * w0]), np.array([1.0, w0 / Q, w0 * w0])


def response_quantities(unit_step, num: np.ndarray, den: np.ndarray, horizon: float, resolution: float,
                        scale: float, sign: float) -> dict[str, float]:
    """bandwidth_3db (Hz), rise_time (s), overshoot (%), settling_time_2pct (s), and the
    undershoot (%) when sign < 0, from a form's own step response and transfer function."""
    m = step_metrics(unit_step, horizon=horizon, resolution=resolution)
    out = {"bandwidth_3db": half_power_frequency(num, den, scale=scale), "rise_time": m["rise_time"],
           "overshoot": m["overshoot"], "settling_time_2pct": m["settling_time_2pct"]}
    if sign < 0:
        out["undershoot"] = undershoot(unit_step, horizon=horizon, resolution=resolution)[0]
    return out


def _underdamped_derived(f0: float, Q: float, tau_z: float, sign: float) -> dict[str, float]:
    w0 = 2.0 * math.pi * f0
    zeta = 1.0 / (2.0 * Q)
    horizon, resolution = response_window(f0=f0, Q=Q)
    # the zero's own time scale may be the finer one
    resolution = min(resolution, tau_z / 20.0)
    num, den = zero_tf(f0, Q, tau_z, sign)
    out = {"f0": f0, "Q": Q, "zeta": zeta, "omega0": w0, "tau_z": tau_z, "zero_frequency": 1.0 / (2.0 * math.pi * tau_z),
           "damped_frequency": f0 * math.sqrt((1.0 - zeta) * (1.0 + zeta)) if zeta < 1.0 else math.nan}
    out.update(response_quantities(lambda t: zero_step(t, f0, Q, tau_z, sign), num, den, horizon, resolution,
                                   w0, sign))
    return out


def _underdamped_guess(t_rel: np.ndarray, y_norm: np.ndarray) -> list[dict[str, float]]:
    """The ringing's (f0, Q) starts (period and decrement, which a zero does not change; then
    overshoot and fixed spreads), each with tau_z w0 from ZERO_SPREAD; at most nine."""
    rings = [s for s in ringing_starts(measure_response(t_rel, y_norm)) if s["Q"] > 0.5][:3]
    return [{**s, "tau_z": k / (2.0 * math.pi * s["f0"])} for s in rings for k in ZERO_SPREAD]


def _left_step(t_rel, *, f0, Q, tau_z):
    """Step response with a left-half-plane zero at -1/tau_z; seconds, Hz."""
    return zero_step(t_rel, f0, Q, tau_z, 1.0)


def _right_step(t_rel, *, f0, Q, tau_z):
    """Step response with a right-half-plane zero at +1/tau_z; seconds, Hz."""
    return zero_step(t_rel, f0, Q, tau_z, -1.0)


def _left_tf(*, f0, Q, tau_z):
    """H(s) = w0^2 (1 + s tau_z)/(s^2 + (w0/Q) s + w0^2)."""
    return zero_tf(f0, Q, tau_z, 1.0)


def _right_tf(*, f0, Q, tau_z):
    """H(s) = w0^2 (1 - s tau_z)/(s^2 + (w0/Q) s + w0^2)."""
    return zero_tf(f0, Q, tau_z, -1.0)


def _left_derived(*, f0, Q, tau_z):
    return _underdamped_derived(f0, Q, tau_z, 1.0)


def _right_derived(*, f0, Q, tau_z):
    return _underdamped_derived(f0, Q, tau_z, -1.0)


# -- real poles with a right-half-plane zero -------------------------------------------

def _real_step(t_rel, *, tau_z, tau1, tau2):
    """Step response of (1 - s tau_z)/((1 + s tau1)(1 + s tau2)); seconds; exact at tau1 = tau2."""
    return pole_zero.unit_step(t_rel, tau_z=-tau_z, tau1=tau1, tau2=tau2)


def _real_tf(*, tau_z, tau1, tau2):
    """H(s) = (1 - s tau_z) / (tau1 tau2 s^2 + (tau1 + tau2) s + 1)."""
    return pole_zero.transfer_function(tau_z=-tau_z, tau1=tau1, tau2=tau2)


def _real_derived(*, tau_z, tau1, tau2):
    """tau_z, tau1 >= tau2 (s), f0 (Hz), Q, zeta, omega0 (rad/s), zero_frequency (Hz), and the
    numerical bandwidth, rise time, overshoot, settling time and undershoot."""
    s = pole_zero.canonical({"tau_z": tau_z, "tau1": tau1, "tau2": tau2})
    total = s["tau1"] + s["tau2"] + s["tau_z"]
    num, den = _real_tf(**s)
    out = {**s, **pole_pair_quantities(s["tau1"], s["tau2"]), "zero_frequency": 1.0 / (2.0 * math.pi * tau_z)}
    resolution = min(s["tau2"], s["tau_z"]) / 50.0
    out.update(response_quantities(lambda t: _real_step(t, **s), num, den, 8.0 * total, resolution,
                                   1.0 / total, -1.0))
    return out


def _real_guess(t_rel: np.ndarray, y_norm: np.ndarray) -> list[dict[str, float]]:
    """Six (tau_z, tau1, tau2) spread so that tau_z + tau1 + tau2 is about the 63 % time
    (a right-half-plane zero delays the rise much like a third time constant)."""
    scale = measure_response(t_rel, y_norm).time_scale
    starts = []
    for z, r in ((0.3, 0.3), (0.1, 0.3), (1.0, 0.3), (0.3, 0.05), (1.0, 1.0), (0.1, 1.0)):
        tau1 = scale / (1.0 + r + z)
        starts.append({"tau_z": z * tau1, "tau1": tau1, "tau2": r * tau1})
    return starts


_ZERO_SPEC = ParamSpec("tau_z", "s", "time", "time constant of the zero, 1/(2 pi zero_frequency)")
_F0_SPEC = ParamSpec("f0", "Hz", "frequency", "natural frequency of the poles")
_Q_SPEC = ParamSpec("Q", "", "ratio", "quality factor of the poles, 1/(2 zeta)", lower=0.5)
_ZERO_UNITS = {"tau_z": "s", "zero_frequency": "Hz"}

UNDERDAMPED_ZERO = Form(
    name="underdamped-zero",
    summary="ringing second order with a left-half-plane zero: w0^2 (1 + s tau_z)/(s^2 + w0/Q s + w0^2), "
            "extra overshoot",
    shape=(_F0_SPEC, _Q_SPEC, _ZERO_SPEC),
    unit_step=_left_step,
    transfer_function=_left_tf,
    guess=_underdamped_guess,
    derived=_left_derived,
    derived_units={**SECOND_ORDER_UNITS, **_ZERO_UNITS, "damped_frequency": "Hz"},
    order=2,
    auto_candidate=False,
)

UNDERDAMPED_UNDERSHOOT = Form(
    name="underdamped-undershoot",
    summary="ringing second order with a right-half-plane zero: w0^2 (1 - s tau_z)/(s^2 + w0/Q s + w0^2), "
            "first moves the wrong way",
    shape=(_F0_SPEC, _Q_SPEC, _ZERO_SPEC),
    unit_step=_right_step,
    transfer_function=_right_tf,
    guess=_underdamped_guess,
    derived=_right_derived,
    derived_units={**SECOND_ORDER_UNITS, **_ZERO_UNITS, "damped_frequency": "Hz", "undershoot": "%"},
    order=2,
    auto_candidate=True,
)

TWO_REAL_POLE_UNDERSHOOT = Form(
    name="two-real-pole-undershoot",
    summary="two real poles with a right-half-plane zero: (1 - s tau_z)/((1 + s tau1)(1 + s tau2)), "
            "first moves the wrong way",
    shape=(_ZERO_SPEC,
           ParamSpec("tau1", "s", "time", "slower pole time constant"),
           ParamSpec("tau2", "s", "time", "faster pole time constant (the two may swap during a fit)")),
    unit_step=_real_step,
    transfer_function=_real_tf,
    guess=_real_guess,
    derived=_real_derived,
    derived_units={"tau_z": "s", "tau1": "s", "tau2": "s", **POLE_PAIR_UNITS, "zero_frequency": "Hz",
                   **TIMING_UNITS, "undershoot": "%"},
    order=2,
    auto_candidate=True,
    canonical=pole_zero.canonical,
)
