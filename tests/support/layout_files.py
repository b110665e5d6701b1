"""Capture files in each header layout of issue 2, written by the tests themselves, with their truth.

Each writer produces one layout in the style real bench exports use, in fitkit's own words,
and returns the truth (time axis in seconds, channel values in volts). The signal is a
first-order step response 1 - exp(-t/tau) (textbook formula, any circuits text).
"""

from __future__ import annotations

from pathlib import Path

import numpy as np

TAU = 20e-6
N = 200
DT = 1e-6
T0 = -50e-6


def truth(n=N, dt=DT, t0=T0):
    t = t0 + dt * np.arange(n)
    v = np.where(t >= 0, 1.0 - np.exp(-np.clip(t, 0, None) / TAU), 0.0)
    return t, v


def write_lines(path: Path, lines: list[str], newline: str = "\n") -> Path:
    path.write_bytes(newline.join(lines).encode() + newline.encode())
    return path


def write_metadata_block(tmp: Path, newline="\n") -> tuple[Path, dict]:
    """Layout 1: key,value and free-text lines, a blank line, then the header row."""
    t, v = truth()
    lines = ["Instrument,Bench recorder BR-1", "Operator,night shift",
             "Captured on a test jig for the filter board", "", "Time (s),CH1 (V),CH2 (mV)"]
    lines += [f"{a:.6e},{b:.6f},{1000 * (0.5 * b):.4f}" for a, b in zip(t, v)]
    return write_lines(tmp / "layout1.csv", lines, newline), {"t": t, "CH1": v, "CH2": 0.5 * v}


def write_commented_metadata(tmp: Path) -> tuple[Path, dict]:
    """Layout 2: '# key: value' lines (rate, count, trigger, range, offset), negative times."""
    t, v = truth()
    lines = ["# Recorder: bench logger", "# Sample rate: 1 MSa/s", f"# Sample count: {N}",
             "# Trigger: rising edge at 0 s", "# CH1 range: 2 V", "# CH1 offset: 0 V",
             "Time (us),CH1 (V)"]
    lines += [f"{1e6 * a:+.3f},{b:+.6e}" for a, b in zip(t, v)]
    return write_lines(tmp / "layout2.csv", lines), {"t": t, "CH1": v}


def write_units_row_with_increment(tmp: Path) -> tuple[Path, dict]:
    """Layout 3: names row and units row; units row carries start and increment; index column."""
    t, v = truth()
    lines = ["X,CH1,CH2,Start,Increment,", f"Sequence,Volt,Volt,{T0:.6e},{DT:.6e},"]
    lines += [f"{k},{b:.6e},{-b:.6e},," for k, b in enumerate(v)]
    return write_lines(tmp / "layout3.csv", lines), {"t": t, "CH1": v, "CH2": -v}


def write_names_then_units(tmp: Path) -> tuple[Path, dict]:
    """Layout 4: names row, units row in brackets, a blank line, data."""
    t, v = truth()
    lines = ["Time,Channel A,Channel B", "(ms),(V),(mV)", ""]
    lines += [f"{1e3 * a:.6f},{b:.6f},{1e3 * b:.3f}" for a, b in zip(t, v)]
    return write_lines(tmp / "layout4.csv", lines), {"t": t, "Channel A": v, "Channel B": v}


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
    return write_lines(tmp / "layout5.csv", lines, "\r\n"), {"t": t, "CH1": v}


def write_counts(tmp: Path) -> tuple[Path, dict]:
    """Layout 6: metadata block with volts per count, offset and sampling period; raw counts."""
    t, v = truth()
    scale, offset = 0.5e-3, -0.25
    counts = np.round((v - offset) / scale).astype(int)
    lines = ["Vertical scale (V/count),0.0005", "Vertical offset (V),-0.25",
             f"Sampling period (s),{DT:g}", f"Trigger point,{int(-T0 / DT)}", "", "CH1"]
    lines += [str(c) for c in counts]
    return write_lines(tmp / "layout6.csv", lines), {"t": t, "CH1": counts * scale + offset}


def write_no_header(tmp: Path) -> tuple[Path, dict]:
    """Layout 7: no header at all, two raw integer columns."""
    t, v = truth()
    a = np.round(v * 1000).astype(int)
    b = np.round(v * 500).astype(int)
    lines = [f"{x} {y}" for x, y in zip(a, b)]
    return write_lines(tmp / "layout7.txt", lines), {"t": DT * np.arange(N), "ch1": a * 2e-3, "ch2": b * 2e-3}


def write_wall_clock(tmp: Path) -> tuple[Path, dict]:
    """Layout 8: wall-clock date-time column; the true axis from the interval metadata."""
    t, v = truth(dt=0.01, t0=0.0)
    lines = ["Logger,bench data logger", "Sample interval,10 ms", "", "Date Time,Voltage (V)"]
    lines += [f"2024-03-01 12:00:{int(a):02d},{b:.6f}" for a, b in zip(t, v)]
    return write_lines(tmp / "layout8.csv", lines), {"t": t, "Voltage": v}


def check_truth(cap, want, *, time_tol=1e-12, value_tol=1e-5):
    np.testing.assert_allclose(cap.time, want["t"], rtol=0, atol=time_tol)
    for name, values in want.items():
        if name != "t":
            np.testing.assert_allclose(cap.channel(name).values, values, rtol=0, atol=value_tol)
    assert set(cap.channel_names) == {k for k in want if k != "t"}


ALL_WRITERS = [write_metadata_block, write_commented_metadata, write_units_row_with_increment,
               write_names_then_units, write_side_metadata, write_counts, write_wall_clock]
