"""One rendering protocol for every result the commands print: a Renderer per result type.

A Renderer gives, for one kind of result, its full text, its --quiet lines,
its CSV, its plot file and its HTML report. The CLI asks ``renderer_for(result)``
and calls the same five functions whatever the result is, so no command
branches on the result's type. A new kind of result registers its renderer
here (``RENDERERS``: the result class's qualified name -> the function that
builds its Renderer), and every command that prints it gets all five outputs.

The builders import their report modules when called, so importing this
module costs nothing (matplotlib and the check are loaded only when used).
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any, Callable


@dataclass(frozen=True)
class Renderer:
    """How one kind of result is shown.

    text(result) -> str: the full report for the terminal, ending with a newline.
    quiet(result) -> str: the --quiet lines, ending with a newline.
    csv(result) -> str: one row per quantity (plain SI numbers).
    plot(result, path): write a figure (.png, .svg, .pdf).
    html(result, path, capture_provenance): write the self-contained HTML report.
    """

    text: Callable[[Any], str]
    quiet: Callable[[Any], str]
    csv: Callable[[Any], str]
    plot: Callable[[Any, str], Any]
    html: Callable[[Any, str, Any], Any]


def _fit_renderer() -> Renderer:
    from .csv_out import fit_result_csv
    from .html import write_html_report
    from .plots import plot_fit
    from .text import render_fit_text
    return Renderer(text=render_fit_text, quiet=lambda r: render_fit_text(r, quiet=True), csv=fit_result_csv,
                    plot=lambda r, path: plot_fit(r, path=path),
                    html=lambda r, path, capture: write_html_report(r, path, capture_provenance=capture))


def _check_renderer() -> Renderer:
    from .check_plots import plot_check
    from .check_tables import check_result_csv, render_check_quiet, write_check_report
    from .check_text import render_check_text
    return Renderer(text=lambda r: render_check_text(r) + "\n", quiet=render_check_quiet, csv=check_result_csv,
                    plot=lambda r, path: plot_check(r, path=path),
                    html=lambda r, path, capture: write_check_report(r, path, capture_provenance=capture))


#: result class (module.qualname) -> builder of its Renderer
RENDERERS: dict[str, Callable[[], Renderer]] = {
    "fitkit.results.FitResult": _fit_renderer,
    "fitkit.check.board_check.CheckResult": _check_renderer,
}


def renderer_for(result: Any) -> Renderer:
    """The Renderer of ``result``'s class (or of the nearest registered base class).
    Raises TypeError for a result no renderer is registered for."""
    for cls in type(result).__mro__:
        builder = RENDERERS.get(f"{cls.__module__}.{cls.__qualname__}")
        if builder is not None:
            return builder()
    raise TypeError(f"no renderer is registered for {type(result).__name__}")
