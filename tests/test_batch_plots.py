"""Distribution plots of a batch: one PNG per quantity, limits and outliers drawn,
no pyplot state, written atomically."""

from __future__ import annotations

import sys

import numpy as np
import pandas as pd
import pytest

from fitkit.report.batch_plots import PLOTS_FOLDER, _distribution_figure, plot_batch_distributions


def _frame(n=30, seed=0):
    rng = np.random.default_rng(seed)
    tau = rng.normal(100e-6, 3e-6, n)
    half = rng.uniform(0.5e-6, 2e-6, n)
    q = rng.normal(0.7, 0.02, n)
    models = np.where(np.arange(n) % 5 == 0, "two-real-pole", "first-order")
    frame = pd.DataFrame({"file": [f"board_{i:03d}.csv" for i in range(n)], "status": "fitted",
                          "model": models, "duplicate_of": None,
                          "tau": tau, "tau_ci95_low": tau - half, "tau_ci95_high": tau + half,
                          "Q": q, "Q_ci95_low": np.nan, "Q_ci95_high": np.nan,
                          "never": np.nan, "never_ci95_low": np.nan, "never_ci95_high": np.nan})
    frame.loc[3, "status"] = "unreadable"
    frame.loc[4, "duplicate_of"] = "board_000.csv"
    return frame


def test_one_png_per_measured_quantity(tmp_path):
    paths = plot_batch_distributions(_frame(), {"tau": "s", "Q": "", "never": "V"}, tmp_path)
    assert [p.name for p in paths] == ["tau.png", "Q.png"]        # "never" has no value: skipped
    for p in paths:
        assert p.parent == tmp_path / PLOTS_FOLDER
        assert p.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    assert not list(tmp_path.rglob("*.tmp"))


def test_rows_intervals_limits_and_outliers(tmp_path):
    frame = _frame()
    rows = frame[(frame["status"] == "fitted") & frame["duplicate_of"].isna()]
    low, high = 97e-6, 104e-6
    fig = _distribution_figure(rows, "tau", "s", (low, high))
    ax_hist, ax_rows = fig.axes[:2]
    # one interval line per capture, unreadable and duplicate rows left out
    segments = ax_rows.collections[0].get_segments()
    assert len(segments) == len(rows) == len(frame) - 2
    # the captures marked outside the limits are exactly those beyond them
    outside = int(((rows["tau"] < low) | (rows["tau"] > high)).sum())
    assert outside > 0
    crosses = [ln for ln in ax_rows.get_lines() if ln.get_marker() == "x"]
    assert len(crosses) == 1 and len(crosses[0].get_xdata()) == outside
    limit_lines = [ln for ln in ax_rows.get_lines() if ln.get_linestyle() == "--"
                   and len(set(ln.get_xdata())) == 1]
    assert sorted(ln.get_xdata()[0] for ln in limit_lines) == [low, high]
    legend = [t.get_text() for t in ax_hist.get_legend().get_texts()]
    assert f"outside limits ({outside})" in legend
    n_two = int((rows["model"] == "two-real-pole").sum())
    assert f"two-real-pole ({n_two})" in legend and f"first-order ({len(rows) - n_two})" in legend
    # histogram counts add up to the number of captures
    heights = sum(p.get_height() for bars in ax_hist.containers for p in bars)
    assert heights == pytest.approx(len(rows))


def test_no_pyplot_state(tmp_path):
    plot_batch_distributions(_frame(), {"tau": "s"}, tmp_path)
    if "matplotlib.pyplot" in sys.modules:          # another test may have imported it
        assert sys.modules["matplotlib.pyplot"].get_fignums() == []
