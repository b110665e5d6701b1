"""General second order: two poles, natural frequency f0 and Q free across every damping.

    H(s) = w0^2 / (s^2 + (w0/Q) s + w0^2),   w0 = 2 pi f0,   zeta = 1/(2Q).

With alpha = w0/(2Q) (the decay rate) and a = alpha^2 - w0^2, the unit-step
response of any second-order low-pass is (standard result, e.g. Ogata,
*Modern Control Engineering*, transient-response chapter, from memory)

    y(t) = 1 - exp(-alpha t) [cosh(sqrt(a) t) + alpha sinh(sqrt(a) t) / sqrt(a)],

read as cos / sin(x)/x when a < 0 (underdamped), and as 1 + alpha t at a = 0.
Evaluated as written it overflows for Q << 1/2 (cosh of a large argument) and
loses precision near Q = 1/2. Here:

* a >= 0 (Q <= 1/2): with beta = sqrt(a), the slow rate alpha - beta is
  computed as w0^2 / (alpha + beta) (no cancellation when Q << 1/2), and
  exp(-alpha t) sinh(beta t)/beta = t exp(-(alpha - beta) t) (1 - exp(-2 beta t))/(2 beta t)
  with the last factor from expm1 (exact at beta = 0);
* a < 0 (Q > 1/2): cos(wd t) and sin(wd t) / wd, wd > 0 (wd = 0 is the
  branch above; as wd -> 0, sin(wd t) / wd -> t with no cancellation).

Both branches are accurate to a few ulps right up to a = 0, so the response
is continuous across critical damping to ~1e-15 (the tests check it at
1e-9 relative and closer). a itself is formed as
w0^2 (1 - 2Q)(1 + 2Q) / (4 Q^2), which keeps its sign and relative precision
near Q = 1/2.
"""

from __future__ import annotations

import functools
import math

import numpy as np

from .base import Form, ParamSpec, causal
from .metrics import half_power_frequency, step_metrics
from .shape_measures import ResponseShape, measure_response
from .stable_math import relative_decay


def damped_parts(t: np.ndarray, w0: float, Q: float) -> tuple[np.ndarray, np.ndarray]:
    """(even, odd) = (exp(-alpha t) cosh(b t), exp(-alpha t) sinh(b t) / b) for t >= 0 in seconds,
    w0 in rad/s, alpha = w0/(2Q), b = sqrt(alpha^2 - w0^2) (cos and sin(wd t)/wd when Q > 1/2).

    The two building blocks of every response with the denominator
    s^2 + (w0/Q) s + w0^2: the low-pass step is 1 - (even + alpha odd), the
    impulse response of w0^2/(...) is w0^2 odd. Evaluated stably as the module
    docstring says (expm1; continuous through Q = 1/2).
    """
    alpha = w0 / (2.0 * Q)
    a = w0 * w0 * (1.0 - 2.0 * Q) * (1.0 + 2.0 * Q) / (4.0 * Q * Q)
    if a >= 0.0:
        beta = math.sqrt(a)
        slow = w0 * w0 / (alpha + beta)
        e_slow = np.exp(-slow * t)
        even = 0.5 * (e_slow + np.exp(-(alpha + beta) * t))
        return even, t * e_slow * relative_decay(2.0 * beta * t)
    wd = math.sqrt(-a)
    u = wd * t
    envelope = np.exp(-alpha * t)
    return envelope * np.cos(u), envelope * (np.sin(u) / wd)


def unit_step(t_rel: np.ndarray, *, f0: float, Q: float) -> np.ndarray:
    """Unit-step response of w0^2/(s^2 + w0/Q s + w0^2); t_rel in s, f0 in Hz; 0 before the edge."""
    after, t = causal(t_rel)
    w0 = 2.0 * math.pi * f0
    even, odd = damped_parts(t, w0, Q)
    return np.where(after, 1.0 - (even + (w0 / (2.0 * Q)) * odd), 0.0)


def step_derivatives(t_rel: np.ndarray, *, f0: float, Q: float) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """(unit_step, d/dt, d2/dt2) of :func:`unit_step` (1, 1/s, 1/s^2), 0 before the edge:
    y' = w0^2 odd (the impulse response) and y'' = w0^2 (even - alpha odd), since
    d(odd)/dt = even - alpha odd in both damping branches of :func:`damped_parts`."""
    after, t = causal(t_rel)
    w0 = 2.0 * math.pi * f0
    alpha = w0 / (2.0 * Q)
    even, odd = damped_parts(t, w0, Q)
    w2 = w0 * w0
    return (np.where(after, 1.0 - (even + alpha * odd), 0.0), np.where(after, w2 * odd, 0.0),
            np.where(after, w2 * (even - alpha * odd), 0.0))


def transfer_function(*, f0: float, Q: float) -> tuple[np.ndarray, np.ndarray]:
    """H(s) = w0^2 / (s^2 + (w0/Q) s + w0^2)."""
    w0 = 2.0 * math.pi * f0
    return np.array([w0 * w0]), np.array([1.0, w0 / Q, w0 * w0])


def percent_overshoot(Q: float) -> float:
    """100 exp(-pi zeta / sqrt(1 - zeta^2)) for zeta = 1/(2Q) < 1, else 0.

    The textbook percent overshoot (Ogata, transient-response chapter).
    """
    zeta = 1.0 / (2.0 * Q)
    if zeta >= 1.0:
        return 0.0
    return 100.0 * math.exp(-math.pi * zeta / math.sqrt((1.0 - zeta) * (1.0 + zeta)))


def response_window(*, f0: float, Q: float) -> tuple[float, float]:
    """(horizon, resolution) in seconds for the numerical metrics of a response with this
    denominator: 8 slowest decay times, and a grid fine against the time scale and the ringing."""
    w0 = 2.0 * math.pi * f0
    alpha = w0 / (2.0 * Q)
    if Q > 0.5:
        decay = alpha
        period = 2.0 * math.pi / (w0 * math.sqrt(1.0 - 1.0 / (4.0 * Q * Q)))
    else:
        decay = w0 * w0 / (alpha + math.sqrt(max(alpha * alpha - w0 * w0, 0.0)))
        period = math.inf
    horizon = 8.0 / decay
    return horizon, min(horizon / 4000.0, period / 40.0)


def timing_metrics(*, f0: float, Q: float) -> dict[str, float]:
    """Numerical rise time, 2 % settling time, overshoot and peak time of the step response."""
    horizon, resolution = response_window(f0=f0, Q=Q)
    return step_metrics(lambda t: unit_step(t, f0=f0, Q=Q), horizon=horizon, resolution=resolution)


def second_order_quantities(*, f0: float, Q: float) -> dict[str, float]:
    """f0 (Hz), Q, zeta, omega0 (rad/s), bandwidth_3db (Hz), rise_time (s),
    overshoot (%, closed form), settling_time_2pct (s)."""
    num, den = transfer_function(f0=f0, Q=Q)
    m = timing_metrics(f0=f0, Q=Q)
    w0 = 2.0 * math.pi * f0
    return {
        "f0": f0,
        "Q": Q,
        "zeta": 1.0 / (2.0 * Q),
        "omega0": w0,
        "bandwidth_3db": half_power_frequency(num, den, scale=w0),
        "rise_time": m["rise_time"],
        "overshoot": percent_overshoot(Q),
        "settling_time_2pct": m["settling_time_2pct"],
    }


SECOND_ORDER_UNITS = {"f0": "Hz", "Q": "", "zeta": "", "omega0": "rad/s", "bandwidth_3db": "Hz",
                      "rise_time": "s", "overshoot": "%", "settling_time_2pct": "s"}


def ringing_starts(shape: ResponseShape) -> list[dict[str, float]]:
    """Starting (f0, Q) with Q > 1/2 from overshoot, ringing period, peak time or rise time."""
    starts: list[dict[str, float]] = []
    if shape.overshoot > 0:
        log_os = math.log(min(shape.overshoot, 0.99))
        zeta = -log_os / math.sqrt(math.pi ** 2 + log_os ** 2)  # the overshoot formula inverted
        q = 1.0 / (2.0 * zeta)
        root = math.sqrt(1.0 - zeta * zeta)
        if math.isfinite(shape.ringing_period) and shape.ringing_period > 0:
            starts.append({"f0": 1.0 / (shape.ringing_period * root), "Q": q})
        if math.isfinite(shape.peak_time) and shape.peak_time > 0:
            # peak time pi / wd (Ogata, transient-response chapter)
            starts.append({"f0": 1.0 / (2.0 * shape.peak_time * root), "Q": q})
    if math.isfinite(shape.ringing_q) and math.isfinite(shape.ringing_period) and shape.ringing_q > 0.5:
        # log decrement and ringing period: wd = 2 pi / period, w0 = wd / sqrt(1 - zeta^2)
        zeta = 1.0 / (2.0 * shape.ringing_q)
        starts.insert(0, {"f0": 1.0 / (shape.ringing_period * math.sqrt(1.0 - zeta * zeta)),
                          "Q": shape.ringing_q})
    scale = shape.time_scale
    # without visible ringing: w0 ~ 1/t63 with a spread of Q (a t63 w0 of 1.0-1.5 spans Q 0.6-3)
    for q, t63_w0 in ((0.7, 1.5), (1.5, 1.1), (4.0, 0.9)):
        starts.append({"f0": t63_w0 / (2.0 * math.pi * scale), "Q": q})
    return starts


@functools.lru_cache(maxsize=1)
def _pole_pair_shape_table() -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """For tau2/tau1 = r: (r, (t90 - t10)/t63, t63/(tau1 + tau2)), from this module's own response.

    The 10-90 % time relative to the 63 % time falls from ln 9 = 2.20 (one
    pole) to 1.56 (two equal poles), which tells the ratio of the two time
    constants from data.
    """
    ratios = np.geomspace(0.005, 1.0, 40)
    spread, t63_per_sum = [], []
    t = np.linspace(0.0, 12.0, 24001)  # in units of tau1
    for r in ratios:
        y = unit_step(t, f0=1.0 / (2.0 * math.pi * math.sqrt(r)), Q=math.sqrt(r) / (1.0 + r))
        t10, t63, t90 = (float(np.interp(level, y, t)) for level in (0.1, 1.0 - math.exp(-1.0), 0.9))
        spread.append((t90 - t10) / t63)
        t63_per_sum.append(t63 / (1.0 + r))
    return ratios, np.array(spread), np.array(t63_per_sum)


def overdamped_starts(shape: ResponseShape) -> list[dict[str, float]]:
    """Starting (tau1, tau2), tau1 >= tau2: a spread of ratios whose sum is about the 63 % time,
    led by the ratio read off the measured (t90 - t10)/t63."""
    total = shape.time_scale
    starts = [{"tau1": total / (1.0 + r), "tau2": total * r / (1.0 + r)} for r in (1.0, 0.4, 0.15, 0.05)]
    if all(math.isfinite(v) and v > 0 for v in (shape.t10, shape.t63, shape.t90)):
        ratios, spread, t63_per_sum = _pole_pair_shape_table()
        measured = (shape.t90 - shape.t10) / shape.t63
        r = float(np.interp(measured, spread[::-1], ratios[::-1]))  # spread falls as r rises
        fitted_total = shape.t63 / float(np.interp(r, ratios, t63_per_sum))
        starts.insert(0, {"tau1": fitted_total / (1.0 + r), "tau2": fitted_total * r / (1.0 + r)})
    return starts


#: Fixed fallback starts at the end of ringing_starts (used when nothing is measured).
RINGING_FALLBACKS = 3


def guess(t_rel: np.ndarray, y_norm: np.ndarray) -> list[dict[str, float]]:
    """Starts across the damping range, at most ten: measured ringing estimates and the
    measured overdamped pole pair first, then fixed spreads of Q and of pole ratios."""
    shape = measure_response(t_rel, y_norm)
    ringing = ringing_starts(shape)
    pairs = []
    for pair in overdamped_starts(shape):
        t1, t2 = pair["tau1"], pair["tau2"]
        pairs.append({"f0": 1.0 / (2.0 * math.pi * math.sqrt(t1 * t2)), "Q": math.sqrt(t1 * t2) / (t1 + t2)})
    measured_pairs = pairs[:-4]  # overdamped_starts ends with four fixed ratios
    starts = (ringing[:-RINGING_FALLBACKS] + measured_pairs + ringing[-RINGING_FALLBACKS:] + pairs[-4:])
    return starts[:10]


SECOND_ORDER = Form(
    name="second-order",
    summary="two poles with f0 and Q free, from heavily overdamped to strongly ringing",
    shape=(ParamSpec("f0", "Hz", "frequency", "natural frequency"),
           ParamSpec("Q", "", "ratio", "quality factor, 1/(2 zeta)")),
    unit_step=unit_step,
    step_derivatives=step_derivatives,
    transfer_function=transfer_function,
    guess=guess,
    derived=second_order_quantities,
    derived_units=SECOND_ORDER_UNITS,
    order=2,
    auto_candidate=False,  # fitted when named; automatic selection uses its neighbours
)
