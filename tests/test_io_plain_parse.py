"""numpy's reader for plain numeric blocks (fitkit.io.bulk.parse_plain_block) gives
exactly the float64 values of pandas.read_csv (an independent reader) and of
Python's float() (correctly rounded decimal conversion), and declines every
block it cannot read the way pandas would, so the caller falls back to pandas."""

from __future__ import annotations

import io
import zlib

import numpy as np
import pandas as pd
import pytest

from fitkit.io import bulk, load_capture


def _values(rng, n):
    """Values over many decades, signs and printed precisions."""
    return rng.normal(size=(n, 3)) * 10.0 ** rng.integers(-12, 12, size=(n, 3))


FORMATS = {
    "shortest repr": repr,
    "7 significant, exponent": lambda v: f"{v:.6e}",
    "9 significant": lambda v: f"{v:.9g}",
    "17 significant": lambda v: f"{v:.17g}",
    "fixed 6 decimals, plus sign": lambda v: f"{v:+.6f}",
}


def _write(path, header_lines, rows, delimiter, newline):
    text = newline.join(header_lines + [delimiter.join(r) for r in rows]) + newline
    path.write_bytes(text.encode("utf-8"))
    return len(newline.join(header_lines).encode("utf-8")) + (len(newline) if header_lines else 0)


@pytest.mark.parametrize("fmt", list(FORMATS))
@pytest.mark.parametrize("delimiter", [",", ";", "\t"])
@pytest.mark.parametrize("newline", ["\n", "\r\n", "\r"])
def test_plain_block_equals_pandas_and_float(tmp_path, fmt, delimiter, newline):
    rng = np.random.default_rng(zlib.crc32(f"{fmt}|{delimiter}|{newline}".encode()))
    values = _values(rng, 400)
    rows = [[FORMATS[fmt](float(v)) for v in row] for row in values]
    header = ["# exported by a bench instrument", "", "time" + delimiter + "a" + delimiter + "b"]
    path = tmp_path / "plain.csv"
    offset = _write(path, header, rows, delimiter, newline)
    got = bulk.parse_plain_block(str(path), encoding="utf-8", offset=offset, n_fields=3, columns=[0, 1, 2],
                                 delimiter=delimiter, decimal=".", comment=None)
    assert got is not None
    # reference 1: Python's float() of each printed cell (correctly rounded, IEEE 754)
    exact = np.array([[float(c) for c in row] for row in rows])
    # reference 2: pandas' C parser on the same bytes
    ref = pd.read_csv(io.BytesIO(path.read_bytes()[offset:]), header=None, sep=delimiter).to_numpy(float)
    for j in range(3):
        np.testing.assert_array_equal(got[j], exact[:, j])
        np.testing.assert_array_equal(got[j], ref[:, j])


@pytest.mark.parametrize("bad_row, why", [
    ("1.0,,3.0", "an empty cell"),
    ('1.0,"2.0",3.0', "a quoted cell"),
    ("1.0,2.0", "a short row"),
    ("1.0,2.0,3.0,4.0", "a long row"),
    ("1.0,n/a,3.0", "a text cell"),
    ("1.0,2.0,3.0 # note", "a comment"),
    ("   ", "a line of spaces (pandas skips it)"),
])
def test_not_plain_blocks_are_declined(tmp_path, bad_row, why):
    rows = ["0.0,1.0,2.0", "1.0,2.0,3.0", bad_row, "2.0,3.0,4.0"]
    path = tmp_path / "odd.csv"
    path.write_text("t,a,b\n" + "\n".join(rows) + "\n")
    got = bulk.parse_plain_block(str(path), encoding="utf-8", offset=6, n_fields=3, columns=[0, 1, 2],
                                 delimiter=",", decimal=".", comment=None)
    assert got is None, why


@pytest.mark.parametrize("options", [
    dict(delimiter=" ", decimal="."), dict(delimiter=";", decimal=","),
    dict(delimiter=",", decimal=".", comment="#"), dict(delimiter=",", decimal=".", encoding="utf-16"),
])
def test_options_numpy_does_not_share_are_declined(tmp_path, options):
    path = tmp_path / "x.csv"
    path.write_text("t,a\n1,2\n3,4\n")
    kwargs = dict(encoding="utf-8", offset=4, n_fields=2, columns=[0, 1], comment=None)
    kwargs.update(options)
    assert bulk.parse_plain_block(str(path), **kwargs) is None


def test_offset_not_at_a_line_start_is_declined(tmp_path):
    path = tmp_path / "x.csv"
    path.write_bytes(b"t,a\r\n1,2\r\n3,4\r\n")
    common = dict(encoding="utf-8", n_fields=2, columns=[0, 1], delimiter=",", decimal=".", comment=None)
    assert bulk.parse_plain_block(str(path), offset=4, **common) is None  # between CR and LF
    assert bulk.parse_plain_block(str(path), offset=2, **common) is None  # inside the header
    got = bulk.parse_plain_block(str(path), offset=5, **common)
    np.testing.assert_array_equal(got[0], [1.0, 3.0])


def _capture_arrays(path):
    cap = load_capture(path)
    return [cap.time] + [c.values for c in cap.channels], cap.warnings, cap.provenance.decisions


@pytest.mark.parametrize("text", [
    "Time (s),A (V),B (mV)\n" + "".join(f"{k * 1e-6:.6e},{k % 7 - 3.5:.4f},{k % 5:.3f}\n" for k in range(3000)),
    "x-axis,1\nsecond,Volt\n" + "".join(f"{k * 4e-8 - 1e-5:.5e},{(k % 50) / 25 - 1:.3f}\n" for k in range(2000)),
    "t;v\n" + "".join(f"{3 * k};{k * 0.25 - 3}\n" for k in range(500)),  # integer cells
    "t,v\n" + "".join(f"{3 * k},{'' if k == 100 else k * 0.5}\n" for k in range(500)),  # one empty cell
    "t,v\n" + "".join(f"{3 * k},{k * 0.5}\n" for k in range(500)) + "\n\n",  # blank lines at the end
])
def test_capture_is_the_same_with_either_reader(tmp_path, monkeypatch, text):
    path = tmp_path / "c.csv"
    path.write_text(text)
    monkeypatch.setattr(bulk, "_pandas_loaded", lambda: False)  # as in a fresh `fitkit fit`
    plain = _capture_arrays(path)
    monkeypatch.setattr(bulk, "PLAIN_PARTS", 0)  # forces pandas' reader
    ref = _capture_arrays(path)
    assert plain[1:] == ref[1:]
    assert len(plain[0]) == len(ref[0])
    for a, b in zip(plain[0], ref[0]):
        np.testing.assert_array_equal(a, b)


def test_large_block_goes_to_pandas(tmp_path, monkeypatch):
    """Above PLAIN_PARTS parts, pandas' threaded reader is used (numpy's is single-threaded)."""
    path = tmp_path / "big.csv"
    path.write_text("t,v\n" + "".join(f"{3 * k},{k * 0.5}\n" for k in range(3000)))
    calls = []
    monkeypatch.setattr(bulk, "PART_BYTES", 1000)
    monkeypatch.setattr(bulk, "parse_plain_block", lambda *a, **k: calls.append(1))
    cap = load_capture(path)
    assert calls == [] and cap.n_points == 3000
    np.testing.assert_array_equal(cap.channels[0].values, np.arange(3000) * 0.5)


@pytest.mark.parametrize("text", [
    "Time (s),A (V),B (mV)\n" + "".join(f"{k * 1e-6:.6e},{k % 7 - 3.5:.4f},{k % 5:.3f}\n" for k in range(3000)),
    "x-axis,1\n\nsecond,Volt\n" + "".join(f"{k * 4e-8 - 1e-5:.5e},{(k % 50) / 25 - 1:.3f}\n" for k in range(2000)),
    "t,v\r\n" + "".join(f"{3 * k},{'' if k == 100 else k * 0.5}\r\n" for k in range(500)),  # CR LF, one empty cell
])
def test_reading_by_path_equals_reading_in_slices(tmp_path, monkeypatch, text):
    """pandas on the path itself (fast) and the sliced reader (exact error lines) agree value for value."""
    path = tmp_path / "c.csv"
    path.write_bytes(text.encode())
    monkeypatch.setattr(bulk, "PLAIN_PARTS", 0)  # not numpy's reader
    by_path = _capture_arrays(path)
    monkeypatch.setattr(bulk, "_read_whole_by_path", lambda *a, **k: None)
    sliced = _capture_arrays(path)
    assert by_path[1:] == sliced[1:]
    for a, b in zip(by_path[0], sliced[0]):
        np.testing.assert_array_equal(a, b)


def test_reading_by_path_is_declined_when_the_first_row_does_not_match(tmp_path):
    # an offset that lands on the header instead of the first data line: the
    # check against the first line parsed on its own refuses the result
    path = tmp_path / "c.csv"
    path.write_text("t,v\n" + "".join(f"{3 * k},{k * 0.5}\n" for k in range(50)))
    kwargs = bulk.read_options(2, [0, 1], ",", ".", None)
    assert bulk._read_whole_by_path(str(path), encoding="utf-8", offset=0, columns=[0, 1], kwargs=kwargs,
                                    delimiter=",", decimal=".") is None
    got = bulk._read_whole_by_path(str(path), encoding="utf-8", offset=4, columns=[0, 1], kwargs=kwargs,
                                   delimiter=",", decimal=".")
    np.testing.assert_array_equal(got[1], np.arange(50) * 0.5)
