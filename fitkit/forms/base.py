"""What every behavioural step-response form provides.

A form describes the response of a linear system to a step at time ``t0``::

    y(t) = baseline + step * unit_step(t - t0; shape parameters)

where ``unit_step`` is 0 before the edge and the form's normalised step
response after it. ``baseline`` and ``step`` enter linearly, so the engine can
solve them by linear least squares for any trial shape (variable projection).
The shape parameters (time constants, f0, Q, ...) are positive and fitted in
log space.

For measured-input mode a form also gives its normalised transfer function
``H(s)`` (numerator and denominator in descending powers of s) whose step
response is ``unit_step``; the output is then
``baseline + gain * lsim(H, input - input_baseline)``.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Callable, Mapping, Sequence

import numpy as np


@dataclass(frozen=True)
class ParamSpec:
    """One parameter of a form.

    name: trade name used in results and JSON ("tau", "f0", "Q", ...).
    unit: SI unit ("s", "Hz", "V", "" for dimensionless).
    kind: how the engine scales it: "time" (seconds; scaled by the first
        time-constant guess), "frequency" (Hz), "ratio" (dimensionless > 0).
    description: plain words for `fitkit forms`.
    lower, upper: optional bounds in SI units where the form is only
        meaningful on one side of a value (Q > 1/2 for "underdamped");
        None when any positive value is allowed. (Added with the second
        batch of forms; optional, so older code ignores them safely.)
    """

    name: str
    unit: str
    kind: str
    description: str
    lower: float | None = None
    upper: float | None = None


#: The linear parameters every form has (and the edge time).
LEVEL_PARAMS = (
    ParamSpec("baseline", "V", "level", "output level before the edge"),
    ParamSpec("step", "V", "level", "size of the output step (negative for a falling response)"),
)
EDGE_PARAM = ParamSpec("t0", "s", "edge", "time of the input edge")


@dataclass(frozen=True)
class Form:
    """A behavioural step-response form.

    Attributes
    ----------
    name: plain-words name ("first-order", "two-real-pole", ...).
    summary: one line for `fitkit forms`.
    shape: the nonlinear shape parameters, all positive.
    unit_step: f(t_rel, **shape) -> normalised response, t_rel in seconds
        (0 for t_rel < 0). Must be vectorised and numerically stable.
    transfer_function: f(**shape) -> (num, den), descending powers of s,
        whose step response is unit_step.
    guess: f(t_rel, y_norm) -> list of starting shapes (dicts), from a
        normalised response (0 before the edge, about 1 when settled for
        low-pass forms) on a time axis relative to the edge, in seconds.
    derived: f(**shape) -> {name: value} of derived trade quantities (SI units).
    derived_units: unit of each derived quantity.
    order: number of poles (used by model selection to prefer simpler forms).

    Optional attributes (added with the second batch of forms; defaults keep
    the original behaviour):

    final_value: value unit_step tends to as t -> inf: 1 for responses that
        settle at the new level, 0 for "first-order-decay" (a high-pass that
        jumps by ``step`` at the edge and decays back to ``baseline``).
    auto_candidate: False for forms fitted only when asked by name (many
        poles, a zero), which automatic model selection should skip.
    canonical: f(shape) -> shape in canonical order (for example
        tau1 >= tau2), for forms whose unit_step is symmetric in some
        parameters; None when the shape is already canonical.

    Optional attributes for a form fitted in internal coordinates (added for
    "two-real-pole", which is fitted as tau0 and Q, regular at equal poles,
    and reported as tau1 and tau2):

    reported_shape: the parameters a fit reports in place of ``shape`` (the
        fit coordinates); empty when ``shape`` itself is reported.
    region_quantities: f(**shape with numpy arrays) -> {name: array}, closed
        forms of (at least) every ``reported_shape`` parameter, vectorised and
        cheap; their intervals are the range over the confidence region of
        the fit coordinates within the form's bounds (fitkit.fitting.region_estimates),
        honest where the map is singular. Names it also gives that are among
        ``derived`` get the same treatment. None for ordinary forms.
    fit_coordinates: f(**reported_shape values) -> {shape name: value}, the
        map from the reported parameters back to the fit coordinates, used to
        follow a reported parameter's profile likelihood
        (fitkit.fitting.region_profile). The first reported parameter is the
        larger of the pair. None for ordinary forms.

    Optional attribute for a form with a given (not fitted) parameter (added
    with the pulse response, fitkit.forms.pulse):

    held: {shape name: physical value (SI)} of shape parameters that are part
        of the form's description but never fitted (the width of a drive
        pulse). They are shape parameters because the engine evaluates
        unit_step in scaled time; a fit must hold them, e.g.
        ``fit_segments(..., fixed=form.held)``. Empty for ordinary forms.
    jumps_at_edge: True when unit_step jumps at the edge (unit_step(0+) is
        not 0, as for "first-order-decay"): the edge time then trades exactly
        against ``step`` and is best held at the conditioning's edge. False
        for a response that starts continuously, including those that return
        to zero (band-pass, pulse responses), whose edge time is determined
        like a low-pass form's. None (the default): taken as final_value == 0,
        the engine's rule before these forms. Read it through ``edge_jumps``.

    Optional attribute for speed (added for square waves of many edges, whose
    edge delays are solved by Newton steps, fitkit.fitting.edge_delays):

    step_derivatives: f(t_rel, **shape) -> (unit_step, its first and its second
        derivative in t_rel), in 1, 1/s and 1/s^2, 0 before the edge, in closed
        form sharing one evaluation of the exponentials, or None for a shape it
        does not cover. None (the attribute, or what it returns): read through
        ``step_and_derivatives``, which then takes central differences.
    """

    name: str
    summary: str
    shape: tuple[ParamSpec, ...]
    unit_step: Callable[..., np.ndarray]
    transfer_function: Callable[..., tuple[np.ndarray, np.ndarray]]
    guess: Callable[[np.ndarray, np.ndarray], list[dict[str, float]]]
    derived: Callable[..., dict[str, float]]
    derived_units: Mapping[str, str]
    order: int
    final_value: float = 1.0
    auto_candidate: bool = True
    canonical: Callable[[Mapping[str, float]], dict[str, float]] | None = None
    reported_shape: tuple[ParamSpec, ...] = ()
    region_quantities: Callable[..., Mapping[str, np.ndarray]] | None = None
    fit_coordinates: Callable[..., Mapping[str, float]] | None = None
    held: Mapping[str, float] = field(default_factory=dict)
    jumps_at_edge: bool | None = None
    step_derivatives: Callable[..., tuple[np.ndarray, np.ndarray, np.ndarray] | None] | None = None

    @property
    def edge_jumps(self) -> bool:
        """Whether the response jumps at the edge (see ``jumps_at_edge``)."""
        return self.final_value == 0.0 if self.jumps_at_edge is None else self.jumps_at_edge

    def step_and_derivatives(self, t_rel: np.ndarray, difference_step: float, **shape: float
                             ) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """(unit_step, d/dt, d2/dt2) at t_rel: the form's closed form when it has
        one, else central differences of unit_step with ``difference_step`` (the
        units of t_rel)."""
        closed = None if self.step_derivatives is None else self.step_derivatives(t_rel, **shape)
        if closed is not None:
            return closed
        f = self.unit_step(t_rel, **shape)
        up = self.unit_step(t_rel + difference_step, **shape)
        dn = self.unit_step(t_rel - difference_step, **shape)
        h = difference_step
        return f, (up - dn) / (2.0 * h), (up - 2.0 * f + dn) / (h * h)

    def canonical_shape(self, shape: Mapping[str, float]) -> dict[str, float]:
        """The shape with symmetric parameters put in the form's canonical order."""
        return dict(shape) if self.canonical is None else self.canonical(shape)

    @property
    def shape_names(self) -> tuple[str, ...]:
        return tuple(p.name for p in self.shape)

    def response(self, t: np.ndarray, *, baseline: float, step: float, t0: float,
                 **shape: float) -> np.ndarray:
        """y(t) in volts for time t in seconds: baseline + step * unit_step(t - t0)."""
        t = np.asarray(t, dtype=float)
        return baseline + step * self.unit_step(t - t0, **shape)


def causal(t_rel: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Split a relative time axis: (mask of t_rel >= 0, t_rel clipped at 0)."""
    t_rel = np.asarray(t_rel, dtype=float)
    after = t_rel >= 0
    return after, np.where(after, t_rel, 0.0)


def running_mean(y: np.ndarray, k: int) -> np.ndarray:
    """Centred running mean over k samples, same length as y, edges padded with
    the end values; O(n) by cumulative sums (np.convolve would be O(n k))."""
    y = np.asarray(y, dtype=float)
    if k <= 1 or y.size == 0:
        return y
    padded = np.concatenate([np.full(k // 2, y[0]), y, np.full(k - 1 - k // 2, y[-1])])
    c = np.concatenate([[0.0], np.cumsum(padded)])
    return (c[k:] - c[:-k]) / k



def rise_time_scale(t_rel: np.ndarray, y_norm: np.ndarray) -> float:
    """A robust first guess of the response's time scale in seconds.

    The time after the edge at which the normalised response first reaches
    0.632 (the one-time-constant level of a first-order rise), from the
    running median to resist noise; falls back to a fifth of the post-edge
    window when the level is never reached.
    """
    after = t_rel > 0
    t_after, y_after = t_rel[after], y_norm[after]
    if t_after.size < 3:
        return float(max(t_rel[-1], 1e-30))
    k = max(1, t_after.size // 200)
    if k > 1:
        y_after = running_mean(y_after, k)
    crossed = np.nonzero(y_after >= 0.632)[0]
    if crossed.size:
        return float(max(t_after[crossed[0]], t_after[0]))
    return float(t_after[-1] / 5.0)


Shape = Mapping[str, float]
ShapeList = Sequence[Shape]
