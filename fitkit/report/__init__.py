"""Reports of a fit: terminal text, JSON and its schema, CSV and pandas tables,
plots (matplotlib, imported only when a plot is made) and a self-contained
HTML page.

    from fitkit.report import render_fit_text, plot_fit, write_html_report
    print(render_fit_text(result))
    plot_fit(result, "board_017.png")
    write_html_report(result, "board_017.html", capture_provenance=capture)
    write_check_report(check, "board_017_check.html", capture_provenance=capture)

Names are imported on first use so that `import fitkit.report` stays light.
Nothing here prints or exits; every file is written atomically (fitkit.atomic).
"""

from __future__ import annotations

import importlib
from typing import Any

# public name -> module (relative to this package) that defines it
_LAZY = {
    "render_fit_text": "text",
    "fit_result_schema": "json_schema",
    "fit_result_json": "json_schema",
    "fit_result_csv": "csv_out",
    "quantity_frame": "csv_out",
    "results_table": "csv_out",
    "plot_fit": "plots",
    "render_html_report": "html",
    "render_html_fragment": "html",
    "write_html_report": "html",
    "check_result_schema": "json_schema",
    "check_result_csv": "check_tables",
    "check_html_sections": "check_tables",
    "render_check_quiet": "check_tables",
    "write_check_report": "check_tables",
    "render_check_text": "check_text",
    "plot_check": "check_plots",
    "renderer_for": "renderers",
}

__all__ = list(_LAZY)


def __getattr__(name: str) -> Any:
    if name in _LAZY:
        return getattr(importlib.import_module(f".{_LAZY[name]}", __name__), name)
    raise AttributeError(f"module 'fitkit.report' has no attribute {name!r}")
