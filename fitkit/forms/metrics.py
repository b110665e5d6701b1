"""Trade metrics of a step response and of a transfer function, computed numerically.

Every form's derived quantities include the -3 dB bandwidth, the 10-90 % rise
time, the overshoot and the 2 % settling time. They are computed here from the
form's own ``unit_step`` and ``transfer_function`` rather than from
first-order shortcuts, so they hold for every form and the fitting engine can
propagate uncertainty into them by numerical differentiation. For that the
results must be smooth in the parameters: each metric is bracketed on a dense
grid, then refined to near machine precision (crossings by a vectorised
Illinois root finder, the peak by repeated zooming, the corner frequency by
Brent's method on log frequency).

Definitions (the conventions of control-engineering texts, e.g. Ogata,
*Modern Control Engineering*, transient-response chapter; Nise, *Control
Systems Engineering*, time-response chapter; chapters recalled from memory):

* rise time: first time the response reaches 90 % of its final value minus
  the first time it reaches 10 % (seconds);
* overshoot: (peak - final) / final in percent, 0 when the response never
  exceeds its final value;
* 2 % settling time: the last time the response is outside +-2 % of its
  final value (seconds). It jumps by half a ringing period when a peak of a
  ringing response passes through the band edge; that is inherent in the
  definition;
* -3 dB bandwidth: the highest frequency at which |H(j 2 pi f)| equals
  |H(0)| / sqrt(2) (hertz); for a high-pass, the lowest frequency at which it
  equals |H(inf)| / sqrt(2).
"""

from __future__ import annotations

import math
from typing import Callable

import numpy as np

UnitStep = Callable[[np.ndarray], np.ndarray]

RISE_LOW, RISE_HIGH = 0.1, 0.9
SETTLING_BAND = 0.02


def _time_grid(horizon: float, resolution: float) -> np.ndarray:
    """Linear grid to ``horizon`` with spacing <= ``resolution``, plus a log grid near 0."""
    n_linear = int(min(max(horizon / resolution, 2000.0), 200_000.0)) + 1
    linear = np.linspace(0.0, horizon, n_linear)
    early = np.geomspace(resolution * 1e-3, min(resolution * 50.0, horizon), 200)
    return np.unique(np.concatenate([linear, early]))


def _refine_crossings(unit_step: UnitStep, lo: np.ndarray, hi: np.ndarray,
                      levels: np.ndarray, signs: np.ndarray) -> np.ndarray:
    """Times where sign * (y - level) = 0, one per bracket [lo, hi] (vectorised Illinois).

    Each bracket must hold a sign change of g(t) = sign * (y(t) - level):
    g(lo) <= 0 < g(hi) is not required, any change of sign will do.
    """
    def g(t: np.ndarray) -> np.ndarray:
        return signs * (unit_step(t) - levels)

    a, b = lo.astype(float).copy(), hi.astype(float).copy()
    ga, gb = g(a), g(b)
    for _ in range(100):
        width = np.abs(b - a)
        # converged: bracket at machine width, or g at the rounding level of y (~1 ulp of 1)
        done = ((width <= 1e-15 * np.maximum(np.abs(a), np.abs(b)) + 1e-300)
                | (np.abs(gb) <= 2.5e-16) | (ga == 0))
        if np.all(done):
            break
        denom = gb - ga
        c = np.where(denom != 0, b - gb * (b - a) / np.where(denom != 0, denom, 1.0), 0.5 * (a + b))
        # keep c strictly inside the bracket; fall back to bisection otherwise
        inside = (c - np.minimum(a, b)) * (np.maximum(a, b) - c) > 0
        c = np.where(inside, c, 0.5 * (a + b))
        gc = g(c)
        flip = np.sign(gc) != np.sign(gb)
        new_a = np.where(flip, b, a)
        new_ga = np.where(flip, gb, 0.5 * ga)  # Illinois: halve the stale end's value
        a = np.where(done, a, new_a)
        ga = np.where(done, ga, new_ga)
        b = np.where(done, b, c)
        gb = np.where(done, gb, gc)
    return np.where(np.abs(ga) < np.abs(gb), a, b)


def _refine_peak(unit_step: UnitStep, lo: float, hi: float) -> tuple[float, float]:
    """(time, value) of the maximum of y in [lo, hi], by repeated 16-fold zooming."""
    for _ in range(12):
        t = np.linspace(lo, hi, 17)
        y = unit_step(t)
        k = int(np.argmax(y))
        lo, hi = t[max(k - 1, 0)], t[min(k + 1, 16)]
        if hi - lo <= 1e-9 * max(abs(t[k]), 1e-300):
            break
    t = np.linspace(lo, hi, 3)
    y = unit_step(t)
    k = int(np.argmax(y))
    return float(t[k]), float(y[k])


def step_metrics(unit_step: UnitStep, *, horizon: float, resolution: float,
                 final: float = 1.0) -> dict[str, float]:
    """Rise time, overshoot, peak time and 2 % settling time of a step response.

    unit_step: vectorised y(t) for t >= 0 in seconds, tending to ``final``.
    horizon: seconds by which the response has probably settled; extended
        (doubled, up to 10 times) when it has not.
    resolution: largest grid spacing in seconds (a fraction of the fastest
        time constant or of the ringing period).
    Returns {"rise_time": s, "overshoot": %, "peak_time": s (nan when no
    overshoot), "settling_time_2pct": s}; nan for a metric that cannot be
    found (for example a response that never reaches 90 %).
    """
    for _ in range(10):
        t = _time_grid(horizon, resolution)
        y = unit_step(t) / final
        tail = y[t >= 0.9 * horizon]
        if np.all(np.abs(tail - 1.0) <= SETTLING_BAND * 0.5):
            break
        horizon *= 2.0

    def scaled(tt: np.ndarray) -> np.ndarray:
        return unit_step(tt) / final

    lows, highs, levels, signs = [], [], [], []
    for level in (RISE_LOW, RISE_HIGH):
        above = np.nonzero(y >= level)[0]
        if above.size == 0 or above[0] == 0:
            lows.append(np.nan)
            highs.append(np.nan)
        else:
            lows.append(t[above[0] - 1])
            highs.append(t[above[0]])
        levels.append(level)
        signs.append(1.0)
    outside = np.nonzero(np.abs(y - 1.0) > SETTLING_BAND)[0]
    if outside.size and outside[-1] + 1 < t.size:
        k = outside[-1]
        side = 1.0 if y[k] > 1.0 else -1.0
        lows.append(t[k])
        highs.append(t[k + 1])
        levels.append(1.0 + side * SETTLING_BAND)
        signs.append(side)
    else:
        lows.append(np.nan)
        highs.append(np.nan)
        levels.append(1.0)
        signs.append(1.0)
    lo, hi = np.array(lows), np.array(highs)
    valid = np.isfinite(lo)
    times = np.full(3, np.nan)
    if np.any(valid):
        times[valid] = _refine_crossings(scaled, lo[valid], hi[valid],
                                         np.array(levels)[valid], np.array(signs)[valid])
    if outside.size == 0:
        times[2] = 0.0
    k_peak = int(np.argmax(y))
    overshoot, peak_time = 0.0, math.nan
    if y[k_peak] > 1.0 + 1e-12:  # above rounding noise of a monotone response
        peak_time, peak = _refine_peak(scaled, t[max(k_peak - 1, 0)], t[min(k_peak + 1, t.size - 1)])
        overshoot = 100.0 * (peak - 1.0)
    return {
        "rise_time": float(times[1] - times[0]),
        "overshoot": overshoot,
        "peak_time": peak_time,
        "settling_time_2pct": float(times[2]),
    }


def undershoot(unit_step: UnitStep, *, horizon: float, resolution: float,
               final: float = 1.0) -> tuple[float, float]:
    """(undershoot in % of the final value, its time in s) of a step response that first
    moves the wrong way (a right-half-plane zero): the depth of its minimum below 0 before
    it first rises above 0; (0, nan) when it never goes below 0."""
    t = _time_grid(horizon, resolution)
    y = unit_step(t) / final
    # the wrong-way excursion ends where the response first comes back above 0 after dipping
    rising = np.nonzero(y > 0.0)[0]
    below = np.nonzero(y < 0.0)[0]
    if below.size == 0:
        return 0.0, math.nan
    back = rising[rising > below[0]]
    end = int(back[0]) if back.size else t.size
    k = int(np.argmin(y[:end]))
    low_time, depth = _refine_peak(lambda tt: -unit_step(tt) / final, t[max(k - 1, 0)],
                                   t[min(k + 1, t.size - 1)])
    return 100.0 * depth, low_time


def _gain_squared(num: np.ndarray, den: np.ndarray, omega: np.ndarray) -> np.ndarray:
    s = 1j * np.asarray(omega, dtype=float)
    return np.abs(np.polyval(num, s)) ** 2 / np.abs(np.polyval(den, s)) ** 2


def half_power_frequency(num: np.ndarray, den: np.ndarray, *, scale: float,
                         high_pass: bool = False) -> float:
    """The -3 dB frequency in hertz of H(s) = num(s)/den(s), by root finding on |H|.

    Low-pass (default): the highest frequency where |H(j w)|^2 = |H(0)|^2 / 2.
    High-pass: the lowest frequency where |H(j w)|^2 = |H(inf)|^2 / 2.
    scale: a rough angular frequency of the corner (rad/s, e.g. 1/tau); the
        search spans 1e-5 to 1e5 times it, widened on the far side until it
        leaves the pass band. Returns nan when no crossing exists.
    """
    num = np.atleast_1d(np.asarray(num, dtype=float))
    den = np.atleast_1d(np.asarray(den, dtype=float))
    if high_pass:
        reference = (num[0] / den[0]) ** 2 if num.size == den.size else math.nan
    else:
        reference = (num[-1] / den[-1]) ** 2
    if not math.isfinite(reference) or reference == 0:
        return math.nan
    decade = math.log(10.0)
    lo, hi = math.log(scale) - 5 * decade, math.log(scale) + 5 * decade

    def excess(lw: float | np.ndarray) -> float | np.ndarray:
        return _gain_squared(num, den, np.exp(lw)) / reference - 0.5

    # widen the search until it ends outside the pass band (a strong lead zero moves the corner up)
    for _ in range(10):
        if high_pass and excess(lo) >= 0:
            lo -= 3 * decade
        elif not high_pass and excess(hi) >= 0:
            hi += 3 * decade
        else:
            break
    log_w = np.linspace(lo, hi, int(40 * (hi - lo) / decade) + 1)
    e = excess(log_w)
    passing = np.nonzero(e >= 0)[0]
    if passing.size == 0:
        return math.nan
    if high_pass:
        k = passing[0]
        if k == 0:
            return math.nan
        a, b = log_w[k - 1], log_w[k]
    else:
        k = passing[-1]
        if k == log_w.size - 1:
            return math.nan
        a, b = log_w[k], log_w[k + 1]
    from scipy.optimize import brentq  # imported when used: scipy.optimize costs start-up time

    root = brentq(excess, a, b, xtol=1e-14, rtol=1e-15, maxiter=200)
    return math.exp(root) / (2.0 * math.pi)
