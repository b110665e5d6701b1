"""What the wrappers (dead_time.py, pulse.py) need from the form they wrap.

A wrapper adds a shape parameter (the dead time, the pulse width) to a form.
A form fitted in internal coordinates ("two-real-pole": tau0 and Q, reported
as tau1 and tau2) is wrapped in its reported coordinates, where its
``unit_step``, ``transfer_function`` and ``derived`` also work, with its
canonical order: the engine's confidence-region machinery for internal
coordinates (fitkit.fitting.region_estimates) handles exactly two of them.
"""

from __future__ import annotations

from typing import Mapping

import numpy as np

from .base import Form, ParamSpec


def wrapped_shape(form: Form) -> tuple[ParamSpec, ...]:
    """The parameters a wrapper fits for ``form``: its reported ones if it has them, else its shape."""
    return form.reported_shape or form.shape


def in_wrapped_coordinates(form: Form, shape: Mapping[str, float]) -> dict[str, float]:
    """A shape of ``form`` (for example a guess in its fit coordinates) in :func:`wrapped_shape` names."""
    if not form.reported_shape:
        return dict(shape)
    q = form.region_quantities(**shape)
    return {p.name: float(np.asarray(q[p.name])) for p in form.reported_shape}


def split_off(shape: Mapping[str, float], name: str, default: float | None = None) -> tuple[float, dict[str, float]]:
    """(the value of the wrapper's own parameter ``name``, or ``default`` when the shape
    leaves it out; the rest of the shape)."""
    rest = dict(shape)
    if name not in rest and default is not None:
        return float(default), rest
    return float(rest.pop(name)), rest
