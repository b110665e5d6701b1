"""Hypothesis-made captures for each way a real capture's axes go wrong
(issue 14 items 4 and 5): shuffled channel order, raw ADC counts, date-and-time
text as the time column, milliseconds written without a unit, a time column
that contradicts the header's sample interval, and repeated rounded stamps.

The truth is what the writer put in the file: the reader must give it back
(time in seconds from the writer's own arithmetic, values exactly) with no
options, or warn where it had to guess. Derandomised: the same examples on
every run.
"""

from __future__ import annotations

import datetime as dt
import tempfile
from pathlib import Path

import numpy as np
import pytest
from hypothesis import HealthCheck, assume, given, settings
from hypothesis import strategies as st

from fitkit.errors import CaptureError
from fitkit.io import load_capture

SETTINGS = dict(deadline=None, derandomize=True, max_examples=25,
                suppress_health_check=[HealthCheck.too_slow, HealthCheck.function_scoped_fixture])


def _write(lines: list[str], newline: str = "\n", name: str = "c.csv") -> Path:
    folder = Path(tempfile.mkdtemp(prefix="fitkit_axes_"))
    path = folder / name
    path.write_bytes((newline.join(lines) + newline).encode())
    return path


def _response(n: int, seed: int) -> np.ndarray:
    """A first-order step response 1 - exp(-k/20) (textbook formula) with a little noise."""
    k = np.arange(n)
    rng = np.random.default_rng(seed)
    return np.where(k >= n // 4, 1.0 - np.exp(-(k - n // 4) / 20.0), 0.0) + 0.001 * rng.standard_normal(n)


@settings(**SETTINGS)
@given(order=st.permutations(["Time (s)", "CH1 (V)", "CH2 (V)", "MATH (V)"]),
       delim=st.sampled_from([",", ";", "\t"]), newline=st.sampled_from(["\n", "\r\n"]),
       seed=st.integers(0, 1000))
def test_shuffled_channel_order_is_read_by_name(order, delim, newline, seed):
    n = 80
    cols = {"Time (s)": 1e-6 * np.arange(n) - 20e-6, "CH1 (V)": _response(n, seed),
            "CH2 (V)": 2.0 * _response(n, seed + 1), "MATH (V)": -_response(n, seed + 2)}
    lines = [delim.join(order)] + [delim.join(f"{cols[c][i]:.9g}" for c in order) for i in range(n)]
    cap = load_capture(_write(lines, newline))
    want = [c.split(" ")[0] for c in order if not c.startswith("Time")]
    assert list(cap.channel_names) == want  # file order kept, time column found by its name wherever it is
    np.testing.assert_allclose(cap.time, cols["Time (s)"], rtol=0, atol=1e-15)
    for c in order:
        if not c.startswith("Time"):
            np.testing.assert_allclose(cap.channel(c.split(" ")[0]).values, cols[c], rtol=1e-8)
            assert cap.channel(c.split(" ")[0]).unit == "V"


@settings(**SETTINGS)
@given(bits=st.sampled_from([8, 10, 12, 16]), header=st.booleans(), seed=st.integers(0, 1000))
def test_raw_counts_stay_counts_until_a_scale_is_given(bits, header, seed):
    n = 60
    codes = np.round(_response(n, seed) * (2 ** bits - 1)).clip(0, 2 ** bits - 1).astype(int)
    lines = (["time,adc"] if header else []) + [f"{1e-4 * i:.6g},{c}" for i, c in enumerate(codes)]
    path = _write(lines)
    cap = load_capture(path)
    ch = cap.channels[0]
    assert ch.unit == "counts"                      # never "V" (no "1.24 kV" for code 1241)
    np.testing.assert_array_equal(ch.values, codes)
    scaled = load_capture(path, vertical_scale=0.001)
    assert scaled.channels[0].unit == "V"
    np.testing.assert_allclose(scaled.channels[0].values, codes * 0.001)


_STAMP_FORMATS = {
    "iso": lambda t: t.strftime("%Y-%m-%d %H:%M:%S.%f")[:-3],
    "iso-T": lambda t: t.strftime("%Y-%m-%dT%H:%M:%S.%f")[:-3],
    "dmy": lambda t: t.strftime("%d/%m/%Y %H:%M:%S.%f")[:-3],
    "clock": lambda t: t.strftime("%H:%M:%S.%f")[:-3],
}


@settings(**SETTINGS)
@given(fmt=st.sampled_from(sorted(_STAMP_FORMATS)), step_ms=st.integers(1, 2000),
       start=st.datetimes(min_value=dt.datetime(2020, 1, 1), max_value=dt.datetime(2030, 12, 31)),
       seed=st.integers(0, 1000))
def test_date_and_time_text_is_time_from_the_first_sample(fmt, step_ms, start, seed):
    n = 50
    start = start.replace(microsecond=0)
    stamps = [start + dt.timedelta(milliseconds=step_ms * i) for i in range(n)]
    v = _response(n, seed)
    lines = ["Date Time,Level (V)"] + [f"{_STAMP_FORMATS[fmt](s)},{x:.6f}" for s, x in zip(stamps, v)]
    cap = load_capture(_write(lines))
    # seconds from the first stamp (a month or a day is never read as seconds),
    # across midnight too
    np.testing.assert_allclose(cap.time, 1e-3 * step_ms * np.arange(n), rtol=0, atol=1e-6)
    np.testing.assert_allclose(cap.channel("Level").values, np.round(v, 6))


@settings(**SETTINGS)
@given(step_ms=st.integers(1, 50), start_ms=st.integers(0, 10_000), seed=st.integers(0, 1000),
       delim=st.sampled_from([",", " ; ", "\t"]))
def test_whole_milliseconds_without_a_unit_are_read_as_ms_and_warned(step_ms, start_ms, seed, delim):
    assume(not (step_ms == 1 and start_ms <= 1))   # 0, 1, 2, ... may count samples: refused, below
    n = 60
    stamps = start_ms + step_ms * np.arange(n)
    v = _response(n, seed)
    cap = load_capture(_write([f"{s}{delim}{x:.5f}" for s, x in zip(stamps, v)]))
    np.testing.assert_allclose(cap.time, 1e-3 * stamps, rtol=0, atol=1e-12)
    assert any("milliseconds" in w for w in cap.warnings)


@settings(**SETTINGS)
@given(interval=st.sampled_from([1e-6, 4e-6, 2e-5, 1e-3]), wrong=st.sampled_from([0.4, 2.5, 10.0]),
       seed=st.integers(0, 1000))
def test_header_interval_wins_over_a_contradicting_time_column(interval, wrong, seed):
    n = 60
    v = _response(n, seed)
    t = -5 * interval * wrong + interval * wrong * np.arange(n)
    lines = [f"Sample Interval,{interval:.6e}", "Time (s),CH1 (V)"] + [f"{a:.9e},{b:.6f}" for a, b in zip(t, v)]
    cap = load_capture(_write(lines))
    np.testing.assert_allclose(np.diff(cap.time), interval, rtol=1e-9)
    assert cap.time[0] == float(f"{t[0]:.9e}")  # the first stamp as printed
    assert any("header's interval is used" in w for w in cap.warnings)


@settings(**SETTINGS)
@given(interval=st.sampled_from([1e-6, 4e-6, 1e-4]), unit=st.sampled_from(["ms", "us"]),
       seed=st.integers(0, 1000))
def test_unitless_time_in_another_unit_matched_to_the_header_interval(interval, unit, seed):
    n = 60
    factor = {"ms": 1e-3, "us": 1e-6}[unit]
    v = _response(n, seed)
    written = interval / factor * np.arange(n)
    lines = [f"Sample Interval,{interval:.6e}", "t,CH1"] + [f"{a:.9g},{b:.6f}" for a, b in zip(written, v)]
    cap = load_capture(_write(lines))
    np.testing.assert_allclose(cap.time, interval * np.arange(n), rtol=1e-9, atol=1e-18)
    assert any(f"time unit: not written in the file; {unit}" in d for d in cap.provenance.decisions)


@settings(**SETTINGS)
@given(digits=st.integers(3, 4), seed=st.integers(0, 1000))
def test_repeated_rounded_stamps_name_the_first_repeated_line(digits, seed):
    n = 600
    t = 1e-3 + 2e-5 * np.arange(n)  # 20 us steps printed with 3 or 4 significant digits
    v = _response(n, seed)
    printed = [f"{a:.{digits - 1}e}" for a in t]
    lines = ["X,CH2", "Second,Volt"] + [f"{a},{b:.4f}" for a, b in zip(printed, v)]
    cap = load_capture(_write(lines))
    values = np.array([float(p) for p in printed])
    repeats = np.flatnonzero(np.diff(values) <= 0)
    if repeats.size:
        line = int(repeats[0]) + 1 + 3
        assert any(f"first repeat at line {line}" in w for w in cap.warnings)
    assert np.all(np.abs(cap.time - t) <= 10.0 ** (np.floor(np.log10(t)) - digits + 1))


@settings(**SETTINGS)
@given(bits=st.sampled_from([10, 12, 16]), clipped=st.integers(5, 40), seed=st.integers(0, 1000))
def test_counts_at_an_adc_end_code_are_called_saturated(bits, clipped, seed):
    n = 100
    top = 2 ** bits - 1
    codes = np.round(np.linspace(0.2, 1.0, n) * top).astype(int)
    codes[n - clipped:] = top  # a smooth rise into the converter's top code
    cap = load_capture(_write([f"{i};{c}" for i, c in enumerate(codes)]), sample_interval=1e-3)
    assert any(f"the top code of a {bits}-bit converter, for {clipped + (codes[:n - clipped] == top).sum()} samples"
               in w for w in cap.warnings)


@pytest.mark.parametrize("first", [0, 1])
def test_a_column_that_counts_samples_is_refused_without_an_interval_and_read_with_one(first):
    """0, 1, 2, ... (a scope's sample index, or a 1 ms counter: the file cannot say) is refused
    naming the fix; with --sample-interval it is sample number x interval; with --time-unit ms,
    milliseconds."""
    n = 60
    v = _response(n, 3)
    path = _write(["X,CH1"] + [f"{first + i},{x:.5f}" for i, x in enumerate(v)])
    with pytest.raises(CaptureError, match="counts 0, 1, 2") as err:
        load_capture(path)
    assert "--sample-interval" in err.value.hint
    cap = load_capture(path, sample_interval=2e-6)
    np.testing.assert_allclose(cap.time, 2e-6 * (first + np.arange(n)), rtol=1e-12)
    assert not any("ignored" in w for w in cap.warnings)
    np.testing.assert_allclose(load_capture(path, time_unit="ms").time, 1e-3 * (first + np.arange(n)))
