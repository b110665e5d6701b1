"""Plot of a board check: the behavioural fit with the design's tolerance
envelope drawn behind the capture and the suspects named in the box.

Built on fitkit.report.plots.plot_fit (its ``envelope`` and ``notes`` hooks);
matplotlib is imported only when a plot is made.
"""

from __future__ import annotations

import os
from typing import Any

from .check_text import suspect_notes


def plot_check(result, path: str | os.PathLike | None = None, ax: Any = None, *, overwrite: bool = True):
    """Draw the check; write it to ``path`` (.png, .svg, .pdf) when given.

    Returns (figure, (data_axes, residual_axes)) as plot_fit does.
    """
    from .plots import plot_fit
    return plot_fit(result.fit, path=path, ax=ax, envelope=result.envelope_volts,
                    notes=suspect_notes(result), overwrite=overwrite)
