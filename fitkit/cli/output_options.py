"""The output options shared by `fitkit fit` and `fitkit check`, and the one function
that writes them.

``@output_options`` adds --plot, --report, --csv and --quiet to a click command;
``OutputRequest.pop(kwargs)`` takes them back out of the keyword arguments;
``request.validate(inputs)`` refuses bad requests before any work is done
(an output path that is an input, two outputs on one path, an unknown plot
type, a report not named .html); ``write_outputs(request, result, capture)``
writes each file atomically (fitkit.atomic) and ``stdout_text`` gives what the
command prints. A file the user named is replaced if it exists: they asked for
it. A folder that cannot be written is one OptionError line, no traceback.
"""

from __future__ import annotations

import os
from dataclasses import dataclass
from pathlib import Path
from typing import Any, Callable, Iterable

import click

from ..errors import OptionError, OutputError

#: Plot file types by extension (matplotlib formats; see fitkit.report.plots.PLOT_FORMATS).
PLOT_SUFFIXES = (".png", ".svg", ".pdf")
REPORT_SUFFIXES = (".html", ".htm")

_OPTIONS = [
    click.option("--plot", "plot_path", type=click.Path(dir_okay=False), metavar="FILE",
                 help="Write a plot (.png, .svg or .pdf): capture, fitted response and residuals; "
                      "for a check also the tolerance envelope and the suspects."),
    click.option("--report", "report_path", type=click.Path(dir_okay=False), metavar="FILE.html",
                 help="Write a self-contained HTML report (tables, figure, warnings, provenance)."),
    click.option("--csv", "csv_path", type=click.Path(dir_okay=False), metavar="FILE",
                 help="Write one row per quantity as CSV (plain SI numbers) for spreadsheets."),
    click.option("--quiet", "-q", "quiet", is_flag=True,
                 help="Print only one line per quantity (for a check: the verdict and the suspects)."),
]


def output_options(f: Callable) -> Callable:
    """Click decorator: add --plot, --report, --csv and --quiet."""
    for opt in reversed(_OPTIONS):
        f = opt(f)
    return f


def same_file(a: str, b: str) -> bool:
    """True when two paths name one file (same resolved path, or same inode when both exist)."""
    try:
        if Path(a).resolve() == Path(b).resolve():
            return True
    except OSError:
        pass
    try:
        return os.path.samefile(a, b)
    except OSError:
        return False


@dataclass(frozen=True)
class OutputRequest:
    """Which files the user asked for, and whether the terminal text is quiet."""

    plot_path: str | None = None
    report_path: str | None = None
    csv_path: str | None = None
    quiet: bool = False

    @classmethod
    def pop(cls, kwargs: dict) -> "OutputRequest":
        return cls(*(kwargs.pop(k) for k in ("plot_path", "report_path", "csv_path", "quiet")))

    def files(self) -> list[tuple[str, str]]:
        """(option, path) of each requested output file."""
        return [(opt, p) for opt, p in (("--plot", self.plot_path), ("--report", self.report_path),
                                         ("--csv", self.csv_path)) if p]

    def validate(self, inputs: Iterable[str | None], *, as_json: bool = False) -> None:
        """Refuse, before any work, what cannot be written (OptionError, one line)."""
        if self.quiet and as_json:
            raise OptionError("--quiet and --json were both given", hint="give one of them")
        files = self.files()
        for opt, path in files:
            for given in (i for i in inputs if i):
                if same_file(path, given):
                    raise OptionError(f"{opt} {path} is an input file; fitkit never writes over its inputs",
                                      hint="choose another name for the output")
        if self.plot_path and Path(self.plot_path).suffix.lower() not in PLOT_SUFFIXES:
            raise OptionError(f"cannot write a plot to {self.plot_path}: unknown file type",
                              hint="name the plot file .png, .svg or .pdf")
        if self.report_path and Path(self.report_path).suffix.lower() not in REPORT_SUFFIXES:
            raise OptionError(f"the report {self.report_path} is HTML", hint="name it .html")
        for i, (opt_a, a) in enumerate(files):
            for opt_b, b in files[i + 1:]:
                if same_file(a, b):
                    raise OptionError(f"{opt_a} and {opt_b} name the same file {a}",
                                      hint="give each output its own name")
        for opt, path in files:
            _check_folder(opt, path)


def _check_folder(option: str, path: str) -> None:
    """OptionError when the output's folder cannot be created or written."""
    folder = Path(path).parent if str(Path(path).parent) else Path(".")
    existing = folder
    while not existing.exists() and existing != existing.parent:
        existing = existing.parent
    if not existing.is_dir():
        raise OptionError(f"cannot write {option} {path}: {existing} is not a folder",
                          hint="choose an output path in a folder")
    if not os.access(existing, os.W_OK | os.X_OK):
        raise OptionError(f"cannot write {option} {path}: the folder {existing} is not writable",
                          hint="choose a folder you can write to")


def _written(option: str, path: str, write: Callable[[], Any]) -> None:
    """Run one write; turn an operating-system failure into one OptionError line."""
    try:
        write()
    except OSError as exc:
        reason = exc.strerror or type(exc).__name__
        raise OutputError(f"cannot write {option} {path} ({reason})",
                          hint="free some space or choose a folder you can write to") from None


def write_outputs(request: OutputRequest, result: Any, capture: Any = None) -> list[str]:
    """Write every requested file for a result (FitResult, CheckResult, ...: its renderer,
    fitkit.report.renderers); returns their paths.

    ``capture``: the Capture read, for the report's provenance section.
    """
    from ..report.renderers import renderer_for
    renderer = renderer_for(result)
    if request.plot_path:
        path = request.plot_path
        _written("--plot", path, lambda: renderer.plot(result, path))
    if request.report_path:
        path = request.report_path
        _written("--report", path, lambda: renderer.html(result, path, capture))
    if request.csv_path:
        from ..atomic import write_text_atomic
        text = renderer.csv(result)
        _written("--csv", request.csv_path, lambda: write_text_atomic(request.csv_path, text))
    return [p for _, p in request.files()]


def quiet_text(result: Any) -> str:
    """The --quiet text: one line per quantity (fit), or the verdict and suspects (check)."""
    from ..report.renderers import renderer_for
    return renderer_for(result).quiet(result)


def emit_result(request: OutputRequest, result: Any, capture: Any, as_json: bool) -> None:
    """Write the requested files, then print the result: one JSON object with
    --json, the quiet lines with --quiet, else the full text table."""
    import json
    write_outputs(request, result, capture)
    if as_json:
        click.echo(json.dumps(result.to_dict(), allow_nan=False))
    elif request.quiet:
        click.echo(quiet_text(result), nl=False)
    else:
        from ..report.renderers import renderer_for
        click.echo(renderer_for(result).text(result), nl=False)
