"""An output-only band-pass step read as one response, not as a pulse of two drive edges.

Sources named beside each check:
* Nilsson & Riedel, *Electric Circuits*, chapter on the natural and step responses
  of RLC circuits (from memory): the series RLC current after a step V is
  i = V/(wd L) exp(-alpha t) sin(wd t) (underdamped), alpha = R/(2L),
  w0 = 1/sqrt(LC), wd = sqrt(w0^2 - alpha^2); the voltage across R is R i,
  and Q = w0 / (2 alpha).
* scipy.signal.lsim for the low-pass response to a real two-edge pulse.
* A real series-RL capture (../shared/reference/real-captures, SOURCE.md) with noise added.
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
from fitkit.io import load_capture
from fitkit.fitting.adequacy import MISFIT_CEILING_BASELINE

from support.reference_paths import REAL_CAPTURES, needs_real_captures
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


def _noisy_rl_inductor_step(seed: int) -> Capture:
    """The voltage across the inductor of a series RL after a 3.9 V step, tau = L/R = 9.3 us,
    through a probe of 0.1 us: s tau / ((1 + s tau)(1 + s tau_r)), whose step response is
    tau / (tau - tau_r) (exp(-t/tau) - exp(-t/tau_r)) (the textbook first-order responses,
    superposed; Nilsson & Riedel, from memory). Sampled as a real scope capture of such a
    circuit was (40 ns, 1,516 samples, the edge at 40.36 us, 0.08 V codes), with 0.21 V of
    noise: its decay crosses the mid level slowly enough for the noise to make that crossing
    look like drive edges."""
    tau, tau_r, dt = 9.3e-6, 1e-7, 4e-8
    t = np.arange(1516) * dt
    x = np.clip(t - 40.36e-6, 0.0, None)
    clean = -0.12 + 3.9 * tau / (tau - tau_r) * (np.exp(-x / tau) - np.exp(-x / tau_r))
    y = np.round((clean + np.random.default_rng(seed).normal(0.0, 0.21, t.size)) / 0.08) * 0.08
    return Capture.from_arrays(t, {"Vout": y})


def test_a_noisy_band_pass_decay_cut_into_edges_is_not_read_by_a_rarer_form():
    """The noisy decay taken for drive edges cut the response into pieces that a pole-zero form
    (fitted only when the usual forms fail) described at the noise, tau1 about 6 us with a tight
    interval, in 14 of 20 draws. That reading is now set against the one response to the first
    edge, which a usual band-pass form describes; the time constant is in its interval in at
    least 9 of 10 draws and never read by a rarer form."""
    tau = 9.3e-6
    held, forms = 0, []
    for seed in range(10):
        result = fit_capture(_noisy_rl_inductor_step(seed))
        est = result.parameters.get("tau1") or result.parameters.get("tau")
        forms.append(result.model)
        held += est is not None and est.ci95 is not None and est.ci95[0] <= tau <= est.ci95[1]
    assert not {"pole-zero", "underdamped-zero", "four-real-pole"} & set(forms), forms
    assert held >= 9, forms


@needs_real_captures
@pytest.mark.parametrize("seed", [12345, 1, 4, 5])
def test_the_real_rl_capture_with_three_times_its_noise_keeps_its_time_constant(tmp_path, seed):
    """The real series-RL capture (../shared/reference/real-captures/rl-square-scope.csv, its
    decay near 9 us per SOURCE.md) with Gaussian noise of three times its own (0.2 V) added and
    rounded to its 0.01 V print: with these draws a pole-zero form was chosen, tau1 5.8 to 6.8 us
    with intervals that missed the range. Now tau (or tau1) lies in 8.0-10.5 us, or its interval
    reaches that range, and the file is not changed."""
    source = REAL_CAPTURES / "rl-square-scope.csv"
    before = source.read_bytes()
    lines = source.read_text().splitlines()
    rows = [line.split(",") for line in lines[1:]]
    noise = np.random.default_rng(seed).normal(0.0, 3 * 0.0678, len(rows))
    noisy = tmp_path / "rl-noisy.csv"
    noisy.write_text("\n".join([lines[0]] + [f"{r[0]},{float(r[1]) + e:.2f}" for r, e in zip(rows, noise)]) + "\n")
    result = fit_capture(load_capture(noisy))
    est = result.parameters.get("tau1") or result.parameters.get("tau")
    assert result.model not in ("pole-zero", "underdamped-zero", "four-real-pole")
    assert est.ci95 is not None and est.ci95[0] <= 10.5e-6 and est.ci95[1] >= 8.0e-6, (result.model, est)
    assert source.read_bytes() == before
