"""Pictures of a batch: for each fitted quantity, its spread across the captures.

One PNG per quantity, two panels sharing the value axis:

* above, a histogram of the values (stacked by fitted form, each form with its
  own hatch so the picture reads in greyscale);
* below, every capture on its own row, sorted by value: the value as a marker
  (one marker shape per form) and its 95 % interval as a horizontal line.

When limits are given (check mode: the design's acceptance range), they are
drawn as dashed verticals, the region outside them is shaded, and captures
outside are drawn with a cross. Duplicated captures are left out (they would
be counted twice), as are rows without a measured value.

matplotlib is imported only inside the function, on the Agg canvas (no
pyplot state, no display); every file is written atomically.
"""

from __future__ import annotations

import os
import re
from pathlib import Path
from typing import Mapping

import numpy as np
import pandas as pd

from ..atomic import write_bytes_atomic
from ..units import format_value
from .plots import figure_bytes
from .quantities import label_for

#: Sub-folder of the output folder holding the distribution plots.
PLOTS_FOLDER = "distributions"
#: Statuses of rows that carry measured quantities.
MEASURED_STATUSES = ("fitted", "pass", "inconclusive", "fail")
#: Up to this many captures, each row is labelled with its file name.
MAX_NAMED_ROWS = 40

# Our own styles, told apart by shape and hatch as much as by shade.
FORM_MARKERS = ("o", "s", "^", "D", "v", "P", "X", "*")
FORM_HATCHES = ("", "////", "....", "xxxx", "\\\\\\\\", "++", "oo", "--")
FORM_SHADES = ("#34495e", "#a0522d", "#7f8c8d", "#1b1b1b", "#b9a36a", "#5a7d5a", "#8e6c8a", "#c0c0c0")
INTERVAL_STYLE = dict(color="#555555", linewidth=0.9, alpha=0.85, zorder=1.5)
LIMIT_STYLE = dict(color="#000000", linewidth=1.1, linestyle=(0, (6, 3)))
OUTSIDE_SHADE = dict(color="#e3d9c6", alpha=0.6, linewidth=0)
OUTSIDE_MARKER = dict(marker="x", color="#8b1a1a", markersize=7, markeredgewidth=1.6, linestyle="none")
GRID_STYLE = dict(color="#cccccc", linewidth=0.5, linestyle="-")


def _file_name(quantity: str) -> str:
    return re.sub(r"[^A-Za-z0-9_+-]+", "_", quantity).strip("_") or "quantity"


def _measured_rows(frame: pd.DataFrame, quantity: str) -> pd.DataFrame:
    rows = frame
    if "status" in frame:
        rows = rows[rows["status"].isin(MEASURED_STATUSES)]
    if "duplicate_of" in frame:
        rows = rows[rows["duplicate_of"].isna()]
    values = pd.to_numeric(rows[quantity], errors="coerce")
    return rows[np.isfinite(values.to_numpy(dtype=float))]


def plot_batch_distributions(frame: pd.DataFrame, units: Mapping[str, str], out_dir: str | os.PathLike,
                             limits: Mapping[str, tuple[float | None, float | None]] | None = None
                             ) -> list[Path]:
    """Write one distribution plot per quantity of a batch summary; return the files written.

    frame: the summary table (fitkit.batch.summary_frame): columns file,
        status, model, duplicate_of, and for each quantity NAME the columns
        NAME, NAME_ci95_low, NAME_ci95_high in SI units.
    units: quantity name -> SI unit ("s", "Hz", "" for dimensionless); the
        quantities plotted, in this order.
    out_dir: the batch's output folder; plots go to OUT_DIR/distributions/NAME.png.
    limits: quantity name -> (low, high) acceptance limits in SI units (either
        may be None), drawn when given.
    Quantities with no measured value in any row are skipped.
    """
    folder = Path(out_dir) / PLOTS_FOLDER
    written: list[Path] = []
    for name, unit in units.items():
        if name not in frame:
            continue
        rows = _measured_rows(frame, name)
        if rows.empty:
            continue
        fig = _distribution_figure(rows, name, unit or "", (limits or {}).get(name))
        written.append(write_bytes_atomic(folder / f"{_file_name(name)}.png", figure_bytes(fig, "png", dpi=110)))
    return written


def _distribution_figure(rows: pd.DataFrame, name: str, unit: str,
                         limit: tuple[float | None, float | None] | None):
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure
    from matplotlib.lines import Line2D
    from matplotlib.ticker import EngFormatter, MaxNLocator

    rows = rows.assign(_value=pd.to_numeric(rows[name], errors="coerce").astype(float)).sort_values("_value")
    values = rows["_value"].to_numpy(dtype=float)
    low, high = (pd.to_numeric(rows[c], errors="coerce").to_numpy(dtype=float) if c in rows
                 else np.full(values.size, np.nan) for c in (f"{name}_ci95_low", f"{name}_ci95_high"))
    models = rows["model"].fillna("(no form)").astype(str).to_numpy() if "model" in rows \
        else np.array(["(no form)"] * values.size)
    forms = list(dict.fromkeys(models))
    n = values.size
    lo_lim, hi_lim = limit if limit is not None else (None, None)

    height = 4.2 + min(n, 120) * 0.03
    fig = Figure(figsize=(9.0, height), layout="constrained")
    FigureCanvasAgg(fig)
    ax_hist, ax_rows = fig.subplots(2, 1, sharex=True, height_ratios=(1.0, 2.4))

    # histogram, stacked by form
    finite_edges = np.concatenate([values, low[np.isfinite(low)], high[np.isfinite(high)]])
    span = (finite_edges.min(), finite_edges.max())
    if span[0] == span[1]:
        pad = abs(span[0]) * 0.01 or 1.0
        span = (span[0] - pad, span[1] + pad)
    bins = np.linspace(values.min(), values.max(), max(5, min(40, int(np.sqrt(n)) + 4))) \
        if values.min() < values.max() else 5
    groups = [values[models == f] for f in forms]
    ax_hist.hist(groups, bins=bins, stacked=True, histtype="bar", label=forms,
                 color=[FORM_SHADES[i % len(FORM_SHADES)] for i in range(len(forms))],
                 edgecolor="#222222", linewidth=0.6, alpha=0.8)
    for i, patches in enumerate(ax_hist.containers):
        for patch in patches:
            patch.set_hatch(FORM_HATCHES[i % len(FORM_HATCHES)])
    ax_hist.set_ylabel("captures")
    ax_hist.yaxis.set_major_locator(MaxNLocator(integer=True))

    # one row per capture: value and 95 % interval
    y = np.arange(n)
    has_ci = np.isfinite(low) & np.isfinite(high)
    ax_rows.hlines(y[has_ci], low[has_ci], high[has_ci], **INTERVAL_STYLE)
    for i, form in enumerate(forms):
        sel = models == form
        ax_rows.plot(values[sel], y[sel], linestyle="none", marker=FORM_MARKERS[i % len(FORM_MARKERS)],
                     markersize=4.5 if n <= 200 else 2.5, color=FORM_SHADES[i % len(FORM_SHADES)])
    outside = np.zeros(n, dtype=bool)
    for bound, beyond in ((lo_lim, values < (lo_lim if lo_lim is not None else -np.inf)),
                          (hi_lim, values > (hi_lim if hi_lim is not None else np.inf))):
        if bound is not None:
            outside |= beyond
    if outside.any():
        ax_rows.plot(values[outside], y[outside], **OUTSIDE_MARKER)
    if n <= MAX_NAMED_ROWS:
        ax_rows.set_yticks(y, [os.path.basename(str(f)) for f in rows["file"]], fontsize=7)
    else:
        ax_rows.set_yticks([])
        ax_rows.set_ylabel("captures, sorted by value")
    ax_rows.set_ylim(-1, n)

    # limits and the region outside them
    x_lo = min(span[0], lo_lim if lo_lim is not None else span[0])
    x_hi = max(span[1], hi_lim if hi_lim is not None else span[1])
    margin = 0.05 * (x_hi - x_lo)
    x_lo, x_hi = x_lo - margin, x_hi + margin
    for axis in (ax_hist, ax_rows):
        if lo_lim is not None:
            axis.axvspan(x_lo, lo_lim, zorder=0, **OUTSIDE_SHADE)
            axis.axvline(lo_lim, **LIMIT_STYLE)
        if hi_lim is not None:
            axis.axvspan(hi_lim, x_hi, zorder=0, **OUTSIDE_SHADE)
            axis.axvline(hi_lim, **LIMIT_STYLE)
        axis.grid(True, **GRID_STYLE)
        axis.set_axisbelow(True)
    ax_rows.set_xlim(x_lo, x_hi)
    ax_rows.xaxis.set_major_formatter(EngFormatter(unit=unit) if unit else EngFormatter())
    label = label_for(name)
    # the tick labels carry the unit with its prefix ("100 nF"); the axis label names the quantity
    ax_rows.set_xlabel(f"{name}" + (f" ({label})" if label else ""))

    handles = [Line2D([], [], linestyle="none", marker=FORM_MARKERS[i % len(FORM_MARKERS)],
                      color=FORM_SHADES[i % len(FORM_SHADES)], label=f"{f} ({int(np.sum(models == f))})")
               for i, f in enumerate(forms)]
    handles.append(Line2D([], [], label="95 % interval", **INTERVAL_STYLE))
    if lo_lim is not None or hi_lim is not None:
        handles.append(Line2D([], [], label="limits", **LIMIT_STYLE))
    if outside.any():
        handles.append(Line2D([], [], label=f"outside limits ({int(outside.sum())})", **OUTSIDE_MARKER))
    ax_hist.legend(handles=handles, loc="upper right", fontsize=7, framealpha=0.9)

    median = float(np.median(values))
    no_ci = int(n - has_ci.sum())
    note = f"; {no_ci} without an interval" if no_ci else ""
    ax_hist.set_title(f"{name} across {n} captures: median {format_value(median, unit)}, "
                      f"range {format_value(values.min(), unit)} to {format_value(values.max(), unit)}{note}",
                      loc="left", fontsize=10)
    return fig
