"""Every header layout of issue 2, written by the tests themselves, read back.

Each writer below produces one layout in the style real bench exports use and
returns the truth (time axis in seconds, channel values in volts). The reader
must recover them from the file alone, with no options, except where the
layout itself carries no time information (layout 7).
The signal is a first-order step response 1 - exp(-t/tau) (textbook formula,
any circuits text), so values are not constants.
"""

from __future__ import annotations

import numpy as np
import pytest

from fitkit.errors import CaptureError
from fitkit.io import load_capture

from support.layout_files import (ALL_WRITERS, check_truth, write_commented_metadata, write_counts, write_lines,
                                   write_metadata_block, write_names_then_units, write_no_header,
                                   write_side_metadata, write_units_row_with_increment, write_wall_clock)


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
    path = write_lines(tmp_path / "one.txt", [str(k % 7) for k in range(50)])
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
    path = write_lines(tmp_path / "clock.csv", ["Date Time,V"] +
                  [f"2024-03-01 12:00:{k:02d},{k % 3}" for k in range(30)])
    cap = load_capture(path)
    np.testing.assert_allclose(cap.time, np.arange(30.0))
    assert any("wall-clock" in d for d in cap.provenance.decisions)


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
