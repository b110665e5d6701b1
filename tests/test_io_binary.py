"""NumPy .npz and Parquet captures: round trips, foreign files, bad files; and
two-file input/output joins."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from fitkit.capture import Capture
from fitkit.errors import CaptureError
from fitkit.io import INPUT_KEY, OUTPUT_KEY, load_capture, save_npz, save_parquet

RNG = np.random.default_rng(5)
T = -1e-4 + np.arange(400) * 1e-6
VIN = (T >= 0).astype(float)
VOUT = VIN * (1 - np.exp(-np.clip(T, 0, None) / 30e-6)) + RNG.normal(0, 1e-3, T.size)


def make_capture() -> Capture:
    return Capture.from_arrays(T, {"Vin": VIN, "Vout": VOUT}, units={"Vin": "V", "Vout": "V"},
                               metadata={"board": "filter 7", "operator": "test"})


@pytest.mark.parametrize("save,suffix", [(save_npz, ".npz"), (save_parquet, ".parquet")])
def test_round_trip(tmp_path, save, suffix):
    cap = make_capture()
    path = save(cap, tmp_path / f"c{suffix}")
    back = load_capture(path)
    np.testing.assert_array_equal(back.time, cap.time)
    for ch in cap.channels:
        np.testing.assert_array_equal(back.channel(ch.name).values, ch.values)
        assert back.channel(ch.name).unit == ch.unit
    assert back.metadata == cap.metadata
    assert back.channel_names == cap.channel_names


def test_text_to_npz_to_parquet_keeps_everything(tmp_path):
    text = tmp_path / "c.csv"
    text.write_text("Time (ms),CH1 (mV)\n" + "".join(f"{1e3 * a:.6f},{1e3 * b:.6f}\n" for a, b in zip(T, VOUT)))
    cap = load_capture(text)
    again = load_capture(save_parquet(load_capture(save_npz(cap, tmp_path / "c.npz")), tmp_path / "c.parquet"))
    np.testing.assert_allclose(again.time, T, atol=1e-12)
    np.testing.assert_allclose(again.channel("CH1").values, VOUT, atol=1e-9)
    assert again.channel("CH1").source_unit == "mV"


def test_foreign_npz_and_parquet(tmp_path):
    np.savez(tmp_path / "plain.npz", t=T, response=VOUT)
    cap = load_capture(tmp_path / "plain.npz")
    # no unit stored: kept without one, never called volts (issue 14)
    assert cap.channel_names == ("response",) and cap.channel("response").unit == ""
    given = load_capture(tmp_path / "plain.npz", sample_interval="2u")
    assert any("time array 't' is not used" in w for w in given.warnings)
    pd.DataFrame({"time": T, "a": VIN, "b": VOUT}).to_parquet(tmp_path / "plain.parquet")
    cap = load_capture(tmp_path / "plain.parquet")
    assert cap.channel_names == ("a", "b")
    np.testing.assert_array_equal(cap.time, T)


def test_npz_without_time_needs_the_interval(tmp_path):
    np.savez(tmp_path / "no_t.npz", y=VOUT)
    with pytest.raises(CaptureError, match="--sample-interval"):
        load_capture(tmp_path / "no_t.npz")
    cap = load_capture(tmp_path / "no_t.npz", sample_interval="1u", time_origin="-100u")
    np.testing.assert_allclose(cap.time, T, atol=1e-15)


def test_bad_binary_files(tmp_path):
    (tmp_path / "junk.npz").write_bytes(b"PK\x03\x04 this is not a zip")
    (tmp_path / "junk.parquet").write_bytes(b"PAR1 nonsense")
    np.savez(tmp_path / "ragged.npz", t=T, y=VOUT[:-1])
    np.savez(tmp_path / "backwards.npz", t=T[::-1], y=VOUT)
    for name, match in [("junk.npz", "npz"), ("junk.parquet", "Parquet"),
                        ("ragged.npz", "different lengths"), ("backwards.npz", "time does not increase")]:
        with pytest.raises(CaptureError, match=match):
            load_capture(tmp_path / name)


def write_csv(path, t, name, v):
    path.write_text(f"Time (s),{name} (V)\n" + "".join(f"{a:.9e},{b:.6f}\n" for a, b in zip(t, v)))
    return path


def test_two_files_on_the_same_time_axis(tmp_path):
    a = write_csv(tmp_path / "in.csv", T, "CH1", VIN)
    b = write_csv(tmp_path / "out.csv", T, "CH1", VOUT)
    cap = load_capture(a, second_path=b)
    assert cap.channel_names == ("CH1 (input)", "CH1 (output)")
    assert cap.metadata[INPUT_KEY] == "CH1 (input)" and cap.metadata[OUTPUT_KEY] == "CH1 (output)"
    np.testing.assert_allclose(cap.channel(2).values, VOUT, atol=1e-6)
    assert "in.csv + " in cap.provenance.path


def test_two_files_on_offset_axes_are_interpolated(tmp_path):
    t_in = T + 0.5e-6  # input sampled half a sample later
    a = write_csv(tmp_path / "in.csv", t_in, "Vin", 2 * t_in / 1e-4)  # a ramp: linear interpolation is exact
    b = write_csv(tmp_path / "out.csv", T, "Vout", VOUT)
    cap = load_capture(a, second_path=b)
    assert cap.n_points == T.size - 1  # first output sample is before the input starts
    np.testing.assert_allclose(cap.channel("Vin").values, 2 * cap.time / 1e-4, atol=1e-6)
    assert any("interpolated" in d for d in cap.provenance.decisions)


def test_two_files_that_do_not_overlap(tmp_path):
    a = write_csv(tmp_path / "in.csv", T, "Vin", VIN)
    b = write_csv(tmp_path / "out.csv", T + 1.0, "Vout", VOUT)
    with pytest.raises(CaptureError, match="different times"):
        load_capture(a, second_path=b)
