"""The response to a rectangular drive pulse of known width, for any form.

    y(t) = baseline + step * (unit_step(t - t0) - unit_step(t - t0 - width))

by superposition of the rising edge's step and the falling edge's opposite
step (the system is linear and time-invariant). ``pulse_response(form, width)``
returns such a Form named "<form>-pulse". The width (seconds) is given, not
fitted: stated by the engineer, or measured by the conditioning from the
drive channel or from the output's two edges (fitting it as well would trade
it against the time constants when the pulse is short). It is nevertheless
one of the form's shape parameters, ``pulse_width`` (the given width when
left out of a call in seconds), because the engine
evaluates ``unit_step`` in scaled time, where a width fixed in seconds would
be wrong; the Form lists it in ``held`` and a fit must hold it there:
``fit_segments(segments, form, fixed=form.held)`` (the engine should merge
``Form.held`` into its fixed values itself). Held, it is reported as a
parameter "held fixed". A form fitted in internal coordinates is wrapped in
its reported ones (see wrapping.py).

Levels, for the engine:

* ``baseline`` is the output before the pulse, and also the level it returns
  to after it (``final_value`` is 0: like "first-order-decay", the response
  returns to its baseline);
* ``step`` is the height of the equivalent step: the output level the circuit
  would settle to if the drive stayed at its pulse level (drive pulse height
  times the form's gain), not the peak of the output; for a pulse short
  against the time constants the peak is only about width/tau of it. The
  engine's normalisation by the peak excursion (``scaling.reference_step``
  for forms that return to zero) is only a scale for the starting values;
  ``step`` is still solved linearly;
* ``t0`` is the pulse's rising edge; the falling edge is at t0 + width. The
  two edges of a pulse belong to one segment (one window from before the
  rising edge until the response to the falling edge has settled), not to
  two independent steps. For a form that starts continuously (every low-pass
  form) t0 is as well determined as for a step and should be fitted: the
  pulse form says so with ``jumps_at_edge`` (the wrapped form's). The engine
  currently holds t0 at the conditioning's edge for every form whose final
  value is 0 (a rule made for responses that jump at the edge).

With an input channel the measured-input mode needs no wrapper: the plain
form driven by the recorded pulse covers any pulse shape (droop, finite
edges).

The transfer function returned is the form's own H(s); the pulse is the
input (1 - exp(-s width))/s, not part of the system.
"""

from __future__ import annotations

import math

import numpy as np

from ..errors import OptionError
from .base import Form, ParamSpec
from .wrapping import in_wrapped_coordinates, split_off, wrapped_shape

#: Trailing fraction of the record whose mean is taken as the rebuilt step's final level.
TAIL_FRACTION = 0.1


def step_from_pulse(t_rel: np.ndarray, y_norm: np.ndarray, width: float) -> np.ndarray:
    """The step response rebuilt from a pulse response p (s, on the axis t_rel in seconds):
    s(t) = p(t) + s(t - width) (the superposition s(t) - s(t - width) = p(t) read backwards),
    run on a uniform grid whose step divides the width, then interpolated back; 0 before the
    edge. Noise accumulates along the recursion: for starting values only."""
    t_rel = np.asarray(t_rel, dtype=float)
    y = np.where(t_rel >= 0, np.asarray(y_norm, dtype=float), 0.0)
    after = np.sort(t_rel[t_rel >= 0])
    if not (width > 0) or after.size < 2:
        return y
    dt = float(np.median(np.diff(after))) or width
    per_width = max(1, int(round(width / dt)))
    grid = np.arange(0.0, after[-1] + width / per_width, width / per_width)
    order = np.argsort(t_rel)
    pulse = np.interp(grid, t_rel[order], y[order])
    rebuilt = pulse.copy()
    for start in range(per_width, grid.size, per_width):  # one width at a time, vectorised within it
        stop = min(start + per_width, grid.size)
        rebuilt[start:stop] += rebuilt[start - per_width:stop - per_width]
    return np.where(t_rel >= 0, np.interp(t_rel, grid, rebuilt), 0.0)


WIDTH_SPEC = ParamSpec("pulse_width", "s", "time", "width of the drive pulse (given, held fixed)")
#: The same parameter when the width is fitted (no drive channel and no stated width).
FITTED_WIDTH_SPEC = ParamSpec("pulse_width", "s", "time", "width of the drive pulse (fitted)")


def width_from_peak(t_rel: np.ndarray, y_norm: np.ndarray) -> float:
    """A starting width (same unit as ``t_rel``): the time from the edge to the output's largest
    excursion, which for a first-order low-pass is the pulse width exactly (the output rises
    while the pulse lasts and falls after it); at least one sample interval."""
    t = np.asarray(t_rel, dtype=float)
    y = np.asarray(y_norm, dtype=float)
    after = t >= 0
    if np.count_nonzero(after) < 2:
        return float(np.ptp(t)) / 10.0 or 1.0
    ta, ya = t[after], y[after]
    peak = float(ta[int(np.argmax(np.abs(ya)))])
    step = float(np.median(np.diff(ta)))
    return max(peak, step)


def pulse_response(form: Form, width: float | None) -> Form:
    """``form`` driven by a rectangular pulse of ``width`` seconds (see the module docstring);
    with ``width`` None the width is one more fitted shape parameter, started from the time
    the output takes to its peak (:func:`width_from_peak`)."""
    fitted = width is None
    if fitted:
        width = math.nan
    width = float(width)
    if not fitted and not (math.isfinite(width) and width > 0):
        raise OptionError(f"the pulse width must be a positive number of seconds, not {width!r}",
                          hint="give the drive pulse's width, e.g. 20u")

    def unit_step(t_rel: np.ndarray, **shape: float) -> np.ndarray:
        w, rest = split_off(shape, WIDTH_SPEC.name, width)
        t_rel = np.asarray(t_rel, dtype=float)
        return form.unit_step(t_rel, **rest) - form.unit_step(t_rel - w, **rest)

    def transfer_function(**shape: float):
        """The form's own H(s) (the pulse is the input, not part of the system)."""
        return form.transfer_function(**split_off(shape, WIDTH_SPEC.name, width)[1])

    def guess(t_rel: np.ndarray, y_norm: np.ndarray) -> list[dict[str, float]]:
        start_width = width_from_peak(t_rel, y_norm) if fitted else width
        rebuilt = step_from_pulse(t_rel, y_norm, start_width)
        t = np.asarray(t_rel, dtype=float)
        after = rebuilt[t >= 0]
        if form.final_value == 0.0:  # the rebuilt response itself returns to zero: scale by its peak
            size = float(after[np.argmax(np.abs(after))]) if after.size else 0.0
        else:
            size = float(np.mean(after[-max(1, int(TAIL_FRACTION * after.size)):])) if after.size else 0.0
        if not (math.isfinite(size) and size != 0.0):
            size = 1.0
        return [{**in_wrapped_coordinates(form, g), WIDTH_SPEC.name: start_width}
                for g in form.guess(t, rebuilt / size)]

    def derived(**shape: float) -> dict[str, float]:
        w, rest = split_off(shape, WIDTH_SPEC.name, width)
        return {**form.derived(**rest), WIDTH_SPEC.name: w}

    def canonical(shape):
        w, rest = split_off(shape, WIDTH_SPEC.name, width)
        return {**form.canonical_shape(rest), WIDTH_SPEC.name: w}

    return Form(
        name=f"{form.name}-pulse",
        summary=(f"{form.name} driven by a rectangular pulse of fitted width (no drive channel): "
                 "response(t) - response(t - width)" if fitted else
                 f"{form.name} driven by a {width:g} s rectangular pulse: response(t) - response(t - width)"),
        shape=(*wrapped_shape(form), FITTED_WIDTH_SPEC if fitted else WIDTH_SPEC),
        unit_step=unit_step,
        transfer_function=transfer_function,
        guess=guess,
        derived=derived,
        derived_units={**dict(form.derived_units), WIDTH_SPEC.name: "s"},
        order=form.order,
        final_value=0.0,
        auto_candidate=fitted,  # the fitted-width form competes when a response returns to its baseline
        canonical=canonical if form.canonical is not None else None,
        held={} if fitted else {WIDTH_SPEC.name: width},
        jumps_at_edge=form.edge_jumps,
    )
