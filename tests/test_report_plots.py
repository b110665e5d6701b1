"""Plots of a fit: produced for every form, with the expected artists, written atomically."""

from __future__ import annotations

import os
import subprocess
import sys
from dataclasses import replace

import numpy as np
import pytest

from fitkit.errors import OptionError
from fitkit.report.plots import MAX_POINTS_DRAWN, PARAMETER_BOX_GID, plot_fit
from fitkit.results import FittedSegment
from support.report_results import FORM_NAMES, make_result


def _box_text(fig) -> str:
    texts = [t for t in fig.findobj() if hasattr(t, "get_gid") and t.get_gid() == PARAMETER_BOX_GID]
    assert len(texts) == 1
    return texts[0].get_text()


def _series(ax):
    """Lines drawn with data (not axvline/axhline, whose x or y data is constant)."""
    out = []
    for line in ax.get_lines():
        x = np.asarray(line.get_xdata(), dtype=float)
        if x.size > 2:
            out.append(line)
    return out


@pytest.mark.parametrize("model", FORM_NAMES)
def test_every_form_plots_with_expected_artists(model):
    result = make_result(model, n_edges=2)
    fig, (ax_data, ax_res) = plot_fit(result)
    series = _series(ax_data)
    assert len(series) == 2 * len(result.segments)            # capture + fitted per edge
    for k, seg in enumerate(result.segments):
        data_line, fit_line = series[2 * k], series[2 * k + 1]
        np.testing.assert_array_equal(data_line.get_ydata(), seg.data)
        np.testing.assert_array_equal(fit_line.get_ydata(), seg.fitted)
        np.testing.assert_allclose(_series(ax_res)[k].get_ydata(), seg.residual)
    # edges marked on both axes by vertical lines at the edge times
    for ax in (ax_data, ax_res):
        verticals = {float(line.get_xdata()[0]) for line in ax.get_lines()
                     if len(line.get_xdata()) == 2 and line.get_xdata()[0] == line.get_xdata()[1]}
        assert {s.edge_time for s in result.segments} <= verticals
    labels = ax_data.get_legend_handles_labels()[1]
    assert labels[:3] == ["capture", f"fitted {model}", "edge"]
    box = _box_text(fig)
    for name in result.parameters:
        assert name in box, name
    assert "95 %" in box
    # engineering-notation axes with units
    assert ax_res.xaxis.get_major_formatter().unit == "s"
    assert ax_data.yaxis.get_major_formatter().unit == "V"
    # shared time axis
    assert ax_data.get_shared_x_axes().joined(ax_data, ax_res)


def test_series_differ_by_style_not_only_colour():
    # readable in greyscale: capture, fit and residual differ by marker or line style
    fig, (ax_data, ax_res) = plot_fit(make_result("underdamped"))
    data_line, fit_line = _series(ax_data)[:2]
    styles = {(data_line.get_marker(), data_line.get_linestyle()),
              (fit_line.get_marker(), fit_line.get_linestyle())}
    assert len(styles) == 2
    edge = next(line for line in ax_data.get_lines() if line not in (data_line, fit_line))
    assert edge.get_linestyle() not in (fit_line.get_linestyle(), "None")


def test_undetermined_parameter_in_box_reads_not_determined():
    result = make_result("underdamped", undetermined=("Q",))
    fig, _ = plot_fit(result)
    q_line = next(line for line in _box_text(fig).splitlines() if line.startswith("Q "))
    assert "not determined" in q_line and "3" not in q_line


@pytest.mark.parametrize("ext,magic", [(".png", b"\x89PNG"), (".svg", b"<svg"), (".pdf", b"%PDF")])
def test_format_by_extension_written_atomically(tmp_path, ext, magic):
    path = tmp_path / f"fit{ext.upper() if ext == '.png' else ext}"
    plot_fit(make_result("first-order"), path)
    data = path.read_bytes()
    assert magic in data[:400]
    assert os.listdir(tmp_path) == [path.name]   # no temporary file left behind


def test_existing_file_kept_unless_overwrite(tmp_path):
    path = tmp_path / "fit.png"
    path.write_bytes(b"previous")
    with pytest.raises(OptionError):
        plot_fit(make_result("first-order"), path, overwrite=False)
    assert path.read_bytes() == b"previous"
    plot_fit(make_result("first-order"), path, overwrite=True)
    assert path.read_bytes()[:4] == b"\x89PNG"


def test_unknown_extension_is_a_clear_error(tmp_path):
    with pytest.raises(OptionError) as info:
        plot_fit(make_result("first-order"), tmp_path / "fit.bmp")
    assert "fit.bmp" in info.value.one_line() and ".png" in info.value.one_line()
    assert not (tmp_path / "fit.bmp").exists()


def test_given_single_axes_gets_residuals_beneath_and_box_inside():
    from matplotlib.figure import Figure
    fig = Figure(figsize=(7, 5))
    ax = fig.add_subplot()
    result = make_result("two-real-pole")
    out_fig, (ax_data, ax_res) = result.plot(ax=ax)     # FitResult.plot hands off to report.plots
    assert out_fig is fig and ax_data is ax and ax_res is not ax
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    FigureCanvasAgg(fig).draw()          # the divider places the residual axes at draw time
    assert ax_res.get_position().y1 <= ax.get_position().y0 + 1e-9
    assert "tau2" in _box_text(fig)


def test_given_axes_pair_is_used():
    from matplotlib.figure import Figure
    fig = Figure()
    pair = fig.subplots(2, 1, sharex=True)
    _, (ax_data, ax_res) = plot_fit(make_result("critically-damped"), ax=tuple(pair))
    assert ax_data is pair[0] and ax_res is pair[1]
    assert len(_series(ax_res)) == 1


def test_envelope_and_notes_for_check_mode():
    result = make_result("first-order")
    seg = result.segments[0]
    envelope = (seg.time, seg.fitted * 0.95, seg.fitted * 1.05)
    fig, (ax_data, _) = plot_fit(result, envelope=envelope, notes=("suspect: C1 reads 4.7 nF",))
    assert "design tolerance envelope" in ax_data.get_legend_handles_labels()[1]
    assert "suspect: C1 reads 4.7 nF" in _box_text(fig)


def test_long_records_are_thinned_for_display_only():
    result = make_result("first-order")
    seg = result.segments[0]
    t = np.linspace(seg.time[0], seg.time[-1], 100_000)
    long_seg = FittedSegment(t, np.interp(t, seg.time, seg.data), np.interp(t, seg.time, seg.fitted),
                             seg.edge_time, 1)
    fig, (ax_data, _) = plot_fit(replace(result, segments=(long_seg,)))
    assert all(len(line.get_xdata()) <= MAX_POINTS_DRAWN for line in _series(ax_data))


def test_library_imports_do_not_load_matplotlib():
    code = ("import sys, fitkit.report, fitkit.results, fitkit.report.text, fitkit.report.csv_out; "
            "print('matplotlib' in sys.modules)")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    assert out.stdout.strip() == "False"


def test_package_exports_resolve_lazily():
    import fitkit.report as report
    from fitkit.report.html import render_html_report
    assert report.plot_fit is plot_fit and report.render_html_report is render_html_report
    with pytest.raises(AttributeError):
        report.no_such_function
