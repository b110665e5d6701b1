"""The JSON form of a fit and the schema that documents it.

``fit_result_schema()`` returns the JSON Schema (draft 2020-12) that
``FitResult.to_dict()`` satisfies; the schema file ships with the package as
fitkit/report/fit_result.schema.json and its "description" fields document
each stable key. ``fit_result_json()`` is the text `fitkit fit --json` prints.
``check_result_schema()`` is the schema of ``CheckResult.to_dict()`` (`fitkit
check --json`, file check_result.schema.json) with the fit schema bundled.
See docs/json-output.md.
"""

from __future__ import annotations

import copy
import json
from functools import lru_cache
from importlib import resources
from typing import Any

from ..results import FitResult

SCHEMA_FILE = "fit_result.schema.json"
CHECK_SCHEMA_FILE = "check_result.schema.json"


@lru_cache(maxsize=2)
def _read(name: str) -> dict[str, Any]:
    return json.loads(resources.files(__package__).joinpath(name).read_text(encoding="utf-8"))


def _load_schema() -> dict[str, Any]:
    return _read(SCHEMA_FILE)


def check_result_schema() -> dict[str, Any]:
    """The JSON Schema (draft 2020-12) of a board check result, as a new dict each call.

    Its "fit" key refers to the fit schema by $id; that schema is bundled under
    ``$defs["fitResult"]`` so the returned schema is complete on its own.
    """
    schema = copy.deepcopy(_read(CHECK_SCHEMA_FILE))
    schema["$defs"]["fitResult"] = fit_result_schema()
    return schema


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
