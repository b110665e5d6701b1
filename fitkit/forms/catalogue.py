"""Plain descriptions of the forms, for `fitkit forms` and for documentation.

``describe_form`` turns a Form into a JSON-ready dict; nothing here computes a
response.
"""

from __future__ import annotations

from typing import Any

from .base import EDGE_PARAM, LEVEL_PARAMS, Form, ParamSpec


def describe_parameter(spec: ParamSpec) -> dict[str, Any]:
    """{"name", "unit", "description"} plus "lower"/"upper" when the form bounds it."""
    d: dict[str, Any] = {"name": spec.name, "unit": spec.unit, "description": spec.description}
    if spec.lower is not None:
        d["lower"] = spec.lower
    if spec.upper is not None:
        d["upper"] = spec.upper
    return d


def describe_form(form: Form) -> dict[str, Any]:
    """A form as plain data: name, summary, poles, shape parameters, derived quantities and units."""
    return {
        "name": form.name,
        "summary": form.summary,
        "poles": form.order,
        # the parameters results report (a form fitted in other coordinates,
        # such as two-real-pole in tau0 and Q, reports tau1 and tau2)
        "parameters": [describe_parameter(p) for p in (form.reported_shape or form.shape)],
        **({"fitted_as": [describe_parameter(p) for p in form.shape]} if form.reported_shape else {}),
        "derived": [{"name": k, "unit": u} for k, u in form.derived_units.items()],
        "settles_to": form.final_value,
        "automatic": form.auto_candidate,
    }


def common_parameters() -> list[dict[str, Any]]:
    """The parameters every form shares: baseline, step and the edge time t0."""
    return [describe_parameter(p) for p in (*LEVEL_PARAMS, EDGE_PARAM)]
