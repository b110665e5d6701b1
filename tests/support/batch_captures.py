"""Captures for the batch tests, written with numpy from closed-form step responses.

The two responses used (both checked below against scipy.signal.step, an
independent simulator):

* textbook first-order step response: y = A (1 - exp(-(t - t0)/tau)) for t >= t0;
* textbook two-real-pole step response (poles at -1/tau1, -1/tau2):
  y = A (1 - (tau1 exp(-t/tau1) - tau2 exp(-t/tau2)) / (tau1 - tau2)).

Noise is Gaussian with a fixed seed per file, so every run writes the same bytes.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd

N_SAMPLES = 1500
RECORD_S = 5e-3          # 5 ms record, the edge 1 ms in
EDGE_S = 1e-3
NOISE_V = 0.004
STEP_V = 1.0


def time_axis(n: int = N_SAMPLES) -> np.ndarray:
    return np.arange(n) * (RECORD_S / n) - EDGE_S


def first_order(t: np.ndarray, tau: float, step: float = STEP_V) -> np.ndarray:
    """Textbook first-order step response, edge at t = 0."""
    tp = np.clip(t, 0.0, None)
    return np.where(t > 0, step * (1.0 - np.exp(-tp / tau)), 0.0)


def two_real_pole(t: np.ndarray, tau1: float, tau2: float, step: float = STEP_V) -> np.ndarray:
    """Textbook two-real-pole (overdamped second-order) step response, edge at t = 0."""
    tp = np.clip(t, 0.0, None)
    shape = 1.0 - (tau1 * np.exp(-tp / tau1) - tau2 * np.exp(-tp / tau2)) / (tau1 - tau2)
    return np.where(t > 0, step * shape, 0.0)


def write_capture(path: Path, y: np.ndarray, seed: int, n: int = N_SAMPLES) -> Path:
    """Write time and output columns as CSV with seeded noise added to ``y``."""
    rng = np.random.default_rng(seed)
    t = time_axis(n)
    noisy = y + rng.normal(0.0, NOISE_V, t.size)
    path.parent.mkdir(parents=True, exist_ok=True)
    np.savetxt(path, np.column_stack([t, noisy]), delimiter=",", header="time,out", comments="", fmt="%.9g")
    return path


def write_good_first_order(path: Path, tau: float, seed: int) -> Path:
    return write_capture(path, first_order(time_axis(), tau), seed)


def write_good_two_pole(path: Path, tau1: float, tau2: float, seed: int) -> Path:
    return write_capture(path, two_real_pole(time_axis(), tau1, tau2), seed)


def write_flat(path: Path, seed: int) -> Path:
    """A trace with no step at all (the probe was not connected)."""
    return write_capture(path, np.full(N_SAMPLES, 0.5), seed)


def write_glitch(path: Path, seed: int) -> Path:
    """No step, only a two-sample spike of interference: the trace leaves its level
    and comes straight back, so the "segments" are far too short for any fit."""
    y = np.zeros(N_SAMPLES)
    y[N_SAMPLES // 2:N_SAMPLES // 2 + 2] = STEP_V
    return write_capture(path, y, seed)


def write_garbage(path: Path, seed: int) -> Path:
    """Binary bytes under a .csv name (a file copied from the wrong place)."""
    path.parent.mkdir(parents=True, exist_ok=True)
    path.write_bytes(np.random.default_rng(seed).bytes(3000))
    return path


def write_empty(path: Path) -> Path:
    path.parent.mkdir(parents=True, exist_ok=True)
    path.write_bytes(b"")
    return path


def line_folder(root: Path, n_good: int = 6) -> dict[str, list[Path]]:
    """A production-line folder: good boards (first-order, with a spread of tau
    around 100 us; one two-real-pole board), failing, unreadable and duplicate
    captures. Returns the files by the status each must get."""
    folder = root / "line"
    good = []
    for i in range(n_good):
        tau = 100e-6 * (1.0 + 0.04 * (i - n_good / 2) / n_good)
        good.append(write_good_first_order(folder / f"board_{i:03d}.csv", tau, seed=100 + i))
    good.append(write_good_two_pole(folder / "board_twopole.csv", 300e-6, 50e-6, seed=7))
    duplicate = folder / "board_copy.csv"
    duplicate.write_bytes(good[0].read_bytes())
    return {
        "fitted": good,
        "duplicate": [duplicate],
        "no-step": [write_flat(folder / "board_flat.csv", seed=3)],
        "fit-failed": [write_glitch(folder / "board_glitch.csv", seed=4)],
        "unreadable": [write_garbage(folder / "board_garbage.csv", seed=5),
                       write_empty(folder / "board_empty.csv")],
    }


def frame_without_timing(path: Path) -> pd.DataFrame:
    """A summary CSV without the columns that depend on when and how fast it ran."""
    frame = pd.read_csv(path)
    return frame.drop(columns=["elapsed_s", "resumed"])


# -- the generators themselves, against an independent simulator -------------------
