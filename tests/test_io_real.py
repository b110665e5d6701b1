"""The two real measured captures in ../shared/reference/real-captures import correctly.

Facts checked come from that folder's SOURCE.md (column names, units, sample
interval) and from the files themselves (row counts counted by pandas.read_csv,
an independent reader).
"""

from __future__ import annotations


import numpy as np
import pandas as pd
import pytest

from fitkit.io import load_capture
from support.reference_paths import REAL_CAPTURES, needs_real_captures

REAL = REAL_CAPTURES
pytestmark = needs_real_captures


def test_rc_ladder_adc_capture():
    path = REAL / "rc-ladder-adc-step.csv"
    cap = load_capture(path)
    # SOURCE.md: columns Time,ADC,DAC in seconds and normalised units; 5,120 rows; 1 kHz sampling.
    assert cap.channel_names == ("ADC", "DAC")
    assert cap.n_points == 5120 == len(pd.read_csv(path))
    assert cap.sample_interval == pytest.approx(1e-3, rel=1e-9)
    assert cap.channel("ADC").unit == "" and cap.channel("DAC").unit == ""  # no unit in the file
    assert cap.provenance.data_start_line == 2
    # Values equal what pandas reads (independent reader).
    ref = pd.read_csv(path)
    np.testing.assert_array_equal(cap.channel("ADC").values, ref["ADC"].to_numpy())
    np.testing.assert_array_equal(cap.time, ref["Time"].to_numpy())
    # The DAC square wave is a drive signal, not a clipped trace; the only
    # warning is that the unitless time column (1 ms steps) was taken as seconds.
    assert len(cap.warnings) == 1 and "taken as seconds" in cap.warnings[0]


def test_rl_scope_capture_with_rounded_time_stamps():
    path = REAL / "rl-square-scope.csv"
    cap = load_capture(path)
    # SOURCE.md: `Time (s),Vout (V)` at 40 ns, vertical steps of 0.08 V.
    assert cap.channel_names == ("Vout",)
    assert cap.channel("Vout").unit == "V"
    # SOURCE.md says 1,515 rows; the file holds 1,516 data rows (pandas agrees),
    # i.e. 1,515 intervals of 40 ns = 60.6 us.
    assert cap.n_points == len(pd.read_csv(path)) == 1516
    assert cap.sample_interval == pytest.approx(40e-9, rel=1e-9)
    assert cap.duration == pytest.approx(60.6e-6, rel=1e-9)
    # Time stamps are printed with 3 significant digits and repeat; the reader
    # says so and rebuilds the uniform axis instead of refusing the file.
    assert any("3 significant digits" in w for w in cap.warnings)
    assert np.all(np.diff(cap.time) > 0)
    steps = np.unique(np.round(np.diff(np.unique(cap.channel("Vout").values)), 6))
    assert steps.min() == pytest.approx(0.08)


def test_rl_capture_time_column_agrees_with_the_printed_stamps():
    path = REAL / "rl-square-scope.csv"
    printed = pd.read_csv(path)["Time (s)"].to_numpy()
    cap = load_capture(path)
    # Within one unit of the third significant digit of every printed stamp.
    unit = 10.0 ** (np.floor(np.log10(np.where(printed > 0, printed, 1.0))) - 2)
    assert np.all(np.abs(cap.time - printed) <= unit)
