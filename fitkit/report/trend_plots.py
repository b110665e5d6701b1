"""Pictures of a quantity's trend along the line: run chart with its limits, moving range, EWMA, CUSUM.

Four panels sharing the board axis, in fitkit's house style (report/plots.py
shades, dashed limits, Agg canvas, no pyplot state):

1. run chart: one dot per board; each phase's centre line and individuals
   limits (centre +- 3 sigma); the design's tolerance limits dashed and the
   region beyond them shaded; every detected drift marked; the latest
   boards' trend line extended to where it meets a limit;
2. moving range with each phase's upper limit;
3. EWMA with each phase's limits;
4. upper and lower CUSUM in units of sigma, with the decision interval h.

matplotlib is imported only inside these functions.
"""

from __future__ import annotations

import numpy as np

from ..trends.analysis import QuantityTrend
from ..trends.charts import moving_ranges
from .batch_plots import GRID_STYLE, LIMIT_STYLE, OUTSIDE_SHADE
from .plots import DATA_STYLE, EDGE_STYLE, FIT_STYLE
from .quantities import label_for

CONTROL_STYLE = dict(color="#5a5a5a", linewidth=0.9, linestyle=(0, (2, 2)))
CENTRE_STYLE = dict(color="#24364b", linewidth=0.9)
DETECTION_STYLE = dict(marker="v", color="#8b1a1a", markersize=8, linestyle="none", zorder=5)
STAT_STYLE = dict(color="#5d7390", linewidth=1.1)


def _scale(unit: str, values: np.ndarray) -> tuple[float, str]:
    """A display factor and prefixed unit for the values (SI prefixes, engineering steps)."""
    finite = np.abs(values[np.isfinite(values)])
    if not unit or not len(finite) or finite.max() == 0:
        return 1.0, unit
    exponent = int(np.floor(np.log10(finite.max()) / 3) * 3)
    prefixes = {-15: "f", -12: "p", -9: "n", -6: "u", -3: "m", 0: "", 3: "k", 6: "M", 9: "G"}
    exponent = min(max(exponent, -15), 9)
    return 10.0 ** -exponent, prefixes[exponent] + unit


def _phase_steps(trend: QuantityTrend, quantity):
    """(x, y) of a per-phase horizontal line for quantity(phase) -> float or None."""
    xs, ys = [], []
    for phase in trend.phases:
        value = quantity(phase)
        if value is None:
            continue
        xs += [phase.start + 0.5, phase.stop + 0.5, np.nan]
        ys += [value, value, np.nan]
    return np.array(xs, float) , np.array(ys, float)


def _run_chart(ax, trend: QuantityTrend, factor: float, unit: str) -> None:
    boards = np.arange(1, len(trend.values) + 1)
    y = trend.values * factor
    ax.plot(boards, y, **DATA_STYLE, label="board")
    for fn, style, label in (
            (lambda p: p.baseline and p.baseline.centre, CENTRE_STYLE, "centre"),
            (lambda p: p.baseline and p.baseline.individuals_limits[0], CONTROL_STYLE, "control limits"),
            (lambda p: p.baseline and p.baseline.individuals_limits[1], CONTROL_STYLE, None)):
        xs, ys = _phase_steps(trend, fn)
        ax.plot(xs, ys * factor, **style, label=label)
    for limit in (trend.limit_low, trend.limit_high):
        if limit is not None:
            ax.axhline(limit * factor, **LIMIT_STYLE)
    lo, hi = ax.get_ylim()
    if trend.limit_low is not None:
        ax.axhspan(min(lo, trend.limit_low * factor), trend.limit_low * factor, **OUTSIDE_SHADE)
    if trend.limit_high is not None:
        ax.axhspan(trend.limit_high * factor, max(hi, trend.limit_high * factor), **OUTSIDE_SHADE)
    _mark_detections(ax, trend, y)
    _projection_line(ax, trend, factor)
    ax.set_ylabel(f"{trend.name} ({unit})" if unit else trend.name)
    ax.legend(loc="best", fontsize=7, frameon=False, ncol=4)


def _mark_detections(ax, trend: QuantityTrend, y: np.ndarray) -> None:
    first = True
    for d in trend.detections:
        i = d["board_index"]
        ax.axvline(i + 1, **EDGE_STYLE)
        ax.plot([i + 1], [y[i]], **DETECTION_STYLE, label="drift detected" if first else None)
        first = False


def _projection_line(ax, trend: QuantityTrend, factor: float) -> None:
    p = trend.projection
    if p is None or not p.significant:
        return
    n = len(trend.values)
    start = n - p.boards + 1
    recent = trend.values[-p.boards:]
    x0 = np.arange(start, n + 1, dtype=float)
    intercept = recent.mean() - p.slope_per_board * (x0.mean() - start)
    end = n + (p.boards_to_limit or 0.0)
    xs = np.array([start, end])
    ax.plot(xs, (intercept + p.slope_per_board * (xs - start)) * factor, **FIT_STYLE, label="trend of last boards")


def _moving_range(ax, trend: QuantityTrend, factor: float, unit: str) -> None:
    mr = moving_ranges(trend.values) * factor
    ax.plot(np.arange(2, len(trend.values) + 1), mr, **DATA_STYLE)
    xs, ys = _phase_steps(trend, lambda p: p.baseline and p.baseline.moving_range_limit)
    ax.plot(xs, ys * factor, **CONTROL_STYLE)
    ax.set_ylabel(f"moving range ({unit})" if unit else "moving range")


def _ewma(ax, trend: QuantityTrend, factor: float, unit: str) -> None:
    for phase in trend.phases:
        if phase.baseline is None or not len(phase.ewma):
            continue
        x = np.arange(phase.start + 1, phase.start + len(phase.ewma) + 1)
        ax.plot(x, phase.ewma * factor, **STAT_STYLE)
        for sign in (-1, 1):
            ax.plot([x[0] - 0.5, x[-1] + 0.5], [(phase.baseline.centre + sign * phase.ewma_half_width) * factor] * 2,
                    **CONTROL_STYLE)
    s = trend.settings
    ax.set_ylabel(f"EWMA ({unit})" if unit else "EWMA")
    ax.set_title(f"EWMA lambda {s.ewma_lambda:g}, L {s.ewma_l:g}", fontsize=8, loc="right")


def _cusum(ax, trend: QuantityTrend) -> None:
    for phase in trend.phases:
        if phase.baseline is None or not len(phase.cusum_upper) or not phase.baseline.sigma_within > 0:
            continue
        x = np.arange(phase.start + 1, phase.start + len(phase.cusum_upper) + 1)
        sigma = phase.baseline.sigma_within
        ax.plot(x, phase.cusum_upper / sigma, **STAT_STYLE)
        ax.plot(x, -phase.cusum_lower / sigma, **dict(STAT_STYLE, linestyle=(0, (4, 2))))
    s = trend.settings
    for sign in (-1, 1):
        ax.axhline(sign * s.cusum_h, **CONTROL_STYLE)
    ax.set_ylabel("CUSUM (sigma)")
    ax.set_title(f"tabular CUSUM k {s.cusum_k:g}, h {s.cusum_h:g} (upper above, lower below zero)",
                 fontsize=8, loc="right")


def plot_trend(trend: QuantityTrend):
    """The four-panel figure of one quantity's trend (a matplotlib Figure on the Agg canvas)."""
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure

    fig = Figure(figsize=(11.0, 8.2), layout="constrained")
    FigureCanvasAgg(fig)
    axes = fig.subplots(4, 1, sharex=True, gridspec_kw={"height_ratios": (3.0, 1.1, 1.4, 1.4)})
    factor, unit = _scale(trend.unit, trend.values)
    _run_chart(axes[0], trend, factor, unit)
    _moving_range(axes[1], trend, factor, unit)
    _ewma(axes[2], trend, factor, unit)
    _cusum(axes[3], trend)
    for ax in axes:
        ax.grid(True, **GRID_STYLE)
    axes[-1].set_xlabel("board (capture order)")
    axes[0].set_title(f"{trend.design}: {trend.name} ({label_for(trend.name)})", fontsize=10, loc="left")
    return fig
