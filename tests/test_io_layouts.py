"""Every header layout of issue 2, written by the tests themselves, read back.

Each writer below produces one layout in the style real bench exports use and
returns the truth (time axis in seconds, channel values in volts). The reader
must recover them from the file alone, with no options, except where the
layout itself carries no time information (layout 7).
The signal is a first-order step response 1 - exp(-t/tau) (textbook formula,
any circuits text), so values are not constants.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest

from fitkit.errors import CaptureError
from fitkit.io import load_capture

TAU = 20e-6
N = 200
DT = 1e-6
T0 = -50e-6


def truth(n=N, dt=DT, t0=T0):
    t = t0 + dt * np.arange(n)
    v = np.where(t >= 0, 1.0 - np.exp(-np.clip(t, 0, None) / TAU), 0.0)
    return t, v


def _write(path: Path, lines: list[str], newline: str = "\n") -> Path:
    path.write_bytes(newline.join(lines).encode() + newline.encode())
    return path


def write_metadata_block(tmp: Path, newline="\n") -> tuple[Path, dict]:
    """Layout 1: key,value and free-text lines, a blank line, then the header row."""
    t, v = truth()
    lines = ["Instrument,Bench recorder BR-1", "Operator,night shift",
             "Captured on a test jig for the filter board", "", "Time (s),CH1 (V),CH2 (mV)"]
    lines += [f"{a:.6e},{b:.6f},{1000 * (0.5 * b):.4f}" for a, b in zip(t, v)]
    return _write(tmp / "layout1.csv", lines, newline), {"t": t, "CH1": v, "CH2": 0.5 * v}


def write_commented_metadata(tmp: Path) -> tuple[Path, dict]:
    """Layout 2: '# key: value' lines (rate, count, trigger, range, offset), negative times."""
    t, v = truth()
    lines = ["# Recorder: bench logger", "# Sample rate: 1 MSa/s", f"# Sample count: {N}",
             "# Trigger: rising edge at 0 s", "# CH1 range: 2 V", "# CH1 offset: 0 V",
             "Time (us),CH1 (V)"]
    lines += [f"{1e6 * a:+.3f},{b:+.6e}" for a, b in zip(t, v)]
    return _write(tmp / "layout2.csv", lines), {"t": t, "CH1": v}


def write_units_row_with_increment(tmp: Path) -> tuple[Path, dict]:
    """Layout 3: names row and units row; units row carries start and increment; index column."""
    t, v = truth()
    lines = ["X,CH1,CH2,Start,Increment,", f"Sequence,Volt,Volt,{T0:.6e},{DT:.6e},"]
    lines += [f"{k},{b:.6e},{-b:.6e},," for k, b in enumerate(v)]
    return _write(tmp / "layout3.csv", lines), {"t": t, "CH1": v, "CH2": -v}


def write_names_then_units(tmp: Path) -> tuple[Path, dict]:
    """Layout 4: names row, units row in brackets, a blank line, data."""
    t, v = truth()
    lines = ["Time,Channel A,Channel B", "(ms),(V),(mV)", ""]
    lines += [f"{1e3 * a:.6f},{b:.6f},{1e3 * b:.3f}" for a, b in zip(t, v)]
    return _write(tmp / "layout4.csv", lines), {"t": t, "Channel A": v, "Channel B": v}


def write_side_metadata(tmp: Path) -> tuple[Path, dict]:
    """Layout 5: key/value cells in the first columns beside time and value, space padded."""
    t, v = truth()
    side = [("Points", f"{N:.6e}", ""), ("Time step", f"{DT:.6e}", ""),
            ("Trigger sample", f"{-T0 / DT:.12e}", ""), ("", "", ""), ("Channel", "CH1", ""),
            ("Value unit", "V", ""), ("Screen scale", "2.000000e-01", "V/div"),
            ("Screen centre", "0.000000e+00", "V"), ("", "", ""), ("Time unit", "s", ""),
            ("Time per division", "2.000000e-05", "s"), ("Probe", "10:1", "")]
    lines = []
    for k, (a, b) in enumerate(zip(t, v)):
        key, val, unit = side[k] if k < len(side) else ("", "", "")
        lines.append(f"{key},{val},{unit},{a:16.9f},{b:9.5f},")
    return _write(tmp / "layout5.csv", lines, "\r\n"), {"t": t, "CH1": v}


def write_counts(tmp: Path) -> tuple[Path, dict]:
    """Layout 6: metadata block with volts per count, offset and sampling period; raw counts."""
    t, v = truth()
    scale, offset = 0.5e-3, -0.25
    counts = np.round((v - offset) / scale).astype(int)
    lines = ["Vertical scale (V/count),0.0005", "Vertical offset (V),-0.25",
             f"Sampling period (s),{DT:g}", f"Trigger point,{int(-T0 / DT)}", "", "CH1"]
    lines += [str(c) for c in counts]
    return _write(tmp / "layout6.csv", lines), {"t": t, "CH1": counts * scale + offset}


def write_no_header(tmp: Path) -> tuple[Path, dict]:
    """Layout 7: no header at all, two raw integer columns."""
    t, v = truth()
    a = np.round(v * 1000).astype(int)
    b = np.round(v * 500).astype(int)
    lines = [f"{x} {y}" for x, y in zip(a, b)]
    return _write(tmp / "layout7.txt", lines), {"t": DT * np.arange(N), "ch1": a * 2e-3, "ch2": b * 2e-3}


def write_wall_clock(tmp: Path) -> tuple[Path, dict]:
    """Layout 8: wall-clock date-time column; the true axis from the interval metadata."""
    t, v = truth(dt=0.01, t0=0.0)
    lines = ["Logger,bench data logger", "Sample interval,10 ms", "", "Date Time,Voltage (V)"]
    lines += [f"2024-03-01 12:00:{int(a):02d},{b:.6f}" for a, b in zip(t, v)]
    return _write(tmp / "layout8.csv", lines), {"t": t, "Voltage": v}


def check_truth(cap, want, *, time_tol=1e-12, value_tol=1e-5):
    np.testing.assert_allclose(cap.time, want["t"], rtol=0, atol=time_tol)
    for name, values in want.items():
        if name != "t":
            np.testing.assert_allclose(cap.channel(name).values, values, rtol=0, atol=value_tol)
    assert set(cap.channel_names) == {k for k in want if k != "t"}


def test_layout1_metadata_block_blank_line_header(tmp_path):
    path, want = write_metadata_block(tmp_path)
    cap = load_capture(path)
    check_truth(cap, want, time_tol=1e-11)
    assert cap.metadata["Instrument"] == "Bench recorder BR-1"
    assert "Captured on a test jig for the filter board" in cap.metadata.values()
    assert cap.provenance.data_start_line == 6
    assert cap.channel("CH2").source_unit == "mV" and cap.channel("CH2").unit == "V"
    assert "metadata block" in cap.provenance.layout


def test_layout1_with_crlf_is_the_same(tmp_path):
    path, want = write_metadata_block(tmp_path, newline="\r\n")
    check_truth(load_capture(path), want, time_tol=1e-11)


def test_layout2_commented_metadata_negative_time(tmp_path):
    path, want = write_commented_metadata(tmp_path)
    cap = load_capture(path)
    check_truth(cap, want, time_tol=1e-9)
    assert cap.time[0] < 0 < cap.time[-1]
    assert cap.metadata["Sample rate"] == "1 MSa/s"
    assert cap.metadata["CH1 range"] == "2 V"
    assert "commented metadata" in cap.provenance.layout
    assert cap.provenance.data_start_line == 8


def test_layout3_units_row_carries_start_and_increment(tmp_path):
    path, want = write_units_row_with_increment(tmp_path)
    cap = load_capture(path)
    check_truth(cap, want, time_tol=1e-12)
    assert "sample-index" in cap.provenance.layout
    assert cap.channel("CH1").unit == "V"


def test_layout4_names_then_units(tmp_path):
    path, want = write_names_then_units(tmp_path)
    cap = load_capture(path)
    check_truth(cap, want, time_tol=1e-9, value_tol=1e-6)
    assert cap.channel("Channel B").source_unit == "mV"
    assert "names row and units row" in cap.provenance.layout
    assert cap.provenance.data_start_line == 4


def test_layout5_metadata_beside_the_data(tmp_path):
    path, want = write_side_metadata(tmp_path)
    cap = load_capture(path)
    check_truth(cap, want, time_tol=1e-9)
    assert cap.metadata["Probe"].strip() == "10:1"
    assert cap.channel_names == ("CH1",) and cap.channel("CH1").unit == "V"
    assert cap.provenance.data_start_line == 1
    assert "beside the data" in cap.provenance.layout


def test_layout6_raw_counts_converted_with_metadata(tmp_path):
    path, want = write_counts(tmp_path)
    cap = load_capture(path)
    check_truth(cap, want)
    assert cap.channel("CH1").unit == "V" and cap.channel("CH1").source_unit == "counts"
    assert "ADC counts" in cap.provenance.layout
    # Trigger point 50 with a 1 us period puts time zero at sample 50.
    assert cap.time[50] == pytest.approx(0.0, abs=1e-15)


def test_layout7_no_header_needs_the_interval(tmp_path):
    path, want = write_no_header(tmp_path)
    cap = load_capture(path, sample_interval="1u", vertical_scale="2m")
    check_truth(cap, want)
    assert cap.provenance.layout.startswith("no header row")


def test_layout7_single_column_without_interval_names_the_option(tmp_path):
    path = _write(tmp_path / "one.txt", [str(k % 7) for k in range(50)])
    with pytest.raises(CaptureError) as err:
        load_capture(path)
    assert "--sample-interval" in err.value.one_line()


def test_layout8_wall_clock_stamps_use_the_interval(tmp_path):
    path, want = write_wall_clock(tmp_path)
    cap = load_capture(path)
    check_truth(cap, want, time_tol=1e-12)
    assert cap.metadata["first time stamp"] == "2024-03-01 12:00:00"
    assert "wall-clock" in cap.provenance.layout


def test_layout8_without_interval_reads_the_stamps_as_time(tmp_path):
    # No interval in the header: the stamps themselves are the time axis, in
    # seconds from the first (never a month or a day read as seconds).
    path = _write(tmp_path / "clock.csv", ["Date Time,V"] +
                  [f"2024-03-01 12:00:{k:02d},{k % 3}" for k in range(30)])
    cap = load_capture(path)
    np.testing.assert_allclose(cap.time, np.arange(30.0))
    assert any("wall-clock" in d for d in cap.provenance.decisions)


ALL_WRITERS = [write_metadata_block, write_commented_metadata, write_units_row_with_increment,
               write_names_then_units, write_side_metadata, write_counts, write_wall_clock]


@pytest.mark.parametrize("writer", ALL_WRITERS, ids=lambda w: w.__name__)
def test_input_file_is_never_modified(tmp_path, writer):
    path, _ = writer(tmp_path)
    before = path.read_bytes(), path.stat().st_mtime_ns
    load_capture(path)
    assert (path.read_bytes(), path.stat().st_mtime_ns) == before


@pytest.mark.parametrize("writer", ALL_WRITERS, ids=lambda w: w.__name__)
def test_clean_layouts_give_no_warnings(tmp_path, writer):
    path, _ = writer(tmp_path)
    assert load_capture(path).warnings == ()
