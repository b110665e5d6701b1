"""Checks on every capture: time order, sampling, unreadable cells, too few
points, flat and clipped traces, empty/binary/truncated files; and the robust
noise estimate."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest

from fitkit.errors import CaptureError
from fitkit.conditioning.noise import noise_from_differences as robust_noise_sigma
from fitkit.io import load_capture
from fitkit.io.checks import longest_run_at, rounded_uniform_grid

RNG = np.random.default_rng(20240301)
N = 500
T = np.arange(N) * 1e-6
V = 1 - np.exp(-T / 50e-6) + RNG.normal(0, 0.01, N)


def write_rows(tmp: Path, time=T, values=V, header="Time (s),Vout (V)", fmt="{:.9e},{:.6f}",
               replace: dict[int, str] | None = None) -> Path:
    lines = [header] + [fmt.format(a, b) for a, b in zip(time, values)]
    for row, text in (replace or {}).items():
        lines[row + 1] = text
    p = tmp / "c.csv"
    p.write_text("\n".join(lines) + "\n")
    return p


def test_duplicated_time_stamp_names_the_line(tmp_path):
    t = T.copy()
    t[100] = t[99]
    with pytest.raises(CaptureError) as err:
        load_capture(write_rows(tmp_path, time=t))
    assert err.value.line == 102  # header is line 1, row 0 is line 2
    assert "repeats" in err.value.one_line() and "c.csv:102" in err.value.one_line()


def test_time_going_backwards_names_the_line(tmp_path):
    t = T.copy()
    t[300:] -= 50e-6
    with pytest.raises(CaptureError, match="goes back in time") as err:
        load_capture(write_rows(tmp_path, time=t))
    assert err.value.line == 302


def test_non_uniform_sampling_warns_with_the_spread(tmp_path):
    t = np.cumsum(np.where(np.arange(N) % 2, 1e-6, 1.3e-6))
    cap = load_capture(write_rows(tmp_path, time=t))
    assert any("non-uniform sampling" in w and "%" in w for w in cap.warnings)


def test_rounded_stamps_rebuild_a_uniform_axis():
    true = 1e-5 + np.arange(300) * 4e-8
    printed = np.array([float(f"{x:.2e}") for x in true])
    quantum = 0.5 * 10.0 ** (np.floor(np.log10(printed)) - 2)
    grid = rounded_uniform_grid(printed, quantum)
    assert grid is not None
    np.testing.assert_allclose(grid, true, atol=2e-9)
    # A genuinely missing block of samples is not consistent with rounding.
    gap = printed.copy()
    gap[150:] += 1e-6
    assert rounded_uniform_grid(gap, quantum) is None


def test_few_bad_rows_are_dropped_with_a_warning(tmp_path):
    p = write_rows(tmp_path, replace={10: "1.0e-05,oops", 200: "2.0e-04,nan", 300: "3.0e-04,inf"})
    cap = load_capture(p)
    assert cap.n_points == N - 3
    msg = [w for w in cap.warnings if "dropped 3 rows" in w]
    assert msg and "line 12" in msg[0]
    # The time axis keeps the real stamps of the rows that remain.
    assert np.all(np.diff(cap.time) > 0) and cap.time[-1] == pytest.approx(T[-1])


def test_many_bad_rows_are_an_error_naming_the_first(tmp_path):
    bad = {k: f"{T[k]:.9e},---" for k in range(50, 80)}
    with pytest.raises(CaptureError) as err:
        load_capture(write_rows(tmp_path, replace=bad))
    assert err.value.line == 52 and "30 of 500" in err.value.message


def test_bad_row_in_a_file_without_time_column_keeps_the_sample_spacing(tmp_path):
    lines = ["CH1"] + [f"{v:.5f}" for v in V]
    lines[101] = "?"
    p = tmp_path / "n.csv"
    p.write_text("\n".join(lines) + "\n")
    cap = load_capture(p, sample_interval="1u")
    assert cap.n_points == N - 1
    assert cap.time[100] == pytest.approx(101e-6)


def test_too_few_points_warns(tmp_path):
    cap = load_capture(write_rows(tmp_path, time=T[:6], values=V[:6]))
    assert any("only 6 data points" in w for w in cap.warnings)


def test_flat_channel_warns_and_all_flat_is_an_error(tmp_path):
    p = tmp_path / "f.csv"
    p.write_text("t,a,b\n" + "".join(f"{a},{b},0.25\n" for a, b in zip(T, V)))
    cap = load_capture(p)
    assert any("'b' is flat" in w for w in cap.warnings)
    p.write_text("t,a,b\n" + "".join(f"{a},1.5,0.25\n" for a in T))
    with pytest.raises(CaptureError, match="every channel is flat"):
        load_capture(p)


def test_clipped_trace_is_flagged_and_clean_trace_is_not(tmp_path):
    clipped = np.minimum(V * 1.4, 1.0)
    cap = load_capture(write_rows(tmp_path, values=clipped))
    assert any("clipped" in w and "maximum" in w for w in cap.warnings)
    assert not any("clipped" in w for w in load_capture(write_rows(tmp_path)).warnings)


def test_square_wave_drive_is_not_called_clipped(tmp_path):
    drive = np.where((np.arange(N) // 50) % 2, 1.0, 0.0)
    assert not load_capture(write_rows(tmp_path, values=drive)).warnings


@pytest.mark.parametrize("content,match", [
    (b"", "empty"), (b"   \n\n  \n", "empty"),
    (bytes(range(256)) * 20, "binary"),
    (b"\x89PNG\r\n\x1a\n" + bytes(RNG.integers(0, 256, 3000, dtype=np.uint8)), "binary|text"),
    (b"Time,V\n", "no columns of numbers|no data"),
    (b"just some words\nand more words\n", "no columns of numbers"),
])
def test_unusable_files_give_clear_capture_errors(tmp_path, content, match):
    p = tmp_path / "bad.csv"
    p.write_bytes(content)
    with pytest.raises(CaptureError, match=match) as err:
        load_capture(p)
    assert "bad.csv" in err.value.one_line() and "\n" not in err.value.one_line()


def test_truncated_last_line_is_dropped_with_a_warning(tmp_path):
    p = write_rows(tmp_path)
    data = p.read_bytes()
    p.write_bytes(data[: data.rstrip().rfind(b",") + 1])  # last row loses its value
    cap = load_capture(p)
    assert cap.n_points == N - 1 and any("dropped 1 row" in w for w in cap.warnings)


def test_missing_file_and_directory(tmp_path):
    with pytest.raises(CaptureError, match="not found"):
        load_capture(tmp_path / "nope.csv")
    with pytest.raises(CaptureError, match="directory"):
        load_capture(tmp_path)


def test_record_length_mismatch_is_reported(tmp_path):
    p = tmp_path / "short.csv"
    p.write_text("# Record length: 1000\nTime,V\n" + "".join(f"{a},{b}\n" for a, b in zip(T, V)))
    assert any("states 1000 samples but the file holds 500" in w for w in load_capture(p).warnings)


def test_longest_run():
    assert longest_run_at(np.array([1, 2, 2, 2, 1, 2, 2]), 2) == 3
    assert longest_run_at(np.array([1, 1]), 2) == 0


def test_robust_noise_sigma_matches_the_standard_deviation_of_white_noise():
    # For Gaussian white noise the MAD-based estimate converges to the true sigma
    # (1.4826 = 1/Phi^-1(3/4); Rousseeuw & Croux, JASA 88 (1993) 1273).
    rng = np.random.default_rng(1)
    sigma = 0.037
    noise = rng.normal(0, sigma, 200_000)
    assert robust_noise_sigma(noise) == pytest.approx(sigma, rel=0.02)
    # A step and a slow exponential barely change it: differences remove them.
    t = np.arange(noise.size)
    signal = 5.0 * (t > 1000) + 2.0 * np.exp(-t / 5e4)
    assert robust_noise_sigma(signal + noise) == pytest.approx(sigma, rel=0.03)
    # np.std would be dominated by the step.
    assert np.std(signal + noise) > 10 * sigma


def test_robust_noise_sigma_edge_cases():
    assert robust_noise_sigma(np.zeros(100)) == 0.0
    assert np.isnan(robust_noise_sigma([1.0, 2.0]))
    assert robust_noise_sigma([1.0, np.nan, 2.0, 3.0, np.inf, 4.0]) == 0.0


def test_coarse_integer_stamps_that_stall_are_not_taken_for_rounding(tmp_path):
    # 1, 1, 2, 2, ... 2: within one unit of a line from 1 to 2, but no time axis.
    p = tmp_path / "stall.csv"
    p.write_text("Time,V\n1,2\n1,3\n" + "2,3\n" * 20)
    with pytest.raises(CaptureError, match="repeats") as err:
        load_capture(p)
    assert err.value.line == 3


def test_noise_free_step_with_flat_baseline_is_not_called_clipped(tmp_path):
    t = np.arange(N) * 1e-6
    clean = np.where(t > 100e-6, 1 - np.exp(-(t - 100e-6) / 30e-6), 0.0)  # 100 flat samples first
    assert not any("clipped" in w for w in load_capture(write_rows(tmp_path, values=clean)).warnings)
    # The same step with scope noise, cut off at 0.8 V, is flagged.
    noisy = np.minimum(clean + np.random.default_rng(3).normal(0, 0.01, N), 0.8)
    assert any("clipped" in w for w in load_capture(write_rows(tmp_path, values=noisy)).warnings)


def test_stated_interval_that_disagrees_with_the_time_column_is_reported(tmp_path):
    p = tmp_path / "rate.csv"
    p.write_text("# Sample rate: 2 MSa/s\nTime,V\n" + "".join(f"{a},{b}\n" for a, b in zip(T, V)))
    assert any("states a sample interval of 5e-07 s" in w for w in load_capture(p).warnings)


def test_row_with_extra_fields_far_below_the_header_names_its_line(tmp_path):
    lines = ["# comment", "", "t,v", ""] + [f"{2 * k},{k % 7}" for k in range(1000)]
    lines[703] += ",5"  # file line 704
    p = tmp_path / "extra.csv"
    p.write_text("\n".join(lines) + "\n")
    with pytest.raises(CaptureError, match="more fields") as err:
        load_capture(p)
    assert err.value.line == 704


def test_very_short_file_with_text_header_lines(tmp_path):
    p = tmp_path / "short.csv"
    p.write_text("exported\nt,v\n1,2\n2,4\n3,5\n")
    cap = load_capture(p)
    assert cap.n_points == 3 and cap.channel_names == ("v",)
    assert any("only 3 data points" in w for w in cap.warnings)


def test_single_row_is_an_error(tmp_path):
    p = tmp_path / "one.csv"
    p.write_text("t,v\n0,1\n")
    with pytest.raises(CaptureError, match="only 1 data row"):
        load_capture(p)
