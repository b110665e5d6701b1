"""n real poles (a sum of exponentials): multi-stage RC networks, cascaded amplifier stages.

    H(s) = 1 / prod_i (1 + s tau_i),   tau1 >= tau2 >= ... >= taun > 0,   n = 2..5.

Method. The partial-fraction sum of exponentials divides by differences of
time constants and fails as poles approach each other (common: equal stages).
Instead the step response is written as a divided difference of the
exponential (see fitkit.forms.stable_math):

    y(t) = prod_i (t / tau_i) * exp[0, -t/tau_1, ..., -t/tau_n],

which the Taylor-or-recursion scheme there evaluates to a few ulps for
distinct, nearly equal and exactly equal time constants alike. When the time
constants are well apart (all partial-fraction residues below 1e3) the plain
sum of exponentials is as accurate (~1e-13) and much faster, and is used
instead.

Parametrisation: tau1..taun are free positive time constants, ``unit_step``
is symmetric in them, and ``canonical`` / ``derived`` sort them so that
tau1 >= tau2 >= ... Derived: the sorted taus, dominant_tau (the largest),
and the numerical bandwidth, rise time, overshoot (0: a cascade of real
poles never overshoots) and 2 % settling time.

``real_pole_form(n)`` builds the form for n poles; n = 2 returns the
dedicated closed-form "two-real-pole" form.
"""

from __future__ import annotations

import functools
from typing import Mapping

import numpy as np

from ..errors import OptionError
from .base import Form, ParamSpec, causal
from .metrics import half_power_frequency, step_metrics
from .shape_measures import measure_response
from .stable_math import exp_divided_difference
from .two_real_pole import TIMING_UNITS, TWO_REAL_POLE

COUNT_WORDS = {2: "two", 3: "three", 4: "four", 5: "five"}
ORDINALS = {1: "slowest", 2: "second", 3: "third", 4: "fourth", 5: "fifth"}


#: Partial fractions are used while every residue is below this (rounding error <~ 1e-13).
MAX_RESIDUE = 1e3


def _residues(taus: list[float]) -> np.ndarray:
    """c_i = tau_i^(n-1) / prod_{j != i} (tau_i - tau_j), so that y = 1 - sum c_i exp(-t/tau_i)."""
    taus_arr = np.asarray(taus, dtype=float)
    out = np.empty_like(taus_arr)
    for i, ti in enumerate(taus_arr):
        others = np.delete(taus_arr, i)
        with np.errstate(divide="ignore", invalid="ignore"):
            out[i] = np.prod(ti / (ti - others))
    return out


def real_poles_unit_step(t_rel: np.ndarray, taus: list[float]) -> np.ndarray:
    """Step response of 1/prod(1 + s tau_i) for any number of positive taus (s); 0 before the edge.

    Well-separated time constants (every partial-fraction residue below
    MAX_RESIDUE) use the sum of exponentials directly, which is fast and
    accurate to ~1e-13; closer ones use the divided-difference form, exact for
    coincident poles. The two agree to that level where they meet.
    """
    after, t = causal(t_rel)
    taus = sorted(taus, reverse=True)
    residues = _residues(taus)
    if np.all(np.isfinite(residues)) and np.max(np.abs(residues)) < MAX_RESIDUE:
        decay = sum(c * np.exp(-t / tau) for c, tau in zip(residues, taus))
        return np.where(after, 1.0 - decay, 0.0)
    nodes = [np.zeros_like(t)] + [-t / tau for tau in taus]
    scale = np.ones_like(t)
    for tau in taus:
        scale = scale * (t / tau)
    return np.where(after, scale * exp_divided_difference(nodes, presorted=True), 0.0)


def real_poles_step_derivatives(t_rel: np.ndarray, taus: list[float]
                                ) -> tuple[np.ndarray, np.ndarray, np.ndarray] | None:
    """(unit_step, d/dt, d2/dt2) of :func:`real_poles_unit_step` in 1, 1/s, 1/s^2 from
    the partial fractions: y' = sum c_i exp(-t/tau_i) / tau_i, y'' = -sum c_i
    exp(-t/tau_i) / tau_i^2. None where the step itself needs the divided-difference
    form (close time constants): the caller then differentiates numerically."""
    taus = sorted(taus, reverse=True)
    residues = _residues(taus)
    if not (np.all(np.isfinite(residues)) and np.max(np.abs(residues)) < MAX_RESIDUE):
        return None
    after, t = causal(t_rel)
    y = np.zeros_like(t)
    d1 = np.zeros_like(t)
    d2 = np.zeros_like(t)
    for c, tau in zip(residues, taus):
        term = c * np.exp(-t / tau)
        y += term
        d1 += term / tau
        d2 -= term / (tau * tau)
    return np.where(after, 1.0 - y, 0.0), np.where(after, d1, 0.0), np.where(after, d2, 0.0)


def real_poles_transfer_function(taus: list[float]) -> tuple[np.ndarray, np.ndarray]:
    """(num, den) of 1/prod(1 + s tau_i) in descending powers of s."""
    den = np.array([1.0])
    for tau in taus:
        den = np.convolve(den, [tau, 1.0])
    return np.array([1.0]), den


def _names(n: int) -> list[str]:
    return [f"tau{i}" for i in range(1, n + 1)]


def _sorted_taus(shape: Mapping[str, float], n: int) -> list[float]:
    return sorted((float(shape[name]) for name in _names(n)), reverse=True)


@functools.lru_cache(maxsize=None)
def real_pole_form(n: int) -> Form:
    """The form with n real poles, n = 2..5 (plain name "<n in words>-real-pole")."""
    if n == 2:
        return TWO_REAL_POLE
    if n not in COUNT_WORDS:
        raise OptionError(f"a real-pole form needs 2 to 5 poles, not {n}",
                          hint="use two-real-pole ... five-real-pole")
    names = _names(n)

    def unit_step(t_rel: np.ndarray, **shape: float) -> np.ndarray:
        return real_poles_unit_step(t_rel, _sorted_taus(shape, n))

    def transfer_function(**shape: float) -> tuple[np.ndarray, np.ndarray]:
        return real_poles_transfer_function([shape[k] for k in names])

    def step_derivatives(t_rel: np.ndarray, **shape: float):
        return real_poles_step_derivatives(t_rel, _sorted_taus(shape, n))

    def canonical(shape: Mapping[str, float]) -> dict[str, float]:
        return dict(zip(names, _sorted_taus(shape, n)))

    def derived(**shape: float) -> dict[str, float]:
        taus = _sorted_taus(shape, n)
        total = sum(taus)
        num, den = real_poles_transfer_function(taus)
        m = step_metrics(lambda t: real_poles_unit_step(t, taus), horizon=8.0 * total,
                         resolution=total / 500.0)
        return {
            **dict(zip(names, taus)),
            "dominant_tau": taus[0],
            "bandwidth_3db": half_power_frequency(num, den, scale=1.0 / total),
            "rise_time": m["rise_time"],
            "overshoot": m["overshoot"],
            "settling_time_2pct": m["settling_time_2pct"],
        }

    def guess(t_rel: np.ndarray, y_norm: np.ndarray) -> list[dict[str, float]]:
        """Equal and geometrically spread taus whose sum is about the 63 % time."""
        total = measure_response(t_rel, y_norm).time_scale
        starts = []
        for ratio in (1.0, 0.5, 0.25, 0.1):
            weights = np.array([ratio ** i for i in range(n)])
            starts.append(dict(zip(names, (total * weights / weights.sum()).tolist())))
        return starts

    word = COUNT_WORDS[n]
    return Form(
        name=f"{word}-real-pole",
        summary=f"{word} real poles (a {word}-stage RC ladder or cascade): 1/prod(1 + s tau_i)",
        shape=tuple(ParamSpec(k, "s", "time", f"{ORDINALS[i + 1]} time constant")
                    for i, k in enumerate(names)),
        unit_step=unit_step,
        step_derivatives=step_derivatives,
        transfer_function=transfer_function,
        guess=guess,
        derived=derived,
        derived_units={**{k: "s" for k in names}, "dominant_tau": "s", **TIMING_UNITS},
        order=n,
        auto_candidate=n <= 3,
        canonical=canonical,
    )


THREE_REAL_POLE = real_pole_form(3)
FOUR_REAL_POLE = real_pole_form(4)
FIVE_REAL_POLE = real_pole_form(5)
