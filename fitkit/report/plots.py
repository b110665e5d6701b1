"""The picture of a fit: capture and fitted response above, residuals beneath.

matplotlib is imported only inside these functions (so `fitkit --help` and
the library stay fast), on the Agg canvas (no display needed). Styles are our
own and readable in greyscale: the capture as small dots, the fitted response
as a solid line, edges as dash-dot verticals, residuals as dots around a zero
line with a light band of one noise RMS. Axes are in engineering notation
with units (seconds, volts). A box lists the parameters with their 95 %
intervals ("not determined" where the data do not decide).

Extension points for check mode: ``envelope`` draws the design's tolerance
band behind the capture and ``notes`` adds lines (for example the suspects)
under the parameters in the box.
"""

from __future__ import annotations

import io
import math
import os
from pathlib import Path
from typing import Any, Sequence

import numpy as np

from ..atomic import write_bytes_atomic
from ..errors import OptionError
from ..results import FitResult
from .quantities import interval_text, quantity_rows, value_text

#: File extensions plot_fit can write, and matplotlib's format name for each.
PLOT_FORMATS = {".png": "png", ".svg": "svg", ".pdf": "pdf"}

# Our own styles; each element differs in line style or marker, not only colour.
DATA_STYLE = dict(color="#5d7390", marker="o", markersize=1.8, linestyle="none", alpha=0.75)
FIT_STYLE = dict(color="#7a2a0c", linewidth=1.7, linestyle="-")
EDGE_STYLE = dict(color="#2b2b2b", linewidth=0.9, linestyle=(0, (7, 3, 1.5, 3)))
RESIDUAL_STYLE = dict(color="#3a3a3a", marker="o", markersize=1.6, linestyle="none", alpha=0.7)
NOISE_BAND_STYLE = dict(facecolor="#d9e1ea", edgecolor="#8a9aae", linewidth=0.6, linestyle=":")
ENVELOPE_STYLE = dict(facecolor="#eadfc6", edgecolor="#a08850", linewidth=0.8, hatch="...")
BOX_STYLE = dict(boxstyle="round,pad=0.5", facecolor="#fbfbf8", edgecolor="#555555", linewidth=0.8)

#: Most points drawn per segment; longer records are thinned for display only.
MAX_POINTS_DRAWN = 4000
#: Derived quantities worth a line in the box, in order, when not already parameters.
BOX_DERIVED = ("f0", "Q", "zeta", "overshoot", "gain", "rise_time", "bandwidth_3db")
BOX_MAX_PARAMETERS = 9
PARAMETER_BOX_GID = "fitkit-parameter-box"


def _thin(*arrays: np.ndarray, limit: int = MAX_POINTS_DRAWN) -> list[np.ndarray]:
    """Every k-th point so at most ``limit`` remain (display only)."""
    n = arrays[0].size
    stride = max(1, math.ceil(n / limit))
    return [a[::stride] for a in arrays]


def parameter_box_lines(result: FitResult, notes: Sequence[str] = ()) -> list[str]:
    """Lines of the parameter box: "name  value  [lo, hi]" for each parameter,
    a few key derived quantities and the components, then any ``notes``."""
    rows = list(quantity_rows(result))
    parameters = [r for r in rows if r.kind == "parameter"]
    more = max(0, len(parameters) - BOX_MAX_PARAMETERS)
    derived = sorted((r for r in rows if r.kind == "derived" and r.name in BOX_DERIVED
                      and r.name not in result.parameters), key=lambda r: BOX_DERIVED.index(r.name))
    groups = [("", parameters[:BOX_MAX_PARAMETERS]), ("derived", derived[:4]),
              ("components", [r for r in rows if r.kind == "component"][:6])]
    shown = [r for _, group in groups for r in group]
    width = max([len(r.name) for r in shown] + [4])
    vwidth = max([len(value_text(r.estimate)) for r in shown] + [5])
    lines = [f"{result.model or 'fit'}: values and 95 % intervals"]
    for heading, group in groups:
        if heading and group:
            lines.append(heading)
        for r in group:
            lines.append(f"{r.name:<{width}}  {value_text(r.estimate):<{vwidth}}  "
                         f"{interval_text(r.estimate)}".rstrip())
    if more:
        lines.append(f"(+{more} more parameters in the table)")
    lines.extend(notes)
    return lines


def corners_by_emptiness(ax, xs: np.ndarray, ys: np.ndarray) -> list[str]:
    """The four corners of the axes (matplotlib loc names), fewest data points first."""
    names = ["lower right", "upper right", "upper left", "lower left"]
    if xs.size == 0:
        return names
    x0, x1 = ax.get_xlim()
    y0, y1 = ax.get_ylim()
    fx = (xs - x0) / (x1 - x0 or 1.0)
    fy = (ys - y0) / (y1 - y0 or 1.0)
    left, right, low, high = fx < 0.45, fx > 0.55, fy < 0.45, fy > 0.55
    counts = {"upper left": left & high, "upper right": right & high,
              "lower left": left & low, "lower right": right & low}
    return sorted(names, key=lambda k: (int(np.count_nonzero(counts[k])), names.index(k)))


def _resolve_axes(ax: Any):
    """(figure, data axes, residual axes, box axes or None) for the three ways of calling."""
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure

    if ax is None:
        fig = Figure(figsize=(11.0, 6.6), layout="constrained")
        FigureCanvasAgg(fig)
        grid = fig.add_gridspec(2, 2, height_ratios=(3.0, 1.1), width_ratios=(3.0, 1.25))
        ax_data = fig.add_subplot(grid[0, 0])
        ax_res = fig.add_subplot(grid[1, 0], sharex=ax_data)
        ax_box = fig.add_subplot(grid[:, 1])
        ax_box.set_axis_off()
        return fig, ax_data, ax_res, ax_box
    if isinstance(ax, (tuple, list)) and len(ax) == 2:
        return ax[0].figure, ax[0], ax[1], None
    from mpl_toolkits.axes_grid1 import make_axes_locatable
    ax_res = make_axes_locatable(ax).append_axes("bottom", size="35%", pad=0.35, sharex=ax)
    return ax.figure, ax, ax_res, None


def plot_fit(result: FitResult, path: str | os.PathLike | None = None, ax: Any = None, *,
             envelope: tuple[np.ndarray, np.ndarray, np.ndarray] | None = None,
             notes: Sequence[str] = (), overwrite: bool = True):
    """Draw a fit; write it to ``path`` when given. Returns (figure, (data_axes, residual_axes)).

    ``ax``: None for a new figure (with the parameter box beside the plots), one
    Axes (residuals are appended beneath it, the box goes in its emptiest
    corner), or a pair (data_axes, residual_axes). ``path``: .png, .svg or
    .pdf, chosen by the extension; written atomically (rendered in memory,
    then a temporary file renamed); an existing file is replaced only with
    ``overwrite=True``. ``envelope``: (time s, low V, high V) of a design's
    tolerance band, drawn behind the capture. ``notes``: extra lines for the box.
    """
    from matplotlib.ticker import EngFormatter

    fmt = None
    if path is not None:
        fmt = PLOT_FORMATS.get(Path(path).suffix.lower())
        if fmt is None:
            raise OptionError(f"cannot write a plot to {path}: unknown file type",
                              path=str(path), hint="name the plot file .png, .svg or .pdf")
    fig, ax_data, ax_res, ax_box = _resolve_axes(ax)
    out_unit = result.output_unit

    if envelope is not None:
        t_env, lo_env, hi_env = (np.asarray(a, dtype=float) for a in envelope)
        ax_data.fill_between(t_env, lo_env, hi_env, label="design tolerance envelope", zorder=0,
                             **ENVELOPE_STYLE)

    all_t, all_y = [], []
    for k, seg in enumerate(result.segments):
        t, y, fitted, resid = _thin(np.asarray(seg.time), np.asarray(seg.data),
                                    np.asarray(seg.fitted), np.asarray(seg.residual))
        first = k == 0
        ax_data.plot(t, y, label="capture" if first else None, zorder=2, **DATA_STYLE)
        ax_data.plot(t, fitted, label=f"fitted {result.model}" if first else None, zorder=3, **FIT_STYLE)
        ax_res.plot(t, resid, label="residual" if first else None, zorder=3, **RESIDUAL_STYLE)
        for axis in (ax_data, ax_res):
            axis.axvline(seg.edge_time, label="edge" if (first and axis is ax_data) else None,
                         zorder=1, **EDGE_STYLE)
        all_t.append(t)
        all_y.append(y)

    ax_res.axhline(0.0, color="#000000", linewidth=0.7, zorder=2)
    noise = result.diagnostics.noise_rms if result.diagnostics is not None else None
    if noise is not None and math.isfinite(noise) and noise > 0:
        ax_res.axhspan(-noise, noise, zorder=0, label="\u00b11 noise RMS", **NOISE_BAND_STYLE)

    if not result.segments:
        ax_data.text(0.5, 0.5, "no fitted data in this result", transform=ax_data.transAxes,
                     ha="center", va="center", color="#555555")

    ax_data.xaxis.set_major_formatter(EngFormatter(unit="s"))
    ax_res.xaxis.set_major_formatter(EngFormatter(unit="s"))
    if out_unit == "V":
        ax_data.yaxis.set_major_formatter(EngFormatter(unit=out_unit))
        ax_res.yaxis.set_major_formatter(EngFormatter(unit=out_unit))
    # raw counts and unitless values keep plain numbers; the unit goes in the label
    suffix = f" ({out_unit})" if out_unit not in ("V", "") else ""
    ax_data.set_ylabel("output" + suffix)
    ax_res.set_ylabel("residual" + suffix)
    ax_res.set_xlabel("time")
    ax_data.tick_params(labelbottom=False)
    for axis in (ax_data, ax_res):
        axis.grid(True, color="#cccccc", linewidth=0.5, linestyle="-")
        axis.set_axisbelow(True)
    title = os.path.basename(result.file) if result.file else "capture in memory"
    ax_data.set_title(f"{title}: step response, fitted form {result.model}", loc="left", fontsize=11)
    ax_res.legend(loc="upper right", fontsize=7, framealpha=0.9, markerscale=3)

    box_text = "\n".join(parameter_box_lines(result, notes))
    if ax_box is not None:
        n_drawn = sum(t.size for t in all_t)
        # "best" searches every drawn point; past a few tens of thousands a fixed corner is quicker
        ax_data.legend(loc="best" if n_drawn <= 20_000 else "upper right", fontsize=8, framealpha=0.9,
                       markerscale=3)
        text = ax_box.text(0.0, 1.0, box_text, transform=ax_box.transAxes, ha="left", va="top",
                           family="monospace", fontsize=8, bbox=BOX_STYLE)
    else:
        from matplotlib.offsetbox import AnchoredText
        xs = np.concatenate(all_t) if all_t else np.array([])
        ys = np.concatenate(all_y) if all_y else np.array([])
        corners = corners_by_emptiness(ax_data, xs, ys)
        ax_data.legend(loc=corners[1], fontsize=7, framealpha=0.9, markerscale=3)
        anchored = AnchoredText(box_text, loc=corners[0], frameon=True,
                                prop=dict(family="monospace", fontsize=7))
        anchored.patch.set_boxstyle("round,pad=0.4")
        anchored.patch.set_facecolor(BOX_STYLE["facecolor"])
        anchored.patch.set_alpha(0.92)
        ax_data.add_artist(anchored)
        text = anchored.txt._text
    text.set_gid(PARAMETER_BOX_GID)

    if path is not None:
        write_bytes_atomic(path, figure_bytes(fig, fmt), overwrite=overwrite)
    return fig, (ax_data, ax_res)


def figure_bytes(fig, fmt: str = "png", dpi: int = 150) -> bytes:
    """Render a figure to bytes in memory ("png", "svg" or "pdf"), with no date stamp."""
    buffer = io.BytesIO()
    metadata = {"Date": None} if fmt in ("svg", "pdf") else None
    fig.savefig(buffer, format=fmt, dpi=dpi, metadata=metadata)
    return buffer.getvalue()
