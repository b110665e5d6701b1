"""Dead time: any form behind a pure delay (a logger that samples late, a transport lag).

    y(t) = unit_step(t - delay; shape),   H(s) = exp(-s delay) H_form(s).

``delayed(form)`` returns a Form named "<form>-with-delay" with one more shape
parameter, ``delay`` (seconds, positive, fitted in log space like every shape
parameter). ``fitkit.forms.get_form`` knows these names, so
``fitkit fit FILE --form first-order-with-delay`` works for every form.

A form fitted in internal coordinates ("two-real-pole", fitted in tau0 and Q
and reported as tau1 and tau2) is delayed in its reported coordinates
(tau1, tau2, delay), see wrapping.py.

When a delay is measurable. The delay only means something where the edge
time is known: with a measured input channel (the drive's own edge fixes the
time origin; the logger case, where the output is sampled about one period
late), or when the edge time is held. In ideal-step mode with the edge time
t0 free the response depends on t0 + delay only, so the two cannot be told
apart: the fit is then singular and the delay is reported as not determined
(the engine should hold t0 at the conditioning's edge for a delayed form, or
not offer one without an input channel).

When the data show no delay. The delay is positive and fitted as its log, so
a response that starts at the edge drives log(delay) towards minus infinity:
the model's dependence on it vanishes like the delay itself (exponentially in
the fitted coordinate), the Jacobian column goes to zero, and the engine's
search stops there or in its flat-valley rule (fitkit.fitting.form_fit). The
delay is then reported "not determined" (its log standard error exceeds the
engine's limit), or, when the data bound it, with an interval that lies below
one sample interval: read either as "no dead time resolved" (checked in
tests/test_forms_wrappers.py). The trial delays never go below a fifth of a
sample interval (:data:`SMALLEST_DELAY`).

The transfer function returned is the rational part H_form(s): exp(-s delay)
has no rational form (a Pade approximant would be an approximation). fitkit
uses a form's transfer function for derived quantities (the delay changes
only the phase) and to map a fit to parts (fitkit.part_values), where a dead
time is no part; the fit itself uses unit_step. Derived quantities are the form's own (times
counted from the end of the dead time) plus ``delay``.
"""

from __future__ import annotations

import itertools
import math
from typing import Mapping

import numpy as np

from .base import Form, ParamSpec
from .shape_measures import after_edge, noise_level
from .wrapping import in_wrapped_coordinates, split_off, wrapped_shape

#: The suffix of a delayed form's name.
DELAY_SUFFIX = "-with-delay"
DELAY_SPEC = ParamSpec("delay", "s", "time", "dead time between the input edge and the start of the response")
#: Smallest trial delay, in sample intervals of the data given to the guess.
SMALLEST_DELAY = 0.2
#: Trial delays as fractions of the time the response takes to leave zero.
ONSET_FRACTIONS = (0.9, 0.5, 0.2)
MAX_STARTS = 12


def onset_time(t_rel: np.ndarray, y_norm: np.ndarray) -> float:
    """Seconds from the edge until the (smoothed) response first leaves zero by more than the
    noise (at least 5 % of its excursion): an upper estimate of the dead time; nan if never."""
    t, y = after_edge(t_rel, y_norm)
    if t.size < 3:
        return math.nan
    level = max(3.0 * noise_level(y), 0.05 * float(np.max(np.abs(y))))
    out = np.nonzero(np.abs(y) > level)[0]
    return float(t[out[0]]) if out.size else math.nan


def _sample_interval(t_rel: np.ndarray) -> float:
    d = np.diff(np.asarray(t_rel, dtype=float))
    d = d[d > 0]
    return float(np.median(d)) if d.size else math.nan


def trial_delays(t_rel: np.ndarray, y_norm: np.ndarray) -> list[float]:
    """Positive trial delays (s): fractions of the onset time, never below SMALLEST_DELAY samples."""
    dt = _sample_interval(t_rel)
    floor = SMALLEST_DELAY * dt if math.isfinite(dt) and dt > 0 else math.nan
    onset = onset_time(t_rel, y_norm)
    delays = [f * onset for f in ONSET_FRACTIONS if math.isfinite(onset) and f * onset > 0]
    delays = [max(d, floor) if math.isfinite(floor) else d for d in delays]
    if math.isfinite(floor):
        delays.append(floor)
    if not delays:  # no time axis to speak of: a small fraction of the window
        span = float(np.ptp(t_rel)) if np.size(t_rel) else 1.0
        delays = [1e-3 * span if span > 0 else 1e-3]
    out: list[float] = []
    for d in delays:
        if all(abs(d - o) > 1e-3 * d for o in out):
            out.append(d)
    return out


#: Delayed forms made so far, by id of the base form (kept with it, so the id is not reused).
_MADE: dict[int, tuple[Form, Form]] = {}


def delayed(form: Form) -> Form:
    """``form`` behind a dead time: a Form with the extra shape parameter ``delay`` (seconds).
    The same object for the same base form (the engine caches prepared data by form)."""
    if form.name.endswith(DELAY_SUFFIX):
        return form
    hit = _MADE.get(id(form))
    if hit is None or hit[0] is not form:
        hit = (form, _make_delayed(form))
        _MADE[id(form)] = hit
    return hit[1]


def _make_delayed(form: Form) -> Form:
    def split(shape: Mapping[str, float]) -> tuple[float, dict[str, float]]:
        return split_off(shape, "delay")

    def unit_step(t_rel: np.ndarray, **shape: float) -> np.ndarray:
        delay, rest = split(shape)
        return form.unit_step(np.asarray(t_rel, dtype=float) - delay, **rest)

    def transfer_function(**shape: float):
        """The rational part H_form(s); the full transfer function is exp(-s delay) H_form(s)."""
        return form.transfer_function(**split(shape)[1])

    def guess(t_rel: np.ndarray, y_norm: np.ndarray) -> list[dict[str, float]]:
        t_rel = np.asarray(t_rel, dtype=float)
        per_delay = []
        for d in trial_delays(t_rel, y_norm):
            per_delay.append([{**in_wrapped_coordinates(form, g), "delay": d} for g in form.guess(t_rel - d, y_norm)])
        # interleaved: each trial delay with its best base guesses first
        starts = [s for row in itertools.zip_longest(*per_delay) for s in row if s is not None]
        return starts[:MAX_STARTS]

    def derived(**shape: float) -> dict[str, float]:
        delay, rest = split(shape)
        return {**form.derived(**rest), "delay": delay}

    def canonical(shape: Mapping[str, float]) -> dict[str, float]:
        delay, rest = split(shape)
        return {**form.canonical_shape(rest), "delay": delay}

    return Form(
        name=form.name + DELAY_SUFFIX,
        summary=f"{form.name} behind a dead time: response(t - delay)",
        shape=(*wrapped_shape(form), DELAY_SPEC),
        unit_step=unit_step,
        transfer_function=transfer_function,
        guess=guess,
        derived=derived,
        derived_units={**dict(form.derived_units), "delay": "s"},
        order=form.order,
        final_value=form.final_value,
        auto_candidate=False,
        canonical=canonical if form.canonical is not None else None,
        jumps_at_edge=form.jumps_at_edge,
    )
