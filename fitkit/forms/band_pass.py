"""Second-order band-pass: the voltage across the series resistor of an RLC driven by a step.

    H(s) = (w0/Q) s / (s^2 + (w0/Q) s + w0^2),   w0 = 2 pi f0.

Normalisation: |H(j w)| peaks at exactly 1 at w = w0 (the centre frequency;
there H(j w0) = 1), which is the series RLC with the output across R (R/L =
w0/Q): the resistor voltage never exceeds the drive. So ``step`` is the
drive's step times the mid-band gain, and the response rises from 0 (with
slope w0/Q at the edge) and returns to 0: ``final_value`` is 0, like
"first-order-decay", but unlike it the response does not jump at the edge
(``jumps_at_edge`` is False), so its edge time can be fitted as for a
low-pass form (the engine still holds it for every form that returns to 0).

The step response is w0/Q times the impulse response of 1/(s^2 + (w0/Q) s + w0^2),

    y(t) = (w0/Q) exp(-alpha t) sinh(b t) / b,   alpha = w0/(2Q), b = sqrt(alpha^2 - w0^2),

read as sin(wd t)/wd when Q > 1/2 (the series RLC current i = V/(wd L)
exp(-alpha t) sin(wd t) times R, with R/L = 2 alpha; Nilsson & Riedel,
*Electric Circuits*, chapter on the natural and step responses of RLC
circuits, from memory). It is evaluated with the stable building blocks of
:func:`fitkit.forms.second_order.damped_parts` (continuous through Q = 1/2).

Two forms, split like the low-pass ones:

* "underdamped-band-pass": f0 and Q > 1/2, a decaying oscillation about zero;
* "two-real-pole-band-pass": two real poles, (tau1 + tau2) s / ((1 + s tau1)(1 + s tau2)),
  i.e. (tau1 + tau2)/(tau1 - tau2) (exp(-t/tau1) - exp(-t/tau2)); fitted, like
  "two-real-pole", in tau0 = sqrt(tau1 tau2) and Q <= 1/2 (regular at equal
  poles, where y = 2 (t/tau) exp(-t/tau)) and reported as tau1 >= tau2 with
  the same machinery (fitkit.forms.two_real_pole).

Derived (closed forms): f0, Q, zeta, omega0, the -3 dB bandwidth f0/Q (the
half-power frequencies of a second-order band-pass differ by w0/Q), the peak
time tp and the peak value of the normalised response,

    tp = atan(wd/alpha)/wd  (Q > 1/2),   atanh(b/alpha)/b  (Q <= 1/2; 1/alpha at Q = 1/2),
    peak = exp(-alpha tp) / Q,

(set y' = 0 in the expression above: tan(wd tp) = wd/alpha, and then
sin(wd tp) = wd/w0), plus the damped frequency (underdamped) or tau1, tau2
and tau0 (real poles).
"""

from __future__ import annotations

import math
from dataclasses import dataclass
import numpy as np

from .base import Form, ParamSpec, causal
from .second_order import damped_parts
from .shape_measures import after_edge, noise_level
from .stable_math import relative_decay
from .two_real_pole import (Q_EQUAL_POLES, canonical, fit_coordinates, pair_coordinates,
                            region_quantities, time_constants)


def band_pass_step(t_rel: np.ndarray, f0: float, Q: float) -> np.ndarray:
    """Step response of (w0/Q) s/(s^2 + (w0/Q) s + w0^2); t_rel in s, f0 in Hz; 0 before the edge."""
    after, t = causal(t_rel)
    w0 = 2.0 * math.pi * f0
    _, odd = damped_parts(t, w0, Q)
    return np.where(after, (w0 / Q) * odd, 0.0)


def band_pass_tf(f0: float, Q: float) -> tuple[np.ndarray, np.ndarray]:
    """H(s) = (w0/Q) s / (s^2 + (w0/Q) s + w0^2), descending powers of s."""
    w0 = 2.0 * math.pi * f0
    return np.array([w0 / Q, 0.0]), np.array([1.0, w0 / Q, w0 * w0])


def peak_time(w0: float, Q: float) -> float:
    """Seconds from the edge to the peak of the band-pass step response (w0 in rad/s)."""
    alpha = w0 / (2.0 * Q)
    if Q > 0.5:
        zeta = 1.0 / (2.0 * Q)
        wd = w0 * math.sqrt((1.0 - zeta) * (1.0 + zeta))
        return math.atan2(wd, alpha) / wd  # -> 1/alpha as wd -> 0, no cancellation
    beta = w0 * math.sqrt(max((1.0 - 2.0 * Q) * (1.0 + 2.0 * Q), 0.0)) / (2.0 * Q)
    if beta == 0.0:
        return 1.0 / alpha
    # atanh(x) = log1p(2x/(1 - x))/2 with 1 - x = 1 - b/alpha = w0^2/(alpha (alpha + b)) exactly
    x = beta / alpha
    one_minus_x = w0 * w0 / (alpha * (alpha + beta))
    return 0.5 * math.log1p(2.0 * x / one_minus_x) / beta


def peak_quantities(f0: float, Q: float) -> dict[str, float]:
    """f0 (Hz), Q, zeta, omega0 (rad/s), bandwidth_3db f0/Q (Hz), peak_time (s), peak_value."""
    w0 = 2.0 * math.pi * f0
    tp = peak_time(w0, Q)
    return {"f0": f0, "Q": Q, "zeta": 1.0 / (2.0 * Q), "omega0": w0, "bandwidth_3db": f0 / Q,
            "peak_time": tp, "peak_value": math.exp(-w0 / (2.0 * Q) * tp) / Q}


BAND_PASS_UNITS = {"f0": "Hz", "Q": "", "zeta": "", "omega0": "rad/s", "bandwidth_3db": "Hz",
                   "peak_time": "s", "peak_value": ""}


# -- reading a band-pass response off data (for the starting guesses) -----------------

@dataclass(frozen=True)
class PulseShape:
    """What a response that rises and returns to zero looks like (normalised to a peak of about 1).

    peak_time: seconds from the edge to the largest value.
    fall_time: seconds from the edge until the response, after its peak, first
        falls to 1/e of the peak (nan when not seen).
    crossings: times (s) the response crosses zero after the peak, beyond the noise.
    extrema: |largest excursion| between successive crossings, starting with the peak.
    """

    peak_time: float
    fall_time: float
    crossings: np.ndarray
    extrema: np.ndarray


def measure_pulse(t_rel: np.ndarray, y_norm: np.ndarray) -> PulseShape | None:
    """Peak, fall and zero crossings of a rise-and-return response; None when too short."""
    t, y = after_edge(t_rel, y_norm)
    if t.size < 5:
        return None
    noise = noise_level(np.asarray(y_norm, dtype=float)[np.asarray(t_rel) > 0])
    threshold = max(3.0 * noise, 0.02 * float(np.max(np.abs(y))))
    k = int(np.argmax(y))
    peak = float(y[k])
    if not (peak > 0):
        return None
    later_t, later_y = t[k:], y[k:]
    fell = np.nonzero(later_y <= peak * math.exp(-1.0))[0]
    fall = float(later_t[fell[0]]) if fell.size else math.nan
    state = np.where(later_y > threshold, 1, np.where(later_y < -threshold, -1, 0))
    decided = np.nonzero(state)[0]
    changes = decided[1:][np.diff(state[decided]) != 0]
    crossings = later_t[changes]
    bounds = np.concatenate([[0], changes, [later_y.size]])
    extrema = np.array([np.max(np.abs(later_y[a:b])) for a, b in zip(bounds[:-1], bounds[1:]) if b > a])
    return PulseShape(float(t[k]), fall, crossings, extrema)


def _ringing_start(shape: PulseShape) -> dict[str, float] | None:
    """(f0, Q) from the zero crossings (half period pi/wd) and the decrement of the extrema,
    or from the first crossing and the peak time (tan(wd tp) = wd/alpha); None without a crossing."""
    c = shape.crossings
    if c.size == 0:
        return None
    half = float(np.median(np.diff(c))) if c.size >= 2 else float(c[0])
    wd = math.pi / half
    alpha = math.nan
    ext = shape.extrema[shape.extrema > 0]
    if ext.size >= 3:
        decrement = float(np.median(np.log(ext[:-1] / ext[1:])))  # alpha pi/wd per half period
        alpha = decrement * wd / math.pi if decrement > 0 else math.nan
    if not (alpha > 0) and 0 < wd * shape.peak_time < 0.5 * math.pi:
        alpha = wd / math.tan(wd * shape.peak_time)
    if not (alpha > 0):
        return None
    w0 = math.hypot(wd, alpha)
    return {"f0": w0 / (2.0 * math.pi), "Q": w0 / (2.0 * alpha)}


def spectral_peak(t_rel: np.ndarray, y_norm: np.ndarray) -> float:
    """Frequency (Hz) of the largest peak of the amplitude spectrum of the response after the
    edge (zero-padded FFT, mean removed), above the record's own resolution; nan if none.

    A ringing response's spectrum peaks near its damped frequency however noisy the
    samples: the whole record votes, where zero crossings and peak times need each
    half cycle to stand above the noise (the frequency estimator of a sinusoid in
    noise; Kay, *Fundamentals of Statistical Signal Processing: Estimation Theory*,
    1993, ch. 13, from memory).
    """
    t_rel = np.asarray(t_rel, dtype=float)
    after = t_rel > 0
    t, y = t_rel[after], np.asarray(y_norm, dtype=float)[after]
    if t.size < 8:
        return math.nan
    dt = float(np.median(np.diff(t)))
    if not dt > 0:
        return math.nan
    size = 1 << int(math.ceil(math.log2(8 * t.size)))
    amplitude = np.abs(np.fft.rfft(y - y.mean(), size))
    freq = np.fft.rfftfreq(size, dt)
    usable = freq > 1.5 / (t.size * dt)  # above the lowest frequency the record resolves
    if not np.any(usable):
        return math.nan
    return float(freq[usable][np.argmax(amplitude[usable])])


def underdamped_guess(t_rel: np.ndarray, y_norm: np.ndarray) -> list[dict[str, float]]:
    """Starts from the ringing (crossings and decrement) when seen, from the spectral peak
    (the damped frequency) with a spread of Q, and a spread of Q with f0 set by the measured
    peak time; at most nine."""
    shape = measure_pulse(t_rel, y_norm)
    tp = shape.peak_time if shape is not None and shape.peak_time > 0 else _window(t_rel) / 20.0
    starts = []
    measured = _ringing_start(shape) if shape is not None else None
    if measured is not None and measured["Q"] > 0.5:
        starts.append(measured)
    fd = spectral_peak(t_rel, y_norm)
    if math.isfinite(fd) and fd > 0:
        starts.extend({"f0": fd / math.sqrt(1.0 - 1.0 / (4.0 * q * q)), "Q": q} for q in (1.5, 5.0, 15.0))
    for q in (0.7, 1.5, 4.0, 12.0):
        starts.append({"f0": peak_time(1.0, q) / (2.0 * math.pi * tp), "Q": q})
    return starts


def _window(t_rel: np.ndarray) -> float:
    t = np.asarray(t_rel, dtype=float)
    span = float(t.max()) if t.size else 1.0
    return span if span > 0 else 1.0


def _fall_table() -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """For tau2/tau1 = r: (r, fall_time/peak_time, peak_time/tau1), from this module's response."""
    ratios = np.geomspace(0.003, 1.0, 50)
    t = np.linspace(0.0, 12.0, 24001)  # in units of tau1
    fall_per_peak, peak_per_tau1 = [], []
    for r in ratios:
        y = _taus_step(t, 1.0, float(r))
        k = int(np.argmax(y))
        fell = k + int(np.argmax(y[k:] <= y[k] * math.exp(-1.0)))
        fall_per_peak.append(t[fell] / t[k])
        peak_per_tau1.append(t[k])
    return ratios, np.array(fall_per_peak), np.array(peak_per_tau1)


_FALL_TABLE: tuple[np.ndarray, np.ndarray, np.ndarray] | None = None


def two_real_pole_guess(t_rel: np.ndarray, y_norm: np.ndarray) -> list[dict[str, float]]:
    """Pole pairs as (tau0, Q): first the ratio read off fall time / peak time, then ratios
    1, 0.3, 0.1 and 0.03 placed on the measured peak time."""
    global _FALL_TABLE
    shape = measure_pulse(t_rel, y_norm)
    tp = shape.peak_time if shape is not None and shape.peak_time > 0 else _window(t_rel) / 20.0
    if _FALL_TABLE is None:
        _FALL_TABLE = _fall_table()
    ratios, fall_per_peak, peak_per_tau1 = _FALL_TABLE
    pairs = []
    if shape is not None and math.isfinite(shape.fall_time) and shape.fall_time > tp:
        measured = shape.fall_time / tp
        r = float(np.interp(measured, fall_per_peak[::-1], ratios[::-1]))  # the ratio falls as r rises
        pairs.append((r, tp / float(np.interp(r, ratios, peak_per_tau1))))
    for r in (1.0, 0.3, 0.1, 0.03):
        pairs.append((r, tp / float(np.interp(r, ratios, peak_per_tau1))))
    return [fit_coordinates(tau1, tau1 * r) for r, tau1 in pairs]


# -- the two forms -----------------------------------------------------------------

def _taus_step(t_rel: np.ndarray, tau1: float, tau2: float) -> np.ndarray:
    """(tau1 + tau2)/(tau1 tau2) t exp(-t/slow) (1 - exp(-d t))/(d t), d = 1/fast - 1/slow:
    the real-pole band-pass step, exact at tau1 = tau2 (no division by tau1 - tau2)."""
    slow, fast = max(tau1, tau2), min(tau1, tau2)
    after, t = causal(t_rel)
    d = (slow - fast) / (slow * fast)
    return np.where(after, (1.0 / slow + 1.0 / fast) * t * np.exp(-t / slow) * relative_decay(d * t), 0.0)


def underdamped_step(t_rel: np.ndarray, *, f0: float, Q: float) -> np.ndarray:
    """The band-pass step with f0 (Hz) and Q; seconds; 0 before the edge."""
    return band_pass_step(t_rel, f0, Q)


def underdamped_tf(*, f0: float, Q: float) -> tuple[np.ndarray, np.ndarray]:
    """H(s) = (w0/Q) s / (s^2 + (w0/Q) s + w0^2)."""
    return band_pass_tf(f0, Q)


def underdamped_derived(*, f0: float, Q: float) -> dict[str, float]:
    """The band-pass quantities plus damped_frequency (Hz); nan for Q <= 1/2."""
    out = peak_quantities(f0, Q)
    zeta = 1.0 / (2.0 * Q)
    out["damped_frequency"] = f0 * math.sqrt((1.0 - zeta) * (1.0 + zeta)) if zeta < 1.0 else math.nan
    return out


def real_pole_step(t_rel: np.ndarray, **shape: float) -> np.ndarray:
    """Band-pass step from (tau0, Q) or (tau1, tau2) (either order); seconds; 0 before the edge."""
    if "tau0" not in shape:
        return _taus_step(t_rel, float(shape["tau1"]), float(shape["tau2"]))
    tau0, q = pair_coordinates(shape)
    return band_pass_step(t_rel, 1.0 / (2.0 * math.pi * tau0), q)


def real_pole_tf(**shape: float) -> tuple[np.ndarray, np.ndarray]:
    """H(s) = (tau0/Q) s / (tau0^2 s^2 + (tau0/Q) s + 1) = (tau1 + tau2) s / ((1 + s tau1)(1 + s tau2))."""
    tau0, q = pair_coordinates(shape)
    return np.array([tau0 / q, 0.0]), np.array([tau0 * tau0, tau0 / q, 1.0])


def real_pole_derived(**shape: float) -> dict[str, float]:
    """tau1 >= tau2 (s), tau0 (s), and the band-pass quantities, from (tau0, Q) or (tau1, tau2).

    Just beyond Q = 1/2 (where a fit may land) tau1 and tau2 are nan and the
    other quantities continue smoothly.
    """
    tau0, q = pair_coordinates(shape)
    if "tau0" in shape:
        tau1, tau2 = time_constants(tau0, q)
    else:
        tau1, tau2 = (canonical(shape)[k] for k in ("tau1", "tau2"))
    return {"tau1": tau1, "tau2": tau2, "tau0": tau0, **peak_quantities(1.0 / (2.0 * math.pi * tau0), q)}


UNDERDAMPED_BAND_PASS = Form(
    name="underdamped-band-pass",
    summary="ringing band-pass (Q > 1/2; RLC voltage across R, |H| peaks at 1 at f0): rises, rings about "
            "and returns to the baseline",
    shape=(ParamSpec("f0", "Hz", "frequency", "centre (natural) frequency, where |H| peaks at 1"),
           ParamSpec("Q", "", "ratio", "quality factor, 1/(2 zeta); f0/Q is the -3 dB bandwidth", lower=0.5)),
    unit_step=underdamped_step,
    transfer_function=underdamped_tf,
    guess=underdamped_guess,
    derived=underdamped_derived,
    derived_units={**BAND_PASS_UNITS, "damped_frequency": "Hz"},
    order=2,
    final_value=0.0,
    auto_candidate=True,
    jumps_at_edge=False,
)

TWO_REAL_POLE_BAND_PASS = Form(
    name="two-real-pole-band-pass",
    summary="overdamped band-pass: (tau1 + tau2) s/((1 + s tau1)(1 + s tau2)), |H| peaks at 1; rises and "
            "returns to the baseline",
    shape=(ParamSpec("tau0", "s", "time", "geometric mean of the two time constants, 1/(2 pi f0)"),
           ParamSpec("Q", "", "ratio", "quality factor of the pole pair, 1/2 when the poles are equal",
                     upper=Q_EQUAL_POLES)),
    unit_step=real_pole_step,
    transfer_function=real_pole_tf,
    guess=two_real_pole_guess,
    derived=real_pole_derived,
    derived_units={"tau1": "s", "tau2": "s", "tau0": "s", **BAND_PASS_UNITS},
    order=2,
    final_value=0.0,
    auto_candidate=True,
    jumps_at_edge=False,
    canonical=canonical,
    reported_shape=(ParamSpec("tau1", "s", "time", "slower time constant (the fall)"),
                    ParamSpec("tau2", "s", "time", "faster time constant (the rise)")),
    region_quantities=region_quantities,
    fit_coordinates=fit_coordinates,
)
