"""State levels (IEEE Std 181 histogram method), noise and quantisation estimates.

References: IEEE Std 181 (transitions, pulses and related waveforms) defines
state levels as the modes of the lower and upper halves of the sample
histogram; the MAD-to-sigma factor 1.4826 for Gaussian data (Hampel; the
normal 0.75 quantile is 0.6745); the uniform quantisation noise q / sqrt(12)
(Widrow & Kollar, Quantization Noise). Truth is the construction of each trace.
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from fitkit.conditioning.levels import state_levels
from fitkit.conditioning.noise import (estimate_noise, noise_from_differences, quantisation_step,
                                       robust_sigma)


def _ringing_square(rng, n_periods=10, per_half=500, low=-0.3, high=2.2, noise=0.02):
    """Square wave with 30 % overshoot ringing after each edge, plus Gaussian noise."""
    k = np.arange(per_half)
    ring = 0.3 * np.exp(-k / 40.0) * np.cos(2 * np.pi * k / 60.0)
    half_up = 1.0 + ring
    half_down = -ring
    unit = np.tile(np.concatenate((half_up, half_down)), n_periods)
    return low + (high - low) * unit + rng.normal(0, noise, unit.size)


def test_histogram_levels_find_the_states_not_the_half_means():
    rng = np.random.default_rng(11)
    y = _ringing_square(rng)
    levels = state_levels(y)
    # IEEE Std 181 mode method: the settled levels, despite the ringing
    assert levels.low == pytest.approx(-0.3, abs=0.01)
    assert levels.high == pytest.approx(2.2, abs=0.01)
    assert "IEEE Std 181" in levels.method
    # the ringing pulls the plain mean of each half away from the state (why the mode is used)
    mid = 0.5 * (y.min() + y.max())
    assert abs(y[y > mid].mean() - 2.2) > 3 * abs(levels.high - 2.2)
    assert levels.fraction_low > 0.3 and levels.fraction_high > 0.3


def test_levels_of_a_quantised_trace_are_aligned_to_codes():
    rng = np.random.default_rng(12)
    q = 0.04
    y = np.round(_ringing_square(rng, noise=0.03) / q) * q
    levels = state_levels(y, quantisation_step=q)
    assert levels.low == pytest.approx(-0.3, abs=0.01)
    assert levels.high == pytest.approx(2.2, abs=0.01)


def test_short_record_falls_back_to_medians():
    y = np.array([0.0, 0.01, -0.01, 0.0, 1.0, 1.02, 0.98, 1.0, 1.01, 0.99])
    levels = state_levels(y)
    assert "short record" in levels.method
    assert levels.low == pytest.approx(0.0, abs=1e-12)  # median of the lower half
    assert levels.high == pytest.approx(1.0, abs=1e-12)


def test_flat_trace_has_one_level():
    levels = state_levels(np.full(100, 0.7))
    assert levels.low == levels.high == 0.7 and levels.amplitude == 0


def test_robust_sigma_of_gaussian_data():
    rng = np.random.default_rng(13)
    x = rng.normal(5.0, 0.3, 200_000)
    # MAD x 1.4826 estimates sigma for Gaussian data (standard error about 0.2 % here)
    assert robust_sigma(x) == pytest.approx(0.3, rel=0.01)


def test_noise_from_differences_ignores_edges_and_slow_signal():
    rng = np.random.default_rng(14)
    n = 100_000
    t = np.arange(n)
    signal = np.where((t // 5000) % 2 == 0, 0.0, 3.0) + 0.5 * np.sin(2 * np.pi * t / n)
    y = signal + rng.normal(0, 0.05, n)
    assert noise_from_differences(y) == pytest.approx(0.05, rel=0.02)


def test_long_records_sample_blocks_for_noise():
    rng = np.random.default_rng(15)
    y = rng.normal(0, 0.2, 2_000_000)
    y[1_500_000:] += rng.normal(0, 0.2, 500_000)  # noisier last quarter: the blocks must see it
    whole = robust_sigma(np.diff(y)) / math.sqrt(2)
    assert noise_from_differences(y) == pytest.approx(whole, rel=0.03)


def test_quantisation_step_found_on_8bit_codes():
    rng = np.random.default_rng(16)
    q = 5.0 / 256
    y = np.round((np.sin(np.linspace(0, 20, 50_000)) + rng.normal(0, 0.05, 50_000)) / q) * q + 0.123
    assert quantisation_step(y) == pytest.approx(q, rel=1e-9)
    est = estimate_noise(y)
    assert est.quantisation_step == pytest.approx(q, rel=1e-9)


def test_unquantised_and_two_valued_traces_have_no_step():
    rng = np.random.default_rng(17)
    assert quantisation_step(rng.normal(0, 1, 10_000)) is None
    assert quantisation_step(np.tile([0.0, 0.0, 1.0, 1.0], 1000)) is None  # a clean square wave


def test_noise_below_one_code_reports_the_quantisation_floor():
    q = 0.01
    y = np.round(np.tile(np.concatenate((np.zeros(500), np.ones(500))), 10) / q) * q
    y[::7] += q  # a few codes so that the trace is visibly quantised
    est = estimate_noise(y)
    # uniform quantisation error of a step q has standard deviation q / sqrt(12) (Widrow & Kollar)
    assert est.rms == pytest.approx(q / math.sqrt(12), rel=1e-9)
    assert "quantisation" in est.method
