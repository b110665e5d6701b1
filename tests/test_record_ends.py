"""A record that begins or ends inside a transition (fitkit.conditioning.record_ends).

A scope record of a square wave starts and stops wherever the trigger puts
it: its first samples can still be settling from an edge before the record,
its last samples can hold the start of an edge it cuts off. Before the rule,
both kinds of half record of a real overdamped RLC were refused as not
described by any form, or crashed. The simulated responses are
scipy.signal.lsim of 1 / ((1 + s tau1)(1 + s tau2)), the textbook two-real-pole
low-pass, an outside reference; the real ones are AldousFinn--ECE2260 scope_6
and scope_8 of ../shared/reference/real-captures (ranges from its SOURCE.md,
tests/support/real_corpus.py).
"""

from __future__ import annotations

import numpy as np
import pytest
import scipy.signal

from fitkit.capture import Capture
from fitkit.conditioning import analyse_steps
from fitkit.conditioning.edges import Edge
from fitkit.conditioning.record_ends import cut_off_onset, settled_start
from fitkit.conditioning.segments import window_bounds
from fitkit.fitting import fit_capture
from support.real_corpus import CASES, run_fitkit, quantity
from support.reference_paths import REAL_CAPTURES

TAU1, TAU2, DT, HALF, STEP, SIGMA = 300e-6, 30e-6, 4e-6, 3.6e-3, 5.0, 0.02


def _square_wave_response(seed: int, n_half: int = 4) -> tuple[np.ndarray, np.ndarray]:
    """(time s, output V) of a 2.5 to 7.5 V square wave of ``n_half`` half periods through the
    two-real-pole low-pass, by scipy.signal.lsim, with white noise of SIGMA V."""
    t = np.arange(int(n_half * HALF / DT)) * DT
    drive = 2.5 + STEP * ((np.floor(t / HALF) % 2) == 1)
    _, y, _ = scipy.signal.lsim(([1.0], np.polymul([TAU1, 1.0], [TAU2, 1.0])), drive, t)
    return t, y + np.random.default_rng(seed).normal(0.0, SIGMA, t.size)


def _settled_square_wave(seed: int) -> tuple[np.ndarray, np.ndarray]:
    """The square wave response from the middle of its second half period (the start-up from
    zero, 12 tau1 long, left out): edges at 0.5, 1.5 and 2.5 half periods, rising first."""
    t, y = _square_wave_response(seed, n_half=5)
    keep = t >= 1.5 * HALF
    return t[keep] - 1.5 * HALF, y[keep]


def _tau1(result) -> tuple[float, tuple[float, float]]:
    p = result.parameters.get("tau1") or result.parameters["tau"]
    return p.value, p.ci95


@pytest.mark.parametrize("seed", [1, 2, 3])
def test_a_record_that_begins_while_the_output_still_settles(seed):
    """The record begins 0.4 tau1 after a rising edge and holds one falling edge: the first
    window starts where the output has come to rest, and tau1's interval holds the truth."""
    t, y = _settled_square_wave(seed)
    start = int((0.5 * HALF + 0.4 * TAU1) / DT)
    stop = int(2 * HALF / DT)
    result = fit_capture(Capture.from_arrays(t[start:stop], {"out": y[start:stop]}), model="two-real-pole")
    assert result.describes_data
    value, (lo, hi) = _tau1(result)
    assert lo <= TAU1 <= hi, (value, lo, hi)
    assert any("record begins while the output still moves" in w for w in result.warnings)


@pytest.mark.parametrize("seed", [1, 2, 3])
def test_a_record_that_ends_during_an_edge(seed):
    """The record ends 0.6 tau1 into the next edge (a third of the way, short of the edge search's
    threshold): that edge is not fitted, the window before
    it stops at its onset, and tau1's interval holds the truth."""
    t, y = _settled_square_wave(seed)
    stop = int((1.5 * HALF + 0.6 * TAU1) / DT)
    result = fit_capture(Capture.from_arrays(t[:stop], {"out": y[:stop]}), model="two-real-pole")
    assert result.describes_data
    value, (lo, hi) = _tau1(result)
    assert lo <= TAU1 <= hi, (value, lo, hi)
    assert any("record ends during an edge" in w for w in result.warnings)


def test_a_record_at_rest_at_both_ends_is_unchanged():
    t, y = _settled_square_wave(4)
    a = analyse_steps(Capture.from_arrays(t, {"out": y}))
    (start, _), *_, (_, stop) = window_bounds(t, a.edges)
    assert a.segments[0].time[0] == t[start] and a.segments[-1].time[-1] == t[stop - 1] == t[-1]
    assert not any("record begins" in f or "record ends" in f for f in a.flags)


def test_ringing_at_the_record_end_is_not_cut():
    """A Q = 10 step whose record ends one and a half cycles after the edge swings back toward
    its old level, but it never rested at its final level:
    nothing is cut (the ringing is the response)."""
    w0, q = 2 * np.pi * 1e3, 10.0
    t = np.arange(-2e-3, 1.5e-3, 1e-5)
    _, y, _ = scipy.signal.lsim(([w0 * w0], [1.0, w0 / q, w0 * w0]), (t >= 0).astype(float), t - t[0])
    index = int(np.searchsorted(t, 0.0))
    edge = Edge(index, 0.0, 1, index - 1, 0.0, 1.0)
    assert cut_off_onset(y, edge, band=0.02) is None


def test_a_record_beginning_at_rest_keeps_its_start():
    y = np.r_[np.zeros(100), np.ones(100)]
    assert settled_start(y, 0, 99, band=0.02) == 0
    y[:5] = 0.6   # the record begins on the way down to 0: the window starts at the rest
    assert settled_start(y, 0, 99, band=0.02) == 5


needs_real = pytest.mark.skipif(not REAL_CAPTURES.exists(),
                                reason=f"the real captures are not at {REAL_CAPTURES} (../shared/reference "
                                       "beside the checkout)")


@needs_real
@pytest.mark.parametrize("name, part", [("scope_8.csv", "first"), ("scope_8.csv", "last"),
                                        ("scope_6.csv", "last")])
def test_real_half_records_read_the_slow_time_constant(tmp_path, name, part):
    """Half of a real overdamped RLC record (first half: it ends 0.1 ms into an edge; last
    half: it begins 0.4 ms after one) reads tau1 in the range of the whole record's case."""
    case = next(c for c in CASES if c.file.endswith(name))
    lines = case.path.read_text().splitlines(keepends=True)
    head, rows = lines[:2], lines[2:]
    half = rows[:len(rows) // 2] if part == "first" else rows[len(rows) // 2:]
    path = tmp_path / f"{part}_{name}"
    path.write_text("".join(head + half))
    status, data, stderr = run_fitkit(path)
    assert status == 0, stderr
    tau1 = next(e for e in case.expected if e.name == "tau1")
    value = quantity(data, "tau1")[0] or quantity(data, "tau")[0]
    assert tau1.low <= value <= tau1.high, (value, tau1)


def test_a_band_pass_decay_cut_short_is_not_an_edge():
    """A jump that decays back toward its old level (e^-t/tau after the edge, the voltage across
    the inductor of a series RL; textbook) passes near its top only briefly before falling on
    for longer: the record's end is the response, not an edge to cut off."""
    t = np.arange(-40, 100) * 1.0
    y = np.where(t >= 0, np.exp(-np.clip(t, 0, None) / 600.0), 0.0)
    index = int(np.searchsorted(t, 0.0))
    edge = Edge(index, 0.0, 1, index - 1, 0.0, 1.0)
    assert cut_off_onset(y, edge, band=0.02) is None
