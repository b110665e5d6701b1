"""Behavioural step-response forms, by plain-words name.

``FORMS`` maps each name to its :class:`~fitkit.forms.base.Form`;
``get_form(name)`` looks one up with a helpful error.
"""

from __future__ import annotations

from ..errors import OptionError
from .base import Form, ParamSpec
from .first_order import FIRST_ORDER

FORMS: dict[str, Form] = {f.name: f for f in (FIRST_ORDER,)}


def get_form(name: str) -> Form:
    """The form called ``name``; OptionError listing the known forms otherwise."""
    try:
        return FORMS[name]
    except KeyError:
        raise OptionError(f"unknown form {name!r}; known forms: {', '.join(FORMS)}",
                          hint="run `fitkit forms` to list them") from None


__all__ = ["Form", "ParamSpec", "FORMS", "get_form"]
