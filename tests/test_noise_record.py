"""A separate quiet record of the noise (fitkit fit --noise-record): its noise
model, and fits of short captures under band-limited noise with it.

Outside references used here:
* band-limited noise, its exact autocorrelation and the Cramer-Rao bound of
  tau under it (Kay, Fundamentals of Statistical Signal Processing:
  Estimation Theory, 1993, ch. 3), from test_whitened_fit.py, which builds
  them with scipy.signal and scipy.linalg only;
* an AR(2) process made by scipy.signal.lfilter, whose Yule-Walker estimate
  has standard errors of about sqrt((1 - phi2^2) / n) (Brockwell & Davis,
  Time Series: Theory and Methods, 2nd ed., 1991, section 8.1, from memory).
"""

from __future__ import annotations

import json
import math
import subprocess
import sys

import numpy as np
import pytest
from scipy import signal

from fitkit.capture import Capture
from fitkit.conditioning.segment import StepSegment
from fitkit.errors import FitError
from fitkit.fitting import fit_segments
from fitkit.fitting.noise_record import (MIN_RECORD_SAMPLES, noise_record_from_capture,
                                         noise_record_from_samples)

from test_whitened_fit import BASELINE, SIGMA, STEP, TAU, band_noise, tau_crlb

DT = TAU / 10  # 10 samples per time constant: a short capture
TIME = np.arange(-12, 60) * DT  # 72 points, too few to estimate the noise model from the capture


def clean_step(t: np.ndarray) -> np.ndarray:
    """Textbook RC step response (common practice, no source), edge at t = 0."""
    return BASELINE + STEP * np.where(t >= 0, 1 - np.exp(-np.clip(t, 0, None) / TAU), 0.0)


def segment(y: np.ndarray) -> StepSegment:
    return StepSegment(0, TIME.size, TIME, y, None, 0.0, 1, float(y[TIME < 0].mean()), float(y[-8:].mean()),
                       noise_rms=SIGMA)


def test_record_model_whitens_the_same_process():
    # x[t] = 1.2 x[t-1] - 0.5 x[t-2] + e[t] (scipy.signal.lfilter): the model of one
    # 20 000-sample record must turn a fresh realisation into white noise
    rng = np.random.default_rng(5)

    def ar2(n):
        return signal.lfilter([1.0], [1.0, -1.2, 0.5], rng.standard_normal(n + 500))[500:]

    x = ar2(20000)
    rec = noise_record_from_samples(1e-3 * x, 1e-6, "quiet.csv")
    fresh = ar2(20000)
    white = rec.whitener.apply(fresh, [0, fresh.size])
    white = white - white.mean()
    lags = np.array([float(white[:-k] @ white[k:]) / float(white @ white) for k in range(1, 11)])
    # white noise: sample autocorrelations have sd 1/sqrt(n) = 0.007 (Bartlett's formula,
    # Brockwell & Davis 1991, section 7.2, from memory). The model is fitted with 1 % of
    # white noise added (whitening.WHITE_LOADING, which bounds the filter's gain), so
    # it whitens this loading-free process slightly too little at lag 1: 0.05 of the
    # raw process's 0.8.
    raw1 = float(fresh[:-1] @ fresh[1:]) / float(fresh @ fresh)
    assert raw1 > 0.7
    assert abs(lags[0]) < 0.1 * raw1, lags
    assert np.all(np.abs(lags[1:]) < 4.0 / math.sqrt(fresh.size) + 0.01), lags
    # the AR(2) coefficients, shrunk slightly by the 1 % white loading
    phi = rec.whitener.model.coefficients
    assert phi[0] == pytest.approx(1.2, abs=0.1) and phi[1] == pytest.approx(-0.5, abs=0.1)
    assert rec.rms == pytest.approx(1e-3 * float(np.std(x)), rel=0.01)
    assert rec.n_samples == 20000 and rec.source == "quiet.csv"


def test_record_with_a_gap_uses_its_longest_stretch():
    rng = np.random.default_rng(12)
    x = band_noise(rng, 3000, SIGMA)
    x[700] = np.nan  # a dropped sample: the stretch after it (2299 samples) is used, not both joined
    rec = noise_record_from_samples(x, DT)
    assert rec.n_samples == 2299


def test_short_capture_with_a_record_reaches_the_bound():
    # 100 captures of 72 points: from the capture alone fitkit keeps ordinary
    # least squares (efficiency about 0.45); with a 4096-sample record of the
    # same noise the fit is generalised least squares and near the bound
    rng = np.random.default_rng(20261203)
    clean = clean_step(TIME)
    with_record, alone, covered = [], [], 0
    for _ in range(100):
        y = clean + band_noise(rng, TIME.size, SIGMA)
        rec = noise_record_from_samples(band_noise(rng, 4096, SIGMA), DT)
        r = fit_segments([segment(y)], "first-order", derived=False, noise_record=rec)
        assert "noise record (4096 samples)" in r.diagnostics.correction
        tau = r.parameters["tau"]
        with_record.append(tau.value)
        covered += tau.contains(TAU)
        alone.append(fit_segments([segment(y)], "first-order", derived=False).parameters["tau"].value)
    crlb = tau_crlb(TIME, SIGMA)
    mse_record = float(np.mean((np.array(with_record) - TAU) ** 2))
    mse_alone = float(np.mean((np.array(alone) - TAU) ** 2))
    # efficiency from 100 trials has a relative sd of about 14 %
    assert crlb / mse_record >= 0.8, crlb / mse_record
    assert mse_alone > 1.5 * mse_record
    assert 0.90 <= covered / 100 <= 1.0, covered


def test_record_sampled_at_another_rate_is_refused():
    rng = np.random.default_rng(1)
    rec = noise_record_from_samples(band_noise(rng, 1024, SIGMA), 2 * DT, "slow.csv")
    with pytest.raises(FitError, match="sampled every"):
        fit_segments([segment(clean_step(TIME))], "first-order", noise_record=rec)


def test_bad_records_are_one_line_errors():
    with pytest.raises(FitError, match=f"at least {MIN_RECORD_SAMPLES}"):
        noise_record_from_samples(np.zeros(10), 1e-6)
    with pytest.raises(FitError, match="flat"):
        noise_record_from_samples(np.full(1000, 0.25), 1e-6)
    t = np.arange(1000) * 1e-6
    two = Capture.from_arrays(t, {"a": np.sin(t), "b": np.cos(t)})
    with pytest.raises(FitError, match="channels a, b"):
        noise_record_from_capture(two, None)
    assert noise_record_from_capture(two, "b").n_samples == 1000


def test_measured_input_fit_says_the_record_was_not_used():
    rng = np.random.default_rng(9)
    y = clean_step(TIME) + band_noise(rng, TIME.size, SIGMA)
    u = np.where(TIME >= 0, 1.0, 0.0)
    seg = StepSegment(0, TIME.size, TIME, y, u, 0.0, 1, float(y[TIME < 0].mean()), float(y[-8:].mean()),
                      noise_rms=SIGMA, input_before=0.0, input_after=1.0)
    rec = noise_record_from_samples(band_noise(rng, 2048, SIGMA), DT)
    r = fit_segments([seg], "first-order", noise_record=rec)
    assert any("noise record was not used" in w for w in r.warnings)


def test_command_line_fit_with_a_noise_record(tmp_path):
    rng = np.random.default_rng(44)
    y = clean_step(TIME) + band_noise(rng, TIME.size, SIGMA)
    capture = tmp_path / "short.csv"
    np.savetxt(capture, np.column_stack([TIME, y]), delimiter=",", header="time,vout", comments="")
    quiet = tmp_path / "quiet.csv"
    tq = np.arange(4096) * DT
    np.savetxt(quiet, np.column_stack([tq, 0.5 + band_noise(rng, tq.size, SIGMA)]), delimiter=",",
               header="time,vout", comments="")
    before = (capture.read_bytes(), quiet.read_bytes())
    run = subprocess.run([sys.executable, "-m", "fitkit", "fit", str(capture), "--form", "first-order",
                          "--noise-record", str(quiet), "--json"], capture_output=True, text=True, timeout=120)
    assert run.returncode == 0, run.stderr
    data = json.loads(run.stdout)
    assert "noise record (4096 samples)" in data["diagnostics"]["correction"]
    lo, hi = data["parameters"]["tau"]["ci95"]
    assert lo < hi
    # a record at another timebase: one line naming the problem, non-zero status
    slow = tmp_path / "slow.csv"
    np.savetxt(slow, np.column_stack([2 * tq, band_noise(rng, tq.size, SIGMA)]), delimiter=",",
               header="time,vout", comments="")
    bad = subprocess.run([sys.executable, "-m", "fitkit", "fit", str(capture), "--noise-record", str(slow)],
                         capture_output=True, text=True, timeout=120)
    assert bad.returncode != 0 and "sampled every" in bad.stderr
    assert len(bad.stderr.strip().splitlines()) <= 2 and "Traceback" not in bad.stderr
    assert (capture.read_bytes(), quiet.read_bytes()) == before
