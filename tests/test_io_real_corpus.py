"""Every file of the real corpus (../shared/reference/real-captures) is read
correctly with no options.

The facts checked come from the corpus's SOURCE.md (layout, channels, units,
sample interval, first time) and from the files themselves, read independently
with pandas.read_csv (row counts and values). Each file gets its own test, so a
regression names the file.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from fitkit.io import load_capture
from support.reference_paths import REAL_CAPTURES, needs_real_captures

pytestmark = needs_real_captures


def _no_volts_without_unit(cap):
    # A channel the file gives no unit for is never labelled volts.
    for ch in cap.channels:
        assert ch.unit in ("V", "", "counts")


def test_aldousfinn_scope_1_numbered_channels_under_a_units_row():
    path = REAL_CAPTURES / "AldousFinn--ECE2260" / "scope_1.csv"
    cap = load_capture(path)
    # SOURCE.md: header rows `x-axis,1,2,3,F1` then `second,Volt,...`; 2,000 rows,
    # 5 us per sample from -5.06 ms; 8-bit steps of 25.1 mV.
    assert cap.channel_names == ("1", "2", "3", "F1")
    assert all(ch.unit == "V" for ch in cap.channels)
    ref = pd.read_csv(path, skiprows=[1])
    assert cap.n_points == len(ref) == 2000
    assert cap.time[0] == pytest.approx(-5.06e-3) and cap.sample_interval == pytest.approx(5e-6)
    np.testing.assert_array_equal(cap.channel("2").values, ref["2"].to_numpy())
    assert "names row and units row" in cap.provenance.layout


@pytest.mark.parametrize("name", ["scope_6.csv", "scope_8.csv"])
def test_aldousfinn_single_channel_named_by_a_number(name):
    path = REAL_CAPTURES / "AldousFinn--ECE2260" / name
    cap = load_capture(path)
    # SOURCE.md: `x-axis,2` / `second,Volt`; 4.6 us per sample from -4.19 ms.
    assert cap.channel_names == ("2",) and cap.channel("2").unit == "V"
    assert cap.n_points == len(pd.read_csv(path, skiprows=[1])) == 2000
    assert cap.time[0] == pytest.approx(-4.19e-3) and cap.sample_interval == pytest.approx(4.6e-6, rel=1e-3)


@pytest.mark.parametrize("name, rows, first", [("Dati0511_1.txt", 500, 0.0), ("Dati1105_Maxati.txt", 493, 14e-6)])
def test_justsimone_one_time_column_per_channel(name, rows, first):
    path = REAL_CAPTURES / "JustSimone--Impulsive_RLC_Experiment" / name
    cap = load_capture(path)
    # SOURCE.md: tab separated, CRLF, three channels each with its own identical
    # time column, 2 us per sample; Dati1105_Maxati has a blank line after the header.
    assert cap.channel_names == ("AmplitudeV_S", "AmplitudeV_C", "AmplitudeV_R")
    ref = pd.read_csv(path, sep="\t", skip_blank_lines=True)
    assert cap.n_points == len(ref.dropna(how="all")) == rows
    assert cap.time[0] == pytest.approx(first, abs=1e-12)
    assert cap.sample_interval == pytest.approx(2e-6)
    np.testing.assert_array_equal(cap.channel("AmplitudeV_C").values, ref["AmplitudeV_C"].dropna().to_numpy())
    assert all(ch.unit == "" for ch in cap.channels)  # no unit in the file: not volts
    assert any("further time column" in d for d in cap.provenance.decisions)


def test_tom2718_settings_block_in_the_first_columns():
    path = REAL_CAPTURES / "Tom2718--Phy-Lab-2" / "TEK0001.CSV"
    cap = load_capture(path)
    # SOURCE.md: settings block in columns 1-3 (Sample Interval 4e-06, Source CH2),
    # time in column 4, volts in column 5, 2,500 rows, 0.02 V steps.
    ref = pd.read_csv(path, header=None)
    assert cap.channel_names == ("CH2",) and cap.channel("CH2").unit == "V"
    assert cap.n_points == len(ref) == 2500
    assert cap.sample_interval == pytest.approx(4e-6)
    np.testing.assert_allclose(cap.time, ref[3].to_numpy(), rtol=0, atol=1e-12)
    np.testing.assert_array_equal(cap.channel("CH2").values, ref[4].to_numpy())
    assert cap.metadata["Sample Interval"].startswith("4.0")


def test_alikehribar_raw_codes_stay_counts():
    path = REAL_CAPTURES / "alikehribar--Rc-circuit" / "ch1.txt"
    cap = load_capture(path)
    # SOURCE.md: `time_s,raw_code,volts`, raw signed ADC codes 0 to 82, 3,040 rows.
    assert cap.channel_names == ("raw_code", "volts")
    assert cap.channel("raw_code").unit == "counts"      # whole numbers, no unit: never volts
    assert cap.channel("volts").unit == ""              # its name is not a unit the file states
    assert cap.channel("raw_code").values.max() == 82
    assert cap.n_points == len(pd.read_csv(path)) == 3040
    # the time column's own unit (the "_s" of its name): 0.4 us per sample as written
    assert cap.sample_interval == pytest.approx(0.4e-6)
    assert not any("taken as" in w for w in cap.warnings)


def test_therincourt_data_txt_integer_ms_and_counts():
    path = REAL_CAPTURES / "david-therincourt--microcontroleurs" / "data.txt"
    cap = load_capture(path)
    # SOURCE.md: no header, `1 ; 0`, time in integer ms with 2 or 3 ms steps, 12-bit counts.
    ref = pd.read_csv(path, sep=";", header=None)
    assert cap.n_points == len(ref) == 100
    assert cap.channel("ch1").unit == "counts"
    np.testing.assert_array_equal(cap.channel("ch1").values, ref[1].to_numpy())
    assert 2e-3 <= cap.sample_interval <= 3e-3          # milliseconds, not 2.1 s
    assert cap.time[-1] == pytest.approx(ref[0].iloc[-1] * 1e-3, abs=2e-3)
    assert any("milliseconds" in w for w in cap.warnings)  # a guess, so a warning every command shows
    # SOURCE.md: 49 of 100 rows clipped at 4095 (the 12-bit ADC's top code)
    assert any("4095, the top code of a 12-bit converter, for 49 samples" in w for w in cap.warnings)


@pytest.mark.parametrize("name, rows, first_count", [("data_220nF_100k.txt", 40, 1553),
                                                     ("data_4700nF_100k.txt", 100, None)])
def test_therincourt_two_header_rows_ms_and_counts(name, rows, first_count):
    path = REAL_CAPTURES / "david-therincourt--microcontroleurs" / name
    cap = load_capture(path)
    # SOURCE.md: `t;N` then `ms;`, semicolons with spaces, 16-bit counts.
    ref = pd.read_csv(path, sep=r"\s*;\s*", engine="python", skiprows=2, header=None)
    assert cap.channel_names == ("N",) and cap.channel("N").unit == "counts"
    assert cap.n_points == len(ref) == rows
    # whole milliseconds: within one printed unit of each stamp (a jittering
    # 3-4 ms stamp may be rebuilt as the uniform axis it rounds)
    np.testing.assert_allclose(cap.time, ref[0].to_numpy() * 1e-3, rtol=0, atol=1e-3)
    np.testing.assert_array_equal(cap.channel("N").values, ref[1].to_numpy())
    if first_count is not None:
        assert cap.channel("N").values[0] == first_count and cap.time[0] == pytest.approx(5e-3)


@pytest.mark.parametrize("name, channel, dt", [("PrimerOrdenp.csv", "CH2", 10e-6),
                                               ("SegundoOrden1p.csv", "CH2", 20e-6),
                                               ("SegundoOrden2p.csv", "CH1", 10e-6)])
def test_nickdpz_names_and_units_rows(name, channel, dt):
    path = REAL_CAPTURES / "nickdpz--Simulacion-de-filtros-en-mathlab" / name
    cap = load_capture(path)
    # SOURCE.md: `X,CH2,` / `Second,Volt,`, 600 rows, 3 significant digits.
    assert cap.channel_names == (channel,) and cap.channel(channel).unit == "V"
    assert cap.n_points == 600
    assert cap.sample_interval == pytest.approx(dt, rel=1e-3)
    assert np.all(np.diff(cap.time) > 0)


def test_nickdpz_repeated_stamps_name_the_first_repeated_line():
    path = REAL_CAPTURES / "nickdpz--Simulacion-de-filtros-en-mathlab" / "SegundoOrden1p.csv"
    cap = load_capture(path)
    printed = pd.read_csv(path, skiprows=[1]).iloc[:, 0].to_numpy()
    first_repeat_row = int(np.flatnonzero(np.diff(printed) <= 0)[0]) + 1
    line = first_repeat_row + 3  # two header rows, 1-based lines
    # SOURCE.md: 31 repeated time stamps after t = 10 ms (3-digit time).
    assert any(f"first repeat at line {line}" in w for w in cap.warnings)
