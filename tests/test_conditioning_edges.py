"""Edge finding: square waves with 2 to 50 edges, noisy 8-bit traces, invariances.

The truth here is the construction of each synthetic capture (edge times we
placed ourselves); responses are simulated with scipy.signal.lfilter as the
exact discrete-time step response of a first-order low-pass (a sampled
exponential, y[k] = a y[k-1] + (1 - a) u[k] with a = exp(-dt / tau), the
impulse-invariant discretisation of 1 / (1 + s tau)).

SNR convention used below: 20 dB means the step amplitude is 10 times the
noise standard deviation (20 log10(10) = 20 dB), the harsher of the usual
readings (common practice, no source).
"""

from __future__ import annotations

import math

import numpy as np
import pytest
import scipy.signal
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from fitkit.capture import Capture
from fitkit.conditioning import analyse_steps, find_edges

DT = 1e-6


def _square(n_edges: int, *, samples_per_half: int, rng: np.random.Generator, tau_samples: float = 20.0,
            noise: float = 0.0, bits: int | None = None, phase: float = 0.37, high_first: bool = False):
    """(time, input, output, true edge times) of a square wave with n_edges edges.

    Edges sit ``phase`` of a sample after a sample instant, so sub-sample timing matters.
    The input switches between 0 and 1 exactly at each edge (the sample after the edge is
    the first at the new level); the output is the first-order response, plus noise,
    both quantised to ``bits`` over -0.5 .. 1.5 when given.
    """
    n = (n_edges + 1) * samples_per_half
    t = np.arange(n) * DT
    edges = (np.arange(1, n_edges + 1) * samples_per_half + phase) * DT
    level = np.searchsorted(edges, t, side="left") % 2  # number of edges passed, mod 2
    u = (1 - level if high_first else level).astype(float)
    a = math.exp(-1.0 / tau_samples)
    y0 = u[0]
    y = scipy.signal.lfilter([1 - a], [1, -a], u - y0) + y0
    u = u + rng.normal(0, noise, n) if noise else u
    y = y + rng.normal(0, noise, n) if noise else y
    if bits:
        q = 2.0 / 2 ** bits
        u = np.round((u + 0.5) / q) * q - 0.5
        y = np.round((y + 0.5) / q) * q - 0.5
    return t, u, y, edges


@pytest.mark.parametrize("n_edges", [2, 3, 5, 8, 13, 21, 34, 50])
def test_square_wave_every_edge_found_none_invented(n_edges):
    rng = np.random.default_rng(1000 + n_edges)
    t, u, y, truth = _square(n_edges, samples_per_half=200, rng=rng, noise=0.03, bits=8,
                             high_first=bool(n_edges % 2))
    a = analyse_steps(Capture.from_arrays(t, {"drive": u, "response": y}))
    found = np.array([e.time for e in a.edges])
    assert found.size == n_edges  # none missed, none invented (truth: our construction)
    # the input steps between two samples: its 50 % crossing lies within that sample interval
    assert np.all(np.abs(found - truth) <= DT)
    directions = [e.direction for e in a.edges]
    first = -1 if n_edges % 2 else 1
    assert directions == [first * (-1) ** k for k in range(n_edges)]
    assert len(a.segments) == n_edges
    # every window keeps the capture's own sample indices
    for seg in a.segments:
        assert np.array_equal(seg.time, t[seg.start:seg.stop])
        assert np.array_equal(seg.output, y[seg.start:seg.stop])


@pytest.mark.parametrize("seed", range(6))
def test_output_only_8bit_noisy_square_wave_at_20db(seed):
    """Single channel, the response only: noise sigma = step / 10 (20 dB), 8-bit codes."""
    rng = np.random.default_rng(seed)
    n_edges = int(rng.integers(2, 30))
    tau = 15.0
    t, _, y, truth = _square(n_edges, samples_per_half=300, rng=rng, tau_samples=tau, noise=0.1, bits=8)
    a = analyse_steps(Capture.from_arrays(t, {"scope": y}))
    found = np.array([e.time for e in a.edges])
    assert a.input_channel is None and found.size == n_edges
    # on the output alone an edge is its own 50 % crossing: tau ln 2 after the drive's edge
    # (first-order step response), give or take the noise on a slope of 1/tau per second
    lag = tau * math.log(2) * DT
    assert np.all(np.abs(found - truth - lag) < 0.4 * tau * DT)
    assert a.quantisation_step == pytest.approx(2.0 / 256, rel=1e-9)


@pytest.mark.parametrize("seed", range(4))
def test_two_channel_8bit_noisy_capture_at_20db(seed):
    rng = np.random.default_rng(50 + seed)
    n_edges = int(rng.integers(2, 50))
    t, u, y, truth = _square(n_edges, samples_per_half=250, rng=rng, noise=0.1, bits=8)
    a = analyse_steps(Capture.from_arrays(t, {"ch1": y, "ch2": u}))
    assert a.input_channel == "ch2"  # the drive has the sharper edges
    found = np.array([e.time for e in a.edges])
    assert found.size == n_edges
    assert np.all(np.abs(found - truth) <= 1.5 * DT)


@settings(max_examples=25, deadline=None, derandomize=True, suppress_health_check=[HealthCheck.too_slow])
@given(gain=st.floats(0.01, 100.0), offset=st.floats(-50.0, 50.0), shift=st.floats(-1e-3, 1e-3),
       seed=st.integers(0, 10_000), falling_first=st.booleans())
def test_edges_and_metrics_invariant_to_offset_gain_and_shift_in_time(gain, offset, shift, seed, falling_first):
    rng = np.random.default_rng(seed)
    t, u, y, _ = _square(4, samples_per_half=150, rng=rng, noise=0.02, bits=10, high_first=falling_first)
    ref = analyse_steps(Capture.from_arrays(t, {"in": u, "out": y}))
    moved = analyse_steps(Capture.from_arrays(t + shift, {"in": gain * u + offset, "out": gain * y + offset}))
    assert len(moved.edges) == len(ref.edges) == 4
    for e0, e1 in zip(ref.edges, moved.edges):
        assert e1.time == pytest.approx(e0.time + shift, abs=1e-6 * DT)  # shifts with the time axis
        assert e1.direction == e0.direction
    for m0, m1 in zip(ref.metrics, moved.metrics):
        for name in ("rise_time", "fall_time", "delay", "settling_time"):
            v0, v1 = getattr(m0, name), getattr(m1, name)
            assert (v0 is None) == (v1 is None), name
            if v0 is not None:  # times relative to the edge: unchanged
                assert v1 == pytest.approx(v0, abs=1e-6 * DT), name
        for name in ("overshoot_percent", "undershoot_percent"):  # in % of the step: unchanged
            assert getattr(m1, name) == pytest.approx(getattr(m0, name), abs=1e-6), name
        assert m1.step == pytest.approx(gain * m0.step, rel=1e-9)
        assert m1.baseline == pytest.approx(gain * m0.baseline + offset, rel=1e-9, abs=1e-9 * gain)
    assert moved.noise_rms == pytest.approx(gain * ref.noise_rms, rel=1e-6)


@settings(max_examples=20, deadline=None, derandomize=True)
@given(gain=st.floats(0.1, 10.0), offset=st.floats(-5.0, 5.0), shift=st.floats(-1e-3, 1e-3),
       seed=st.integers(0, 10_000))
def test_single_channel_8bit_detection_invariant_and_complete(gain, offset, shift, seed):
    rng = np.random.default_rng(seed)
    n_edges = int(rng.integers(2, 12))
    t, _, y, truth = _square(n_edges, samples_per_half=200, rng=rng, noise=0.1, bits=8)
    edges = find_edges(Capture.from_arrays(t + shift, {"y": gain * y + offset}))
    ref = find_edges(Capture.from_arrays(t, {"y": y}))
    assert len(edges) == len(ref) == n_edges
    for e0, e1 in zip(ref, edges):
        assert e1.time == pytest.approx(e0.time + shift, abs=1e-6 * DT)


def test_inverted_trace_flips_directions_only():
    rng = np.random.default_rng(7)
    t, u, y, _ = _square(6, samples_per_half=150, rng=rng, noise=0.01)
    ref = analyse_steps(Capture.from_arrays(t, {"in": u, "out": y}))
    inv = analyse_steps(Capture.from_arrays(t, {"in": -u, "out": -y}))
    assert [e.direction for e in inv.edges] == [-e.direction for e in ref.edges]
    for m0, m1 in zip(ref.metrics, inv.metrics):
        # a rising output becomes a falling one of the same duration, and vice versa
        assert (m1.rise_time is None) == (m0.fall_time is None)
        assert m1.transition_time == pytest.approx(m0.transition_time, rel=1e-9)
        assert m1.overshoot_percent == pytest.approx(m0.overshoot_percent, abs=1e-9)


def test_forced_edge_time_gives_one_edge_there():
    rng = np.random.default_rng(3)
    t, u, y, truth = _square(1, samples_per_half=400, rng=rng, noise=0.01)
    a = analyse_steps(Capture.from_arrays(t, {"out": y}), edge_time=float(truth[0]))
    assert len(a.edges) == 1 and a.edges[0].time == truth[0] and a.edges[0].direction == 1
    # the delay is measured from the given edge: first order 50 % at tau ln 2 (20 samples here)
    assert a.metrics[0].delay == pytest.approx(20 * math.log(2) * DT, abs=0.5 * DT)


def test_forced_edge_window_stops_before_the_next_edge():
    rng = np.random.default_rng(4)
    t, u, y, truth = _square(5, samples_per_half=300, rng=rng, noise=0.01)
    a = analyse_steps(Capture.from_arrays(t, {"in": u, "out": y}), edge_time=float(truth[2]))
    seg = a.segments[0]
    assert len(a.segments) == 1 and seg.edge_time == truth[2]
    assert truth[1] < seg.time[0] < truth[2] < seg.time[-1] < truth[3]
    assert a.edges[0].direction == 1 and a.metrics[0].rise_time is not None  # starts low: third edge rises


@pytest.mark.parametrize("q_factor", [3.0, 5.0, 10.0])
def test_one_ringing_step_is_one_edge(q_factor):
    # A single step into a resonant low-pass, output only, recorded while it
    # still rings: its histogram shows no clear second level and its ringing
    # swings are as steep as the edge. It ends at another level than it
    # started, so it is one step, not a train of jumps. Response:
    # scipy.signal.step of w0^2 / (s^2 + (w0/Q) s + w0^2).
    f0 = 10e3
    w0 = 2 * math.pi * f0
    dt = 1 / w0 / 10
    t = np.arange(-144, 720) * dt
    clean = np.zeros(t.size)
    _, clean[t >= 0] = scipy.signal.step(([w0**2], [1, w0 / q_factor, w0**2]), T=t[t >= 0])
    y = 0.5 + 2.5 * clean + np.random.default_rng(1).normal(0, 0.0025, t.size)
    analysis = analyse_steps(Capture.from_arrays(t, {"vout": y}))
    assert len(analysis.segments) == 1
    # the edge time is the 50 % crossing (IEEE Std 181), which a second-order
    # response reaches about 1-2 / w0 after the step
    assert 0.0 < analysis.segments[0].edge_time < 3.0 / w0
    assert analysis.segments[0].direction == 1


def _band_pass(q_factor: float, u: np.ndarray, t: np.ndarray, bits: int, seed: int) -> np.ndarray:
    """Series RLC measured across R (a band-pass, H = (w0/Q) s / (s^2 + (w0/Q) s + w0^2)) driven
    by ``u``, simulated with scipy.signal.lsim, plus 3 mV rms band-limited noise (white noise
    through a second-order Butterworth low-pass at a fifth of the Nyquist frequency), rounded to
    ``bits`` over -1.2 .. 1.2 V."""
    w0 = 2 * math.pi * 10e3
    _, y, _ = scipy.signal.lsim(([w0 / q_factor, 0.0], [1.0, w0 / q_factor, w0**2]), u, t - t[0])
    rng = np.random.default_rng(seed)
    b, a = scipy.signal.butter(2, 0.2)
    w = scipy.signal.lfilter(b, a, rng.normal(0, 1, t.size))
    lsb = 2.4 / 2**bits
    return np.round((y + 3e-3 * w / w.std()) / lsb) * lsb


@pytest.mark.parametrize("q_factor", [2.5, 3.2, 4.5, 10.0])
@pytest.mark.parametrize("bits", [8, 12])
def test_ringing_swing_of_a_band_pass_step_is_not_an_edge(q_factor, bits):
    # One step into a band-pass, output only: the response leaps, rings and returns to where it
    # started. Its first ringing swing is as steep as most of the leap (e^(-pi / 2Q) of it), so
    # the jump search took each swing for an edge of its own and the fit got a split capture
    # (the board check's part values of a series RLC measured across R came out 2-4 % off).
    # A swing that turns the trace back before it rests is the ringing of the edge before.
    w0 = 2 * math.pi * 10e3
    alpha = w0 / (2 * q_factor)
    t = np.linspace(-0.7 / alpha, 6.3 / alpha, 1000)
    y = _band_pass(q_factor, (t >= 0).astype(float), t, bits, seed=3)
    analysis = analyse_steps(Capture.from_arrays(t, {"vout": y}))
    assert len(analysis.edges) == 1, [e.time for e in analysis.edges]
    assert analysis.edges[0].direction == 1 and 0.0 <= analysis.edges[0].time < 0.2 / alpha


@pytest.mark.parametrize("q_factor", [0.5, 3.2])
def test_band_pass_square_wave_keeps_every_edge_after_the_ringing(q_factor):
    # A square wave into the same band-pass, slow enough for the response to die down between
    # edges: every drive edge is still an edge (4), each in its own direction, and none of the
    # ringing swings between them is.
    w0 = 2 * math.pi * 10e3
    alpha = w0 / (2 * q_factor)
    half = 9.0 / alpha
    t = np.linspace(-0.5 * half, 4 * half, 3000)
    u = ((np.floor(np.maximum(t, 0) / half) % 2 == 0) & (t >= 0)).astype(float)
    y = _band_pass(q_factor, u, t, 12, seed=4)
    edges = find_edges(Capture.from_arrays(t, {"vout": y}))
    assert [e.direction for e in edges] == [1, -1, 1, -1]
    assert np.allclose([e.time for e in edges], np.arange(4) * half, atol=0.2 / alpha)
