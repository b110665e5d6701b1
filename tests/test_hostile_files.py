"""Hostile capture files and API misuse (issue 19): each names its actual
problem in one CaptureError line (with the file line where there is one), or
is read; library calls with wrong arguments raise a fitkit error naming the
argument, a TypeError or ValueError, never an AttributeError from inside.
"""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

import fitkit
from fitkit.errors import ArgumentError, CaptureError, FitkitError, OptionError, QuantityError
from fitkit.io import load_capture

HYPO = dict(deadline=None, derandomize=True, max_examples=25,
            suppress_health_check=[HealthCheck.function_scoped_fixture])
T = np.arange(200) * 1e-6
V = np.where(T > 50e-6, 1 - np.exp(-np.clip(T - 50e-6, 0, None) / 20e-6), 0.0)  # first-order step (textbook)
ROWS = [f"{a:.6e},{b:.6f}" for a, b in zip(T, V)]


def write(tmp_path, name, text, newline="\n"):
    path = tmp_path / name
    path.write_bytes(text.replace("\n", newline).encode())
    return path


@settings(**HYPO)
@given(k=st.integers(5, 190), kind=st.sampled_from(["swap", "repeat"]))
def test_out_of_order_or_repeated_stamps_name_the_line(tmp_path, k, kind):
    rows = list(ROWS)
    if kind == "swap":
        rows[k], rows[k + 1] = rows[k + 1], rows[k]
    else:
        rows[k + 1] = rows[k]
    path = write(tmp_path, f"{kind}{k}.csv", "Time (s),V (V)\n" + "\n".join(rows) + "\n")
    with pytest.raises(CaptureError) as info:
        load_capture(path)
    # header on line 1, data row r on line r + 2; the bad stamp is row k + 1
    assert info.value.line == k + 3
    assert ("goes back" if kind == "swap" else "repeats") in info.value.message


def test_cr_only_line_ends_are_named(tmp_path):
    path = write(tmp_path, "mac.csv", "Time (s),V (V)\n" + "\n".join(ROWS) + "\n", newline="\r")
    with pytest.raises(CaptureError, match="carriage return only"):
        load_capture(path)


def test_a_single_huge_line_is_named(tmp_path):
    path = write(tmp_path, "line.csv", ",".join(["0.5"] * 40_000))  # 160 KB, no line end
    with pytest.raises(CaptureError, match="no line end"):
        load_capture(path)


def test_mixed_delimiters_are_named_with_their_lines(tmp_path):
    rows = [r if i < 100 else r.replace(",", ";") for i, r in enumerate(ROWS)]
    path = write(tmp_path, "mixed.csv", "Time (s),V (V)\n" + "\n".join(rows) + "\n")
    with pytest.raises(CaptureError, match="mixes delimiters: lines 2 to 101"):
        load_capture(path)


@pytest.mark.parametrize("stated", ["0", "-1e-6", "-2 us"])
def test_a_non_positive_interval_in_the_header(tmp_path, stated):
    no_time = write(tmp_path, "a.csv", f"Sample Interval,{stated}\nV (V)\n" + "\n".join(f"{b:.6f}" for b in V) + "\n")
    with pytest.raises(CaptureError, match="not positive"):
        load_capture(no_time)
    with_time = write(tmp_path, "b.csv", f"Sample Interval,{stated}\nTime (s),V (V)\n" + "\n".join(ROWS) + "\n")
    cap = load_capture(with_time)
    np.testing.assert_allclose(cap.time, T, atol=1e-15)
    assert any("not positive" in w for w in cap.warnings)


@pytest.mark.parametrize("comment_lines", [1400, 3000])
def test_headers_longer_than_the_sniff_window(tmp_path, comment_lines):
    header = "".join(f"# setting {i}: padding to make a long instrument header\n" for i in range(comment_lines))
    path = write(tmp_path, "long.csv", header + "Time (s),V (V)\n" + "\n".join(ROWS) + "\n")
    assert path.stat().st_size > 64 * 1024
    cap = load_capture(path)
    assert cap.n_points == T.size and cap.provenance.data_start_line == comment_lines + 2
    skipped = load_capture(path, skip_rows=comment_lines)  # --skip-rows gets past it too
    np.testing.assert_allclose(skipped.channel("V").values, V, atol=1e-6)


def test_skip_rows_past_a_header_of_non_comment_lines(tmp_path):
    header = "".join(f"free text line {i} of an instrument's long preamble, no numbers here\n" for i in range(2000))
    path = write(tmp_path, "pre.csv", header + "Time (s),V (V)\n" + "\n".join(ROWS) + "\n")
    cap = load_capture(path, skip_rows=2000)
    assert cap.n_points == T.size and cap.provenance.data_start_line == 2002


# -- the Python API --------------------------------------------------------------------------

@pytest.fixture(scope="module")
def capture():
    return fitkit.Capture.from_arrays(T, {"out": V + 0.001 * np.random.default_rng(0).standard_normal(T.size)})


BAD_CALLS = [
    ("fit_capture(None)", lambda c: fitkit.fit_capture(None), "capture"),
    ("fit_capture('f.csv')", lambda c: fitkit.fit_capture("f.csv"), "load_capture"),
    ("fit_capture(dict)", lambda c: fitkit.fit_capture({"t": [0, 1]}), "capture"),
    ("fit_capture(ndarray)", lambda c: fitkit.fit_capture(np.zeros((10, 2))), "capture"),
    ("fit_capture(edge_time='abc')", lambda c: fitkit.fit_capture(c, edge_time="abc"), "edge_time"),
    ("fit_capture(model=3)", lambda c: fitkit.fit_capture(c, model=3), "model"),
    ("fit_capture(model='nonsense')", lambda c: fitkit.fit_capture(c, model="nonsense"), "model"),
    ("fit_capture(intervals='x')", lambda c: fitkit.fit_capture(c, intervals="x"), "intervals"),
    ("fit_capture(output=1.5)", lambda c: fitkit.fit_capture(c, output=1.5), "output"),
    ("check_capture(None, design)", lambda c: fitkit.check_capture(None, "design.toml"), "capture"),
    ("check_capture(c, None)", lambda c: fitkit.check_capture(c, None), "design"),
    ("check_capture(seed=-1)", lambda c: fitkit.check_capture(c, "d.toml", seed=-1), "seed"),
    ("load_capture(None)", lambda c: fitkit.load_capture(None), "path"),
    ("load_capture(encoding=123)", lambda c: fitkit.load_capture("x.csv", encoding=123), "encoding"),
    ("load_capture(skip_rows='2')", lambda c: fitkit.load_capture("x.csv", skip_rows="2"), "skip_rows"),
    ("2-D time", lambda c: fitkit.Capture.from_arrays(np.zeros((5, 2)), {"a": np.zeros(5)}), "one-dimensional"),
    ("channel(None)", lambda c: c.channel(None), "channel"),
]


@pytest.mark.parametrize("label, call, named", BAD_CALLS, ids=[b[0] for b in BAD_CALLS])
def test_api_misuse_is_a_fitkit_error_naming_the_argument(capture, label, call, named):
    with pytest.raises(FitkitError) as info:
        call(capture)
    assert isinstance(info.value, (TypeError, ValueError))
    assert named in str(info.value)


def test_asking_a_result_for_an_unknown_quantity(capture):
    result = fitkit.fit_capture(capture, model="first-order")
    with pytest.raises(QuantityError, match="nope.*known: .*tau"):
        result.quantity("nope")
    with pytest.raises(KeyError):  # still a KeyError for code that caught one
        result.quantity("nope")
    with pytest.raises(ArgumentError):
        result.quantity(None)


def test_argument_errors_are_type_errors_and_option_errors_value_errors():
    assert issubclass(ArgumentError, TypeError) and issubclass(ArgumentError, ValueError)
    assert issubclass(OptionError, ValueError) and issubclass(QuantityError, KeyError)


def test_a_long_capture_fitted_on_bins_says_so():
    n = 400_000
    t = np.arange(n) * 5e-8
    v = np.where(t > 2e-3, 1 - np.exp(-np.clip(t - 2e-3, 0, None) / 2e-3), 0.0)
    cap = fitkit.Capture.from_arrays(t, {"out": v + 0.01 * np.random.default_rng(2).standard_normal(n)})
    result = fitkit.fit_capture(cap, model="first-order")
    note = result.details.binning
    assert "averaged into" in note and result.diagnostics.n_samples < n
    from fitkit.report.text import render_fit_text
    assert "binned" in render_fit_text(result)
    assert "binning" in result.to_dict()["extra"]


@pytest.mark.parametrize("ratio, refused", [(1.0, False), (0.5, False), (1.5, False), (10.0, True)])
def test_one_channel_per_file_at_different_rates(tmp_path, ratio, refused):
    # the drive (input) file sampled at `ratio` times the response's interval
    out_t = np.arange(400) * 1e-6
    in_t = np.arange(int(400 / ratio)) * 1e-6 * ratio
    inp = write(tmp_path, "in.csv", "Time (s),Vin (V)\n" + "".join(f"{a:.9e},{float(a > 1e-4):.3f}\n" for a in in_t))
    out = write(tmp_path, "out.csv", "Time (s),Vout (V)\n"
                + "".join(f"{a:.9e},{1 - np.exp(-max(a - 1e-4, 0) / 2e-5):.6f}\n" for a in out_t))
    if refused:
        with pytest.raises(CaptureError, match="edges cannot be placed"):
            load_capture(inp, second_path=out)
        return
    cap = load_capture(inp, second_path=out)
    resampled = [w for w in cap.warnings if "different rates" in w]
    assert bool(resampled) == (ratio != 1.0)  # never interpolated without saying so
