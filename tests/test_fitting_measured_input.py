"""Measured-input mode: accuracy and honest intervals with a noisy, quantised, drooping input.

Independent simulation (scipy.signal.lsim, never fitkit's forms): a generator
with source resistance Rs drives an RC low-pass (R, C). The input pad sees
V_pad/V_gen = (1 + s R C) / (1 + s (Rs + R) C): it jumps to R / (Rs + R) of
the step and droops back up with the circuit; the output is
V_out/V_gen = 1 / (1 + s (Rs + R) C), so from the pad the circuit is
V_out/V_pad = 1 / (1 + s R C): tau = R C, gain 1 (textbook voltage divider
and RC charging, e.g. Horowitz & Hill, The Art of Electronics, 3rd ed.,
sections 1.2 and 1.4). Both channels get band-limited Gaussian noise
(Butterworth low-pass, scipy.signal.butter) and are quantised like an 8-bit
scope. Regression for the bias found on demo_captures/good_board.csv, where
the pre-edge input level was taken from one noisy, quantised first sample
and the input's own noise was not in the intervals.
"""

from __future__ import annotations

import json
import math
from pathlib import Path

import numpy as np
import pytest
from scipy import signal

from fitkit.capture import Capture
from fitkit.conditioning import analyse_steps
from fitkit.conditioning.segment import StepSegment
from fitkit.fitting import fit_capture, fit_segments
from fitkit.fitting.measured_input import (response_by_superposition, superposition_adjoint,
                                           superposition_kernel)
from fitkit import load_capture

DEMO = Path(__file__).resolve().parents[1] / "demo_captures"

RS, R, C = 500.0, 10e3, 10e-9  # source ohms, ohms, farads: tau = 100 us, droop 4.8 %
TAU = R * C
DT = TAU / 40
N_BEFORE, N_AFTER = 100, 300
LSB = 1.6 / 256  # 8 bits over 1.6 V: 6.25 mV, as a 0.2 V/div scope screen
NOISE = 0.003    # volts rms before quantisation, on each channel


def _clean_channels(ramp_samples: int = 1, jump_at: float | None = None
                    ) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """(time, input pad, output) for a 0 -> 1 V generator step ramping over ``ramp_samples``
    samples up to t = 0, or (``jump_at``) jumping at that fraction of the sample interval
    before t = 0, as a generator's edge far faster than the scope's sampling does (simulated
    64 times finer than the scope samples it, then sampled)."""
    t = np.arange(-N_BEFORE, N_AFTER) * DT
    fine, k = t, 1
    if jump_at is not None:
        k = 64
        fine = np.arange(-N_BEFORE * k, (N_AFTER - 1) * k + 1) * (DT / k)
        gen = (fine >= (jump_at - 1.0) * DT).astype(float)
    else:
        gen = np.clip(fine / (ramp_samples * DT) + 1.0, 0.0, 1.0)  # 0 until -ramp, linear to 1 at t = 0
    pad_tf = ([R * C, 1.0], [(RS + R) * C, 1.0])
    out_tf = ([1.0], [(RS + R) * C, 1.0])
    _, pad, _ = signal.lsim(pad_tf, gen, fine - fine[0])
    _, out, _ = signal.lsim(out_tf, gen, fine - fine[0])
    return t, pad[::k], out[::k]


def _noisy(rng: np.random.Generator, clean: np.ndarray) -> np.ndarray:
    b, a = signal.butter(2, 0.2)  # 0.1 x the sample rate, like the demo captures' scope
    e = signal.lfilter(b, a, rng.standard_normal(clean.size + 500))[500:]
    return LSB * np.round((clean + NOISE * e / np.std(e)) / LSB)


def _segment(t, pad, out) -> StepSegment:
    before = float(np.mean(pad[:N_BEFORE - 2]))
    return StepSegment(0, t.size, t, out, pad, -0.5 * DT, 1, float(np.mean(out[:N_BEFORE - 2])),
                       float(np.mean(out[-20:])), input_before=before, input_after=float(np.mean(pad[-20:])),
                       noise_rms=NOISE)


def test_simulation_has_the_drooping_input_it_claims():
    t, pad, out = _clean_channels()
    # the pad jumps to R / (Rs + R) at the edge and recovers to 1 V
    assert pad[N_BEFORE + 1] == pytest.approx(R / (RS + R), abs=2e-3)
    assert pad[-1] == pytest.approx(1.0, abs=1e-3)
    # from the pad, the circuit is 1 / (1 + s R C): lsim of that TF driven by the pad gives the output
    _, again, _ = signal.lsim(([1.0], [TAU, 1.0]), pad, t - t[0])
    # (to the error of lsim's linear interpolation of the curved pad between samples)
    assert np.allclose(again, out, atol=5e-5)


def test_measured_input_intervals_cover_the_truth_over_200_captures():
    # Coverage target for band-limited noise with the corrections on: 90-97 %
    # (issue 4); 200 captures give a binomial sd of 1.5 %; the seed is fixed, so the count
    # is exact.
    # The generator's edge jumps at a random place inside its sample interval (faster than the
    # sampling, as a generator's is): where, the samples cannot say (drive_between_samples.py).
    rng = np.random.default_rng(2026)
    n = 200
    hits = {"tau": 0, "gain": 0}
    z_tau = []
    for _ in range(n):
        t, pad, out = _clean_channels(jump_at=rng.uniform())
        seg = _segment(t, _noisy(rng, pad), _noisy(rng, out))
        r = fit_segments([seg], "first-order", intervals="covariance", derived=False)
        assert r.details.mode == "measured input"
        hits["tau"] += r.parameters["tau"].contains(TAU)
        hits["gain"] += r.parameters["gain"].contains(1.0)
        z_tau.append((r.parameters["tau"].value - TAU) / r.parameters["tau"].stderr)
    cover = {k: v / n for k, v in hits.items()}
    # The unknown place of the jump is a uniform error (GUM 4.3.7), the larger part of tau's
    # here: a sum so dominated has lighter tails than a normal one, and a +-1.96 sd interval
    # holds it more often than 95 % (a uniform alone, always). So coverage may reach 99.5 %,
    # and the standardised errors' spread must be 1: without the term it was 1.92 (65.5 %).
    assert 0.90 <= cover["tau"] <= 0.995, cover
    assert 0.90 <= cover["gain"] <= 0.995, cover
    assert 0.85 <= np.std(z_tau) <= 1.15, np.std(z_tau)
    # no bias: the mean standardised error is within 3 standard errors of 0
    assert abs(np.mean(z_tau)) < 3.0 / np.sqrt(n) * max(np.std(z_tau), 1.0)


def test_input_noise_is_carried_into_the_intervals():
    # The same capture with a noisy input gets wider intervals than with the
    # clean input (the input's own noise reaches the model), and the text says so. The
    # generator ramps over three samples, so where an edge lies inside a sample adds nothing.
    t, pad, out = _clean_channels(ramp_samples=3)
    rng = np.random.default_rng(5)
    noisy_out = _noisy(rng, out)
    clean_in = fit_segments([_segment(t, pad, noisy_out)], "first-order", intervals="covariance", derived=False)
    noisy_in = fit_segments([_segment(t, _noisy(rng, pad), noisy_out)], "first-order", intervals="covariance",
                            derived=False)
    assert noisy_in.parameters["tau"].stderr > 1.1 * clean_in.parameters["tau"].stderr
    assert "measured input's own noise" in noisy_in.diagnostics.correction


def test_initial_level_is_the_pre_edge_mean_not_the_first_sample():
    # A first sample one quantisation step off must not move the fit: the
    # pre-edge mean sets the level the circuit had settled to.
    t, pad, out = _clean_channels()
    base = fit_segments([_segment(t, pad, out)], "first-order", intervals="covariance", derived=False)
    bumped = pad.copy()
    bumped[0] += LSB
    moved = fit_segments([_segment(t, bumped, out)], "first-order", intervals="covariance", derived=False)
    assert moved.parameters["tau"].value == pytest.approx(base.parameters["tau"].value, rel=2e-4)
    assert moved.parameters["gain"].value == pytest.approx(base.parameters["gain"].value, abs=1e-4)
    assert base.parameters["tau"].value == pytest.approx(TAU, rel=1e-3)  # noise-free: exact


def test_superposition_adjoint_is_the_transpose():
    # Dot-product test of the adjoint used to carry the input noise: <L u, v> = <u, L^T v>.
    rng = np.random.default_rng(3)
    n = 60
    step = lambda tt: np.where(tt > 0, 1.0 - np.exp(-tt / 7.0), 0.0)  # noqa: E731
    a = np.zeros(n)
    a[:12] = 1.0 / 12
    u, v = rng.standard_normal(n), rng.standard_normal(n)
    lu = response_by_superposition(step, u, 1.0, 1.0, initial=float(a @ u))
    lt_v = superposition_adjoint(superposition_kernel(step, n, 1.0), 1.0, a, v)
    assert float(lu @ v) == pytest.approx(float(u @ lt_v), rel=1e-12)


def test_superposition_with_initial_level_matches_lsim():
    # scipy.signal.lsim with the input at the initial level before the first sample.
    dt, tau = 1e-6, 2e-5
    t = np.arange(0, 400) * dt
    u = 0.3 + np.where(t > 5e-5, 1.0 - 0.02 * np.exp(-(t - 5e-5) / 1e-4), 0.0)
    step = lambda tt: np.where(tt > 0, 1.0 - np.exp(-tt / tau), 0.0)  # noqa: E731
    y = response_by_superposition(step, u, dt, 1.0, initial=0.3)
    _, ref, _ = signal.lsim(([1.0], [tau, 1.0]), u - 0.3, t)
    assert np.allclose(y - 0.3, ref, atol=1e-8)


@pytest.mark.parametrize("name, model, quantity, key", [
    ("good_board.csv", "first-order", "tau", "time_constants_s"),
    ("good_board.csv", "first-order", "gain", "dc_gain"),
    ("good_board_ladder.csv", "two-real-pole", "f0", "f0_hz"),
    ("good_board_ladder.csv", "two-real-pole", "Q", "q"),
])
def test_demo_truth_from_the_measured_input_is_inside_the_interval(name, model, quantity, key):
    # truth.json, "from_measured_input_pad": made by demo_captures/make_demo_captures.py
    # (numpy and scipy.signal.lsim only) from the circuit equations.
    truth = json.loads((DEMO / "truth.json").read_text())["captures"][name]["from_measured_input_pad"][key]
    truth = truth[0] if isinstance(truth, list) else truth
    r = fit_capture(load_capture(str(DEMO / name)), model=model)
    assert r.details.mode == "measured input"
    est = r.parameters.get(quantity) or r.derived[quantity]
    assert est.contains(truth), (est.value, est.ci95, truth)


def test_eight_bit_drive_flickering_after_its_edge_keeps_q_intervals_honest():
    # A series RLC measured across C (R 100 Ohm, L 10 mH, C 70 nF: f0 6.0 kHz, Q 3.78; transfer
    # function 1 / (LC s^2 + RC s + 1), Nilsson & Riedel, Electric Circuits, ch. 8), driven by a
    # 0 -> 1 V step and simulated with scipy.signal.lsim; both channels carry 3 mV of
    # band-limited noise and are rounded to 8 bits over -1.2 .. 1.3 V (9.8 mV codes: the noise is
    # 0.3 codes). Before the edge the drive sits near a code's middle and rarely changes code;
    # after it, 1 V sits 0.3 codes from a code and the recorded drive flickers a code up a quarter
    # of the time. The input's noise estimated before the edge alone understated what reaches
    # the model (Q's 95 % interval held the truth in 51 of 60 captures; 57 after).
    R_, L_, C_ = 100.0, 10e-3, 70e-9
    q_truth = math.sqrt(L_ / C_) / R_
    slow = 2 * L_ / R_
    t = np.linspace(-0.7 * slow, 6.3 * slow, 1000)
    drive = (t >= 0).astype(float)
    _, clean, _ = signal.lsim(([1.0], [L_ * C_, R_ * C_, 1.0]), drive, t - t[0])
    b, a = signal.butter(2, 0.2)
    code = 2.5 / 256
    rng = np.random.default_rng(100)

    def scope(x):
        w = signal.lfilter(b, a, rng.normal(0, 1, x.size))
        return np.round((x + 1.2 + 3e-3 * w / w.std()) / code) * code - 1.2

    hits, n = 0, 60
    for _ in range(n):
        u = scope(drive)
        y = scope(clean)
        capture = Capture.from_arrays(t, {"input": u, "output": y})
        segments = analyse_steps(capture, input="input", output="output").segments
        r = fit_segments(segments, "second-order", intervals="covariance", derived=False)
        hits += r.parameters["Q"].contains(q_truth)
    assert hits / n >= 0.93, hits
