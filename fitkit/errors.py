"""The one exception family fitkit raises on bad input or an analysis that cannot succeed.

Every error carries enough to print one line a user can act on: which file,
which line (when there is one), what is wrong and what to do about it. The CLI
turns these into that one line and a non-zero exit status; library code only
raises them and never prints or exits.
"""

from __future__ import annotations


class FitkitError(ValueError):
    """Base of every fitkit error.

    Parameters
    ----------
    message:
        What is wrong, in plain words.
    path:
        The file concerned, if any.
    line:
        1-based line number in that file, if the problem has one.
    hint:
        What the user can do about it (an option to pass, a setting to change).
    """

    def __init__(self, message: str, *, path: str | None = None,
                 line: int | None = None, hint: str | None = None) -> None:
        super().__init__(message)
        self.message = message
        self.path = None if path is None else str(path)
        self.line = line
        self.hint = hint

    def one_line(self) -> str:
        """The error as one line: ``file:line: message; hint``."""
        where = ""
        if self.path:
            where = self.path + (f":{self.line}" if self.line else "") + ": "
        text = where + self.message.rstrip(". ")
        if self.hint:
            text += "; " + self.hint.rstrip(". ")
        return " ".join(text.split())

    def __str__(self) -> str:  # pragma: no cover - exercised via one_line
        return self.one_line()


class CaptureError(FitkitError):
    """A capture file cannot be read or its contents cannot be used."""


class ConditioningError(FitkitError):
    """The capture holds no usable step (no edge, flat trace, ...)."""


class FitError(FitkitError):
    """A fit did not converge or its parameters are not determined by the data."""


class AverageSmearedError(FitError):
    """A coherent average's alignment smeared the response more than its intervals allow."""


class CircuitError(FitkitError):
    """A circuit description is invalid, or a part cannot be solved."""


class DesignError(FitkitError):
    """A design (board check) file is invalid."""


class OptionError(FitkitError):
    """Command-line options or arguments are inconsistent."""


class ArgumentError(OptionError, TypeError):
    """A library function was called with an argument of the wrong kind (a TypeError too)."""


class QuantityError(FitkitError, KeyError):
    """A result was asked for a quantity it does not hold (a KeyError too)."""


class OutputError(FitkitError):
    """An output file (or standard output) could not be written: disk full, no permission."""
