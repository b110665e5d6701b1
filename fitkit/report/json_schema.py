"""The JSON form of a fit and the schema that documents it.

``fit_result_schema()`` returns the JSON Schema (draft 2020-12) that
``FitResult.to_dict()`` satisfies; the schema file ships with the package as
fitkit/report/fit_result.schema.json and its "description" fields document
each stable key. ``fit_result_json()`` is the text `fitkit fit --json` prints.
"""

from __future__ import annotations

import copy
import json
from functools import lru_cache
from importlib import resources
from typing import Any

from ..results import FitResult

SCHEMA_FILE = "fit_result.schema.json"


@lru_cache(maxsize=1)
def _load_schema() -> dict[str, Any]:
    text = resources.files(__package__).joinpath(SCHEMA_FILE).read_text(encoding="utf-8")
    return json.loads(text)


def fit_result_schema() -> dict[str, Any]:
    """The JSON Schema (draft 2020-12) of a fit result, as a new dict each call."""
    return copy.deepcopy(_load_schema())


def fit_result_json(result: FitResult, *, indent: int | None = 2) -> str:
    """``result.to_dict()`` as strict JSON text (no NaN or Infinity; they are null)."""
    return json.dumps(result.to_dict(), indent=indent, allow_nan=False, ensure_ascii=False,
                      default=_plain)


def _plain(obj: Any) -> Any:
    """JSON fallback for values that later stages may put in ``extra`` (numpy scalars, arrays)."""
    if hasattr(obj, "tolist"):
        return obj.tolist()
    if hasattr(obj, "to_dict"):
        return obj.to_dict()
    raise TypeError(f"{type(obj).__name__} is not JSON serialisable")
