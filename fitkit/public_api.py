"""The public entry points with their arguments checked first.

``fitkit.fit_capture`` and ``fitkit.check_capture`` are the library's
functions behind a check of every argument's kind and range: a wrong
argument is one fitkit error naming it (ArgumentError, a TypeError; or
OptionError, a ValueError), never an AttributeError from deep inside.
"""

from __future__ import annotations

import functools
import math
import os
from numbers import Real
from typing import Any

from .capture import Capture
from .errors import ArgumentError, OptionError

INTERVAL_METHODS = ("auto", "covariance", "profile")


def check_capture_argument(function: str, capture: Any) -> None:
    """``capture`` must be a Capture; say how to make one from what was given."""
    if isinstance(capture, Capture):
        return
    if isinstance(capture, (str, os.PathLike)):
        hint = f"read the file first: {function}(fitkit.load_capture({os.fspath(capture)!r}))"
    elif capture is None:
        hint = "read a file with fitkit.load_capture(path)"
    else:
        hint = "build one with fitkit.Capture.from_arrays(time, {name: values}) or fitkit.load_capture(path)"
    raise ArgumentError(f"{function}: capture must be a Capture, not {type(capture).__name__}", hint=hint)


def _channel_argument(function: str, name: str, value: Any) -> None:
    if value is not None and (isinstance(value, bool) or not isinstance(value, (str, int))):
        raise ArgumentError(f"{function}: {name} names a channel (text or a 1-based position), "
                            f"not {type(value).__name__}")


def _edge_time_argument(function: str, value: Any) -> None:
    if value is None:
        return
    if isinstance(value, bool) or not isinstance(value, Real):
        raise ArgumentError(f"{function}: edge_time is a time in seconds (a number), not {value!r}",
                            hint="fitkit.units.parse_value('12.5u', 's') turns text into seconds")
    if not math.isfinite(float(value)):
        raise OptionError(f"{function}: edge_time must be finite, got {value!r}")


def _flag_argument(function: str, name: str, value: Any) -> None:
    if not isinstance(value, bool):
        raise ArgumentError(f"{function}: {name} is True or False, not {value!r}")


def _common(function: str, capture, input, output, edge_time, average) -> None:
    check_capture_argument(function, capture)
    _channel_argument(function, "input", input)
    _channel_argument(function, "output", output)
    _edge_time_argument(function, edge_time)
    _flag_argument(function, "average", average)


def fit_capture(capture: Capture, *, model: str = "auto", input: str | int | None = None,
                output: str | int | None = None, edge_time: float | None = None, average: bool = False,
                candidates=None, intervals: str = "auto", noise_record=None, pulse_width: float | None = None):
    from .fitting import fit_capture as _fit_capture
    from .forms import FORMS
    _common("fit_capture", capture, input, output, edge_time, average)
    if not isinstance(model, str):
        raise ArgumentError(f"fit_capture: model is a form name, not {type(model).__name__}")
    if model != "auto" and model not in FORMS:
        raise OptionError(f"fit_capture: model {model!r} is not a form fitkit knows",
                          hint="use 'auto' or one of: " + ", ".join(sorted(FORMS)))
    if candidates is not None:
        if isinstance(candidates, str) or not hasattr(candidates, "__iter__"):
            raise ArgumentError("fit_capture: candidates is a list of form names")
        candidates = list(candidates)
        unknown = [c for c in candidates if not isinstance(c, str) or c not in FORMS]
        if unknown or not candidates:
            raise OptionError(f"fit_capture: candidates {unknown or candidates!r} are not forms fitkit knows",
                              hint="choose among: " + ", ".join(sorted(FORMS)))
    if intervals not in INTERVAL_METHODS:
        raise OptionError(f"fit_capture: intervals must be one of {', '.join(INTERVAL_METHODS)}, "
                          f"not {intervals!r}")
    if noise_record is not None:
        from .fitting.noise_record import NoiseRecord
        if not isinstance(noise_record, NoiseRecord):
            raise ArgumentError("fit_capture: noise_record is a NoiseRecord "
                                "(fitkit.fitting.noise_record.noise_record_from_capture)")
    if pulse_width is not None:
        if isinstance(pulse_width, bool) or not isinstance(pulse_width, (int, float)) \
                or not (math.isfinite(pulse_width) and pulse_width > 0):
            raise ArgumentError(f"fit_capture: pulse_width is a positive number of seconds, not {pulse_width!r}")
        pulse_width = float(pulse_width)
    return _fit_capture(capture, model=model, input=input, output=output, edge_time=edge_time,
                        average=average, candidates=candidates, intervals=intervals, noise_record=noise_record,
                        pulse_width=pulse_width)


def check_capture(capture: Capture, design, *, input: str | int | None = None, output: str | int | None = None,
                  average: bool = False, envelope_trials: int = 200, seed: int = 0,
                  edge_time: float | None = None, **kwargs):
    from .check import Design
    from .check import check_capture as _check_capture
    _common("check_capture", capture, input, output, edge_time, average)
    if not isinstance(design, (Design, str, os.PathLike)):
        raise ArgumentError(f"check_capture: design is a Design or the path of a design file, "
                            f"not {type(design).__name__}", hint="read one with fitkit.load_design(path)")
    for name, value, low, high in (("envelope_trials", envelope_trials, 10, 100_000),
                                   ("seed", seed, 0, 2**32 - 1)):
        if isinstance(value, bool) or not isinstance(value, int):
            raise ArgumentError(f"check_capture: {name} is a whole number, not {value!r}")
        if not low <= value <= high:
            raise OptionError(f"check_capture: {name} must be from {low} to {high}, got {value}")
    return _check_capture(capture, design, input=input, output=output, average=average,
                          envelope_trials=envelope_trials, seed=seed, edge_time=edge_time, **kwargs)


def _library_doc(wrapper, module: str, name: str) -> None:
    """Give a wrapper the library function's documentation (read lazily)."""
    import importlib
    try:
        functools.update_wrapper(wrapper, getattr(importlib.import_module(module), name),
                                 assigned=("__doc__",), updated=())
    except ImportError:  # pragma: no cover - a partial install
        pass


_library_doc(fit_capture, "fitkit.fitting.step_fit", "fit_capture")
