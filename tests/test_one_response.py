"""An output-only band-pass step read as one response, not as a pulse of two drive edges.

Sources named beside each check:
* Nilsson & Riedel, *Electric Circuits*, chapter on the natural and step responses
  of RLC circuits (from memory): the series RLC current after a step V is
  i = V/(wd L) exp(-alpha t) sin(wd t) (underdamped), alpha = R/(2L),
  w0 = 1/sqrt(LC), wd = sqrt(w0^2 - alpha^2); the voltage across R is R i,
  and Q = w0 / (2 alpha).
* scipy.signal.lsim for the low-pass response to a real two-edge pulse.
"""

import json
import math

import numpy as np
import pytest
import scipy.signal

from fitkit.capture import Capture
from fitkit.check import check_capture
from fitkit.cli import cli
from fitkit.cli.errors_to_exit import run_with_error_handling
from fitkit.fitting import fit_capture
from fitkit.fitting.adequacy import MISFIT_CEILING_BASELINE

from test_check_diagnosis import design_for

#: The board-check grid's series RLC across R, with L a decade low: Q = 1, f0 = 15.92 kHz
R, L, C = 100.0, 1e-3, 100e-9
ALPHA, W0 = R / (2 * L), 1 / math.sqrt(L * C)
F0, Q = W0 / (2 * math.pi), W0 / (2 * ALPHA)


def _band_pass_record(seed: int, stop: float = 126e-6, n: int = 1000):
    """(time s, V across R) for a 1 V step at t = 0: Nilsson & Riedel's current times R, white
    noise of 3 mV rms."""
    t = np.linspace(-14e-6, stop, n)
    wd = math.sqrt(W0 ** 2 - ALPHA ** 2)
    after = np.clip(t, 0, None)
    v = np.where(t > 0, R * np.exp(-ALPHA * after) * np.sin(wd * after) / (wd * L), 0.0)
    return t, v + np.random.default_rng(seed).normal(0, 3e-3, t.size)


def _capture(t, y) -> Capture:
    return Capture.from_arrays(t, {"output": y})


def _write(tmp_path, t, y, name="band_pass.csv"):
    path = tmp_path / name
    np.savetxt(path, np.column_stack([t, y]), delimiter=",", header="time (s),output (V)", comments="")
    return path


def _read_as_one_response(records) -> dict[str, int]:
    """For each (time, volts, f0, Q): the fit is the underdamped band-pass read as one
    response; returns how many of f0's and Q's intervals hold the truth."""
    held = {"f0": 0, "Q": 0}
    for i, (t, v, f0, q) in enumerate(records):
        result = fit_capture(_capture(t, v))
        assert result.describes_data and result.model == "underdamped-band-pass", i
        assert result.warnings[0].startswith("read as one response to the edge at"), i
        for name, truth in (("f0", f0), ("Q", q)):
            lo, hi = result.parameters[name].ci95
            held[name] += lo <= truth <= hi
    return held


def test_band_pass_return_is_not_a_drive_edge():
    """The level search finds the response's return as a falling edge; that reading does not
    describe the capture, the one-response reading does, and f0 and Q hold the truth as often
    as 95 % intervals should (40 noise draws; 100 draws gave 97 % and 95 %)."""
    held = _read_as_one_response((_band_pass_record(seed) + (F0, Q) for seed in range(40)))
    assert min(held.values()) >= 35, held


def test_forced_edge_window_is_not_cut_by_the_return(tmp_path, capsys):
    """From the command line, --edge-time at the step: the window had ended at the return
    (a first-order rise of tau 4.3 us, exit 0); it now runs to the record's end."""
    path = _write(tmp_path, *_band_pass_record(4))
    before = path.read_bytes()
    status = run_with_error_handling(cli, ["fit", str(path), "--edge-time", "0", "--json"])
    out = json.loads(capsys.readouterr().out)
    assert status == 0
    assert out["model"] == "underdamped-band-pass"
    assert any(w.startswith("read as one response") for w in out["warnings"])
    assert path.read_bytes() == before


def test_pulse_through_low_pass_keeps_its_two_edges():
    """A real drive pulse (two edges, 60 us apart) through an RC low-pass (tau 5 us,
    scipy.signal.lsim): the first reading describes it and no one-response note is given."""
    t = np.linspace(-20e-6, 200e-6, 2201)
    u = ((t >= 0) & (t < 60e-6)).astype(float)
    _, y, _ = scipy.signal.lsim(scipy.signal.lti([1.0], [5e-6, 1.0]), u, t - t[0])
    y = y + np.random.default_rng(5).normal(0, 3e-3, t.size)
    result = fit_capture(_capture(t, y))
    assert result.describes_data and result.model == "first-order"
    assert not any(w.startswith("read as one response") for w in result.warnings)
    lo, hi = result.parameters["tau"].ci95
    assert lo <= 5e-6 <= hi


def test_record_cut_during_the_return_is_refused():
    """The record ends 22 us after the step, part way down the return (no second edge is
    found): a first-order rise had left residuals about 6 times the baseline's noise spread
    evenly over the window and was kept; over MISFIT_CEILING_BASELINE it is refused."""
    capture = _capture(*_band_pass_record(6, stop=22e-6, n=260))
    result = fit_capture(capture, model="first-order")
    assert not result.describes_data
    assert result.adequacy.misfit_ratio > MISFIT_CEILING_BASELINE


def test_check_reads_the_band_pass_board_as_one_response():
    """The board check of the same output-only capture against the series RLC-across-R design
    (L nominal 10 mH, fitted 1 mH): L1 leads and its interval holds 1 mH."""
    capture = _capture(*_band_pass_record(7))
    result = check_capture(capture, design_for("rlc-series-r"), envelope_trials=40)
    assert result.fit.describes_data
    lead = result.suspects[0]
    assert lead.parts == ("L1",) and lead.ci95[0] <= L <= lead.ci95[1]


def _ringing_record(seed: int):
    """(time s, V across R) of the series RLC with R a decade low (10 Ohm, 10 mH, 100 nF:
    Q = 31.6, f0 = 5.03 kHz; Nilsson & Riedel's current times R), 3 mV of noise low-passed
    at a fifth of the Nyquist frequency (scipy.signal.butter), as the board-check grid draws it."""
    r, l_, c = 10.0, 10e-3, 100e-9
    alpha, w0 = r / (2 * l_), 1 / math.sqrt(l_ * c)
    wd = math.sqrt(w0 ** 2 - alpha ** 2)
    t = np.linspace(-1.4e-3, 14e-3, 1000)
    after = np.clip(t, 0, None)
    b, a = scipy.signal.butter(2, 0.2)
    w = scipy.signal.lfilter(b, a, np.random.default_rng(seed).normal(0, 1, t.size))
    v = np.where(t > 0, r * np.exp(-alpha * after) * np.sin(wd * after) / (wd * l_), 0.0)
    return t, v + 3e-3 * w / w.std(), w0 / (2 * math.pi), w0 / (2 * alpha)


def test_ringing_swings_found_as_edges_are_one_response():
    """A Q = 31.6 band-pass step: its ringing crosses the levels 4 to 10 times, each taken for
    a drive edge (read as an underdamped low-pass, or no form fitted at all); read as one
    response, f0 and Q hold the truth (the board-check grid's output-only series RLC with
    R1 a decade low had read R1 6.6 Ohm [5.9, 7.4] for 10 Ohm)."""
    held = _read_as_one_response(_ringing_record(seed) for seed in range(8))
    assert min(held.values()) >= 7, held


def test_check_whose_fit_does_not_describe_reports_no_measurement():
    """A series RLC across C (the design's own values; its step 1/(LC s^2 + RC s + 1) by
    scipy.signal.step, Nilsson & Riedel's low-pass) with a tenth of the step creeping in over
    1 ms: no form describes it. The check is inconclusive and its f0 and Q carry no interval and
    no within/outside verdict: the rejected fit's numbers are not measurements."""
    r, l_, c = 100.0, 10e-3, 100e-9
    t = np.linspace(-0.2e-3, 2e-3, 2000)
    after = t[t >= 0]
    _, rise = scipy.signal.step(scipy.signal.lti([1.0], [l_ * c, r * c, 1.0]), T=after - after[0])
    y = np.zeros_like(t)
    y[t >= 0] = rise
    creep = 0.1 * (1 - np.exp(-np.clip(t, 0, None) / 1e-3))
    v = 0.9 * y + creep + np.random.default_rng(8).normal(0, 3e-3, t.size)
    result = check_capture(_capture(t, v), design_for("rlc-series-c"), envelope_trials=40)
    assert not result.fit.describes_data
    assert result.verdict == "inconclusive"
    assert "not measurements" in result.summary
    assert {q.name for q in result.quantities} == {"f0", "Q"}
    assert all(q.ci95 is None and q.verdict == "not determined" for q in result.quantities)


def test_a_square_wave_of_many_edges_is_not_read_as_one_response():
    """The second reading costs the whole record's fit and no step form describes a square
    wave that way (a 20-edge square wave took 64 s): over MAX_SWINGS edges it is not tried.
    Capture: an RC square wave, 1 - exp(-t/tau) per edge (the textbook step response)."""
    from fitkit.conditioning import analyse_steps
    from fitkit.fitting.one_response import MAX_SWINGS, one_response_reading

    t = np.arange(20_000) * 1e-7
    half = 1_000
    y = np.zeros_like(t)
    for k in range(20):
        after = np.clip(t - (k * half + half // 2) * 1e-7, 0, None)
        y += (-1) ** k * np.where(after > 0, 1 - np.exp(-after / 1e-5), 0.0)
    capture = _capture(t, y + np.random.default_rng(9).normal(0, 3e-3, t.size))
    analysis = analyse_steps(capture)
    assert len(analysis.edges) > MAX_SWINGS
    assert one_response_reading(capture, analysis) is None
    short = _capture(t[:4 * half], y[:4 * half] + np.random.default_rng(10).normal(0, 3e-3, 4 * half))
    few = analyse_steps(short)
    assert 1 < len(few.edges) <= MAX_SWINGS and one_response_reading(short, few) is not None
