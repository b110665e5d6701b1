"""The bulk numeric parse: files cut into parts parsed on threads give exactly
what one serial parse gives (checked against pandas.read_csv, an independent
reader), and errors in later parts name the right file line."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from fitkit.errors import CaptureError
from fitkit.io import bulk, load_capture


@pytest.fixture
def small_parts(monkeypatch):
    monkeypatch.setattr(bulk, "PART_BYTES", 2000)
    monkeypatch.setattr(bulk, "_cpu_count", lambda: 2)


def write(tmp_path, rows=3000, mutate=None):
    rng = np.random.default_rng(11)
    lines = ["# a comment line", "Time (s),A (V),B (mV)"]
    lines += [f"{k * 1e-6:.6e},{x:.6f},{y:.3f}" for k, (x, y) in enumerate(rng.normal(size=(rows, 2)))]
    if mutate:
        mutate(lines)
    p = tmp_path / "big.csv"
    p.write_text("\n".join(lines) + "\n")
    return p


def test_parts_equal_one_pandas_read(tmp_path, small_parts):
    p = write(tmp_path)
    cap = load_capture(p)
    ref = pd.read_csv(p, skiprows=1)
    assert cap.n_points == len(ref) == 3000
    np.testing.assert_array_equal(cap.time, ref.iloc[:, 0].to_numpy())
    np.testing.assert_array_equal(cap.channel("A").values, ref.iloc[:, 1].to_numpy())
    np.testing.assert_allclose(cap.channel("B").values, ref.iloc[:, 2].to_numpy() * 1e-3, rtol=1e-15)


def test_cuts_fall_on_line_starts(tmp_path):
    p = write(tmp_path)
    data = p.read_bytes()
    start = data.index(b"\n", data.index(b"Time")) + 1
    cuts = bulk._cuts(str(p), start, len(data), 7)
    assert cuts[0] == start and cuts[-1] == len(data) and cuts == sorted(cuts) and len(cuts) == 8
    assert all(data[c - 1:c] == b"\n" for c in cuts[1:-1])


def test_error_in_a_later_part_names_its_file_line(tmp_path, small_parts):
    def extra_field(lines):
        lines[2501] += ",7"  # file line 2502

    with pytest.raises(CaptureError, match="more fields") as err:
        load_capture(write(tmp_path, mutate=extra_field))
    assert err.value.line == 2502


def test_bad_cell_in_a_later_part_names_its_file_line(tmp_path, small_parts):
    def bad_cells(lines):
        for k in range(2400, 2450):
            lines[k] = lines[k].rsplit(",", 1)[0] + ",n/a?"

    with pytest.raises(CaptureError, match="50 of 3000") as err:
        load_capture(write(tmp_path, mutate=bad_cells))
    assert err.value.line == 2401


def test_import_benchmark_script_runs_and_reports(tmp_path):
    """A smoke run of benchmarks/bench_import.py on a small file (not a timing test)."""
    import importlib.util
    import json
    from pathlib import Path

    script = Path(__file__).resolve().parents[1] / "benchmarks" / "bench_import.py"
    spec = importlib.util.spec_from_file_location("bench_import", script)
    bench = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(bench)
    bench.main(["--rows", "3000", "--repeats", "1", "--out", str(tmp_path)])
    result = json.loads((tmp_path / "import.json").read_text())
    assert result["rows_read"] == {"fitkit": 3000, "pandas": 3000}
    assert result["arrays_bytes"] == 3000 * 3 * 8
    assert result["fitkit_seconds"] > 0 and result["pandas_read_csv_seconds"] > 0
    assert "| time |" in (tmp_path / "import.md").read_text()
