"""Delimited-text details: delimiters, decimal commas, number formats, comments,
blank lines, trailing delimiters, units inside names, and options that override
every guess. Files are written by the tests; the expected values are the
numbers the tests wrote."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest

from fitkit.errors import CaptureError, OptionError
from fitkit.io import load_capture
from fitkit.io.layouts import split_name_unit

T = np.arange(40) * 2e-6
V = np.sin(2 * np.pi * T / 40e-6) + 0.5 * (T > 20e-6)


def write(tmp: Path, name: str, text: str) -> Path:
    p = tmp / name
    p.write_bytes(text.encode("utf-8"))
    return p


def rows(fmt, sep) -> str:
    return "".join(fmt(a, b) + "\n" for a, b in zip(T, V)).replace(",", sep) if sep != "," else \
        "".join(fmt(a, b) + "\n" for a, b in zip(T, V))


@pytest.mark.parametrize("sep,suffix", [(",", ".csv"), (";", ".csv"), ("\t", ".tsv"), ("   ", ".dat")])
def test_delimiters_are_guessed(tmp_path, sep, suffix):
    body = "".join(f"{a:.6e}{sep}{b:.6f}\n" for a, b in zip(T, V))
    p = write(tmp_path, "d" + suffix, f"Time{sep}Signal\n" + body)
    cap = load_capture(p)
    np.testing.assert_allclose(cap.time, T, atol=1e-12)
    np.testing.assert_allclose(cap.channel("Signal").values, V, atol=1e-6)


@pytest.mark.parametrize("sep", [";", "\t"])
def test_decimal_comma(tmp_path, sep):
    body = "".join(f"{a:.6e}{sep}{b:.6f}\n".replace(".", ",") for a, b in zip(T, V))
    p = write(tmp_path, "comma.csv", f"Zeit [s]{sep}U [V]\n" + body)
    cap = load_capture(p)
    assert any("decimal mark: comma" in d for d in cap.provenance.decisions)
    np.testing.assert_allclose(cap.time, T, atol=1e-12)
    np.testing.assert_allclose(cap.channel("U").values, V, atol=1e-6)


def test_explicit_signs_scientific_notation_crlf_trailing_delimiters(tmp_path):
    body = "".join(f"{a:+.6E},{b:+.6E},,\r\n" for a, b in zip(T, V))
    p = write(tmp_path, "signs.csv", "Time (s),CH2 [mV],,\r\n" + body)
    cap = load_capture(p)
    assert cap.channel_names == ("CH2",)
    np.testing.assert_allclose(cap.channel("CH2").values, V * 1e-3, rtol=1e-6)


def test_comment_and_blank_lines_inside_the_data(tmp_path):
    lines = ["# exported by a test", "Time,V"]
    for k, (a, b) in enumerate(zip(T, V)):
        lines.append(f"{a},{b}")
        if k == 10:
            lines.append("")
        if k == 20:
            lines.append("# marker placed by the operator")
    p = write(tmp_path, "c.csv", "\n".join(lines) + "\n")
    cap = load_capture(p)
    assert cap.n_points == T.size and not cap.warnings
    np.testing.assert_allclose(cap.channel("V").values, V)


@pytest.mark.parametrize("unit,factor", [("s", 1.0), ("ms", 1e-3), ("us", 1e-6), ("µs", 1e-6), ("ns", 1e-9)])
def test_time_units_scaled_to_seconds(tmp_path, unit, factor):
    body = "".join(f"{a / factor:.9g},{b}\n" for a, b in zip(T, V))
    p = write(tmp_path, "u.csv", f"t/{unit},Vout (V)\n" + body)
    np.testing.assert_allclose(load_capture(p).time, T, rtol=1e-8, atol=1e-15)


@pytest.mark.parametrize("text,name,unit", [("Time (s)", "Time", "s"), ("CH2 [mV]", "CH2", "mV"),
                                            ("t/us", "t", "us"), ("Vout", "Vout", ""),
                                            ("Vout (V)", "Vout", "V"), ("I/O bus", "I/O bus", "")])
def test_units_inside_names(text, name, unit):
    assert split_name_unit(text) == (name, unit)


def test_options_override_every_guess(tmp_path):
    # Two junk lines, then headerless semicolon data whose first column is NOT time.
    body = "".join(f"{10 - k};{b:.6f}\n" for k, b in enumerate(V))
    p = write(tmp_path, "o.txt", "junk line one\njunk line two\n" + body)
    cap = load_capture(p, skip_rows=2, header_rows=0, delimiter=";", decimal=".", time_column="none",
                       sample_interval="2u", time_origin="-10u", value_unit="mV")
    np.testing.assert_allclose(cap.time, T - 10e-6, atol=1e-15)
    assert cap.channel_names == ("ch1", "ch2")
    np.testing.assert_allclose(cap.channel("ch2").values, V * 1e-3, atol=1e-9)
    assert cap.provenance.data_start_line == 3


def test_time_column_by_name_and_unit_override(tmp_path):
    body = "".join(f"{b:.6f},{a * 1e3:.6f}\n" for a, b in zip(T, V))
    p = write(tmp_path, "swap.csv", "signal,clock\n" + body)
    cap = load_capture(p, time_column="clock", time_unit="ms")
    np.testing.assert_allclose(cap.time, T, atol=1e-12)
    assert cap.channel_names == ("signal",)


def test_channel_selection_by_name_and_position(tmp_path):
    body = "".join(f"{a},{b},{2 * b},{3 * b}\n" for a, b in zip(T, V))
    p = write(tmp_path, "sel.csv", "time,a,b,c\n" + body)
    cap = load_capture(p, channels=["c", 1])
    assert cap.channel_names == ("c", "a")
    with pytest.raises(CaptureError, match="channels found: a, b, c"):
        load_capture(p, channels=["d"])


def test_bad_option_values_are_option_errors(tmp_path):
    p = write(tmp_path, "x.csv", "t,v\n" + "".join(f"{a},{b}\n" for a, b in zip(T, V)))
    with pytest.raises(OptionError, match="--sample-interval"):
        load_capture(p, sample_interval="fast")
    with pytest.raises(OptionError):
        load_capture(p, decimal=":")
    with pytest.raises(CaptureError, match="no column"):
        load_capture(p, time_column="clock")


def test_latin1_and_utf8_bom_files(tmp_path):
    text = "Zeit (µs);Spannung (V)\n" + "".join(f"{a * 1e6:.3f};{b:.6f}\n" for a, b in zip(T, V))
    p1 = tmp_path / "latin1.csv"
    p1.write_bytes(text.encode("latin-1"))
    p2 = tmp_path / "bom.csv"
    p2.write_bytes(b"\xef\xbb\xbf" + text.encode("utf-8"))
    for p in (p1, p2):
        cap = load_capture(p)
        np.testing.assert_allclose(cap.time, T, atol=1e-12)
        assert cap.channel_names == ("Spannung",)


def test_utf16_file(tmp_path):
    text = "Time (s)\tCH1 (V)\r\n" + "".join(f"{a:.6e}\t{b:.6f}\r\n" for a, b in zip(T, V))
    p = tmp_path / "wide.txt"
    p.write_bytes(text.encode("utf-16"))
    cap = load_capture(p)
    np.testing.assert_allclose(cap.channel("CH1").values, V, atol=1e-6)


FIXTURES = Path(__file__).parent / "fixtures" / "captures"


def test_fixture_semicolon_decimal_comma_export():
    cap = load_capture(FIXTURES / "semicolon_decimal_comma.csv")
    assert cap.channel_names == ("Eingang", "Ausgang")
    assert cap.channel("Ausgang").source_unit == "mV"
    assert cap.sample_interval == pytest.approx(5e-6)
    assert cap.metadata["Gerät"] == "Labormessplatz 3"
    assert cap.time[0] == pytest.approx(-20e-6)


def test_fixture_whitespace_two_row_header():
    cap = load_capture(FIXTURES / "whitespace_names_units.dat")
    assert cap.channel_names == ("drive", "response")
    assert cap.channel("response").unit == "V"
    assert cap.n_points == 24 and cap.sample_interval == pytest.approx(1e-3)


def test_fixture_side_metadata_single_channel():
    cap = load_capture(FIXTURES / "side_metadata_channel2.csv")
    assert cap.channel_names == ("CH2",)
    assert cap.sample_interval == pytest.approx(2e-7)
    assert cap.channel("CH2").unit == "V"       # from its settings' "Value unit"
    assert cap.metadata["Points"].startswith("2.0")


@pytest.mark.parametrize("meta,interval", [
    # SI prefixes (BIPM SI Brochure, 9th ed., table 7): M = 1e6, k = 1e3, u = 1e-6, m = 1e-3.
    ({"Sample rate": "2 MSa/s"}, 0.5e-6), ({"Sampling frequency": "10 kHz"}, 1e-4),
    ({"Sample interval": "1.000000e-06 s"}, 1e-6), ({"Sample interval (us)": "4"}, 4e-6),
    ({"Increment": "2,5e-6"}, 2.5e-6), ({"dt": "10 ms"}, 1e-2), ({"Operator": "A. N. Other"}, None),
])
def test_sample_interval_from_metadata(meta, interval):
    from fitkit.io.metadata import sample_interval
    found = sample_interval(meta)
    if interval is None:
        assert found is None
    else:
        assert found[0] == pytest.approx(interval, rel=1e-12)


def test_metadata_line_forms():
    from fitkit.io.metadata import parse_metadata_lines
    meta = parse_metadata_lines(["# Trigger: rising edge at 0 s", "Date,2024-03-01 12:00:00",
                                 "Probe = 10x", "free words here", "Record Length,2500,Points"], ",")
    assert meta == {"Trigger": "rising edge at 0 s", "Date": "2024-03-01 12:00:00", "Probe": "10x",
                    "note 1": "free words here", "Record Length": "2500 Points"}


def test_sample_interval_option_with_a_time_column(tmp_path):
    p = write(tmp_path, "tc.csv", "t,v\n" + "".join(f"{a},{b}\n" for a, b in zip(T, V)))
    cap = load_capture(p, sample_interval="1u")
    np.testing.assert_allclose(cap.time, T)  # the time column wins ...
    assert any("--sample-interval ignored" in w for w in cap.warnings)  # ... and the user is told
    cap = load_capture(p, sample_interval="1u", time_column="none")
    np.testing.assert_allclose(cap.time, np.arange(T.size) * 1e-6)
    assert cap.channel_names == ("t", "v")
    with pytest.raises(OptionError, match="positive"):
        load_capture(p, sample_interval="-1u")


def test_whitespace_file_with_spaces_inside_names(tmp_path):
    body = "".join(f"  {a:.6e}   {b:+.6f}\n" for a, b in zip(T, V))
    p = write(tmp_path, "w.dat", "  Time (s)       Output (mV)\n" + body)
    cap = load_capture(p)
    assert cap.channel_names == ("Output",) and cap.channel("Output").source_unit == "mV"
    np.testing.assert_allclose(cap.channel("Output").values, V * 1e-3, atol=1e-9)
