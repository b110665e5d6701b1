"""fitkit: step-response fitting for bench and production-line captures.

The public API is short; names are imported lazily so that `import fitkit`
(and `fitkit --help`) stay fast:

    from fitkit import load_capture, fit_capture
    cap = load_capture("board_017.csv")
    result = fit_capture(cap)
    print(result.quantity("tau").ci95)   # (low, high) in seconds
"""

from __future__ import annotations

import importlib
from typing import Any

from .errors import (CaptureError, CircuitError, ConditioningError, DesignError, FitError,
                     FitkitError, OptionError)

__version__ = "0.1.0"

# public name -> module that defines it (imported on first use)
_LAZY = {
    "Capture": "fitkit.capture",
    "Channel": "fitkit.capture",
    "load_capture": "fitkit.io",
    "find_edges": "fitkit.conditioning",
    "fit_capture": "fitkit.public_api",
    "fit_circuit": "fitkit.part_values",
    "check_capture": "fitkit.public_api",
    "load_design": "fitkit.check",
    "FitResult": "fitkit.results",
    "Estimate": "fitkit.results",
}

__all__ = ["FitkitError", "CaptureError", "ConditioningError", "FitError", "CircuitError",
           "DesignError", "OptionError", *_LAZY]


def __getattr__(name: str) -> Any:
    if name in _LAZY:
        return getattr(importlib.import_module(_LAZY[name]), name)
    raise AttributeError(f"module 'fitkit' has no attribute {name!r}")
