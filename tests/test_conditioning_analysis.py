"""The top-level analysis: channel choice, quality flags, high-pass segments, averaging,
errors, JSON and text output, real captures and speed.

References: first-order high-pass step response exp(-t / tau) and its 90-10 %
decay time tau ln 9 (same algebra as the textbook first-order rise time, Ogata);
white noise averaged over N records has 1 / sqrt(N) of its standard deviation
(common practice, no source); the real captures' SOURCE.md in
../shared/reference/real-captures (edge counts and steps stated there).
"""

from __future__ import annotations

import json
import math
import time

import numpy as np
import pytest
import scipy.signal

from fitkit.capture import Capture
from fitkit.conditioning import analyse_steps, render_text
from fitkit.errors import ConditioningError, FitkitError, OptionError
from support.reference_paths import REAL_CAPTURES, needs_real_captures

DT = 1e-6
REAL = REAL_CAPTURES


def _rc_step(*, tau_samples=20.0, pre=200, post=400, noise=0.0, seed=0, high_pass=False, amplitude=1.0):
    """Single step at t = (pre - 0.5) DT; first-order low-pass (or high-pass) response."""
    rng = np.random.default_rng(seed)
    n = pre + post
    t = np.arange(n) * DT
    u = amplitude * (np.arange(n) >= pre).astype(float)
    a = math.exp(-1.0 / tau_samples)
    low = scipy.signal.lfilter([1 - a], [1, -a], u)  # sampled first-order low-pass
    y = u - low if high_pass else low  # high-pass = input minus low-pass (1 - 1/(1+s tau))
    if noise:
        y = y + rng.normal(0, noise, n)
    return t, u, y


def test_one_channel_is_the_output_and_says_so():
    t, _, y = _rc_step(noise=0.01)
    a = analyse_steps(Capture.from_arrays(t, {"v": y}))
    assert a.input_channel is None and a.output_channel == "v" and a.edge_channel == "v"
    assert any("one channel" in d for d in a.decisions)
    assert a.metrics[0].delay is None  # edges found on the output itself: no delay


def test_sharpest_channel_becomes_the_input_whatever_its_position():
    t, u, y = _rc_step(noise=0.01)
    a = analyse_steps(Capture.from_arrays(t, {"a": y, "b": u}))
    assert (a.input_channel, a.output_channel) == ("b", "a")
    assert any("sharpest" in d for d in a.decisions)
    # named by the user (1-based position or name), no choice is made
    named = analyse_steps(Capture.from_arrays(t, {"a": y, "b": u}), input=2, output="a")
    assert (named.input_channel, named.output_channel) == ("b", "a")
    assert not any("sharpest" in d for d in named.decisions)


def test_high_pass_pair_picks_the_two_level_drive_even_when_listed_second():
    t, u, y = _rc_step(tau_samples=30, post=800, noise=0.005, seed=7, high_pass=True)
    a = analyse_steps(Capture.from_arrays(t, {"ch1": y, "ch2": u}))  # both jump in one sample
    assert a.input_channel == "ch2"
    assert any("two levels" in d for d in a.decisions)


def test_same_channel_for_input_and_output_is_an_option_error():
    t, u, y = _rc_step()
    with pytest.raises(OptionError):
        analyse_steps(Capture.from_arrays(t, {"a": y, "b": u}), input="a", output="a")


def test_no_edge_is_a_clear_error_naming_the_option():
    rng = np.random.default_rng(5)
    t = np.arange(1000) * DT
    cap = Capture.from_arrays(t, {"flat": 0.5 + rng.normal(0, 0.01, t.size)}, path="bench/board_7.csv")
    with pytest.raises(ConditioningError) as info:
        analyse_steps(cap)
    line = info.value.one_line()
    assert line.startswith("bench/board_7.csv: no edge found in channel 'flat'")
    assert "looked for" in line and "--edge-time" in line
    assert "\n" not in line


def test_forced_edge_outside_the_record_is_an_error():
    t, _, y = _rc_step()
    with pytest.raises(ConditioningError, match="outside the capture"):
        analyse_steps(Capture.from_arrays(t, {"v": y}), edge_time=1.0)


def test_gaps_in_a_channel_are_an_error():
    t, u, y = _rc_step()
    y = y.copy()
    y[300] = np.nan
    with pytest.raises(ConditioningError, match="1 samples that are not finite"):
        analyse_steps(Capture.from_arrays(t, {"in": u, "out": y}))


def test_bad_options_are_errors():
    t, u, y = _rc_step()
    cap = Capture.from_arrays(t, {"in": u, "out": y})
    with pytest.raises(OptionError):
        analyse_steps(cap, reference_levels=(0.9, 0.1))
    with pytest.raises(OptionError):
        analyse_steps(cap, settling_band=0.0)


def _flags(a):
    return " | ".join(a.flags)


def test_clean_capture_has_no_flags():
    t, u, y = _rc_step(noise=0.005, seed=1)
    a = analyse_steps(Capture.from_arrays(t, {"in": u, "out": y}))
    assert a.flags == () and a.segments[0].settled


@pytest.mark.parametrize("seed", range(10))
def test_noise_is_not_reported_as_overshoot_of_a_first_order_rise(seed):
    # a first-order step response never overshoots (y = 1 - exp(-t/tau), Ogata)
    t, u, y = _rc_step(noise=0.01, seed=100 + seed, post=2000)
    m = analyse_steps(Capture.from_arrays(t, {"in": u, "out": y})).metrics[0]
    assert m.overshoot_percent == 0.0 and m.peak_time is None and m.preshoot_percent == 0.0


@pytest.mark.parametrize("noise", [0.003, 0.01, 0.03])
def test_settling_time_holds_up_in_noise(noise):
    # first-order 2 % settling time tau ln 50 (Ogata); noise up to 1.5 x the band's half-width
    tau = 40.0
    found = []
    for seed in range(5):
        t, u, y = _rc_step(noise=noise, seed=200 + seed, post=2000, tau_samples=tau)
        found.append(analyse_steps(Capture.from_arrays(t, {"in": u, "out": y})).metrics[0].settling_time)
    assert np.all(np.abs(np.array(found) / (tau * DT * math.log(50)) - 1) < 0.12)


def test_flag_window_too_short_to_settle():
    t, u, y = _rc_step(tau_samples=100.0, post=120, noise=0.005, seed=2)  # 1.2 tau after the edge
    a = analyse_steps(Capture.from_arrays(t, {"in": u, "out": y}))
    assert not a.segments[0].settled
    assert "too short for the response to settle" in _flags(a)
    assert a.metrics[0].settling_time is None


def test_flag_too_few_samples_across_the_rise():
    t, u, y = _rc_step(tau_samples=1.0, noise=0.002, seed=3)  # rise of 2.2 samples
    a = analyse_steps(Capture.from_arrays(t, {"in": u, "out": y}))
    assert a.metrics[0].samples_across_transition < 5
    assert "samples across the 10-90 % rise" in _flags(a)


def test_flag_too_little_baseline_before_the_edge():
    t, u, y = _rc_step(pre=4, post=600, noise=0.002, seed=4)
    a = analyse_steps(Capture.from_arrays(t, {"in": u, "out": y}))
    assert a.segments[0].n_before_edge == 4
    assert "too little baseline before the edge" in _flags(a)


def test_flag_clipped_samples():
    rng = np.random.default_rng(6)
    wn, zeta = 2 * math.pi * 20e3, 0.2
    n, pre = 1200, 200
    t = np.arange(n) * DT
    # underdamped second order (scipy.signal simulator), overshoot 53 %, clipped at 1.3 on screen
    _, y_post = scipy.signal.lti([wn ** 2], [1, 2 * zeta * wn, wn ** 2]).step(T=t[:n - pre])
    y = np.concatenate((np.zeros(pre), y_post)) + rng.normal(0, 0.01, n)
    u = (np.arange(n) >= pre).astype(float)
    clean = analyse_steps(Capture.from_arrays(t, {"in": u, "out": y}))
    assert "clipped" not in _flags(clean)
    clipped = analyse_steps(Capture.from_arrays(t, {"in": u, "out": np.minimum(y, 1.3)}))
    assert "look clipped" in _flags(clipped) and "'out'" in _flags(clipped)


def test_high_pass_segment_returns_to_baseline_and_takes_the_input_step():
    tau = 30.0
    t, u, y = _rc_step(tau_samples=tau, post=800, noise=0.005, seed=7, high_pass=True, amplitude=2.0)
    a = analyse_steps(Capture.from_arrays(t, {"in": u, "out": y}))
    seg, m = a.segments[0], a.metrics[0]
    assert seg.returns_to_baseline and seg.step_source == "input step"
    assert seg.step_size == pytest.approx(2.0, abs=0.01)
    assert seg.final == pytest.approx(seg.baseline, abs=0.01)
    assert m.response == "returns to baseline" and m.rise_time is None
    # first-order high-pass: excursion exp(-t/tau), 90 % -> 10 % in tau ln 9 (as the rise, Ogata)
    assert m.decay_time == pytest.approx(tau * math.log(9) * DT, rel=0.03)
    assert "returns to its baseline" in _flags(a)


def test_high_pass_square_wave_on_one_channel_finds_the_jumps_only():
    rng = np.random.default_rng(8)
    per_half, n_edges, tau = 300, 6, 25.0
    n = per_half * (n_edges + 1)
    u = ((np.arange(n) // per_half) % 2).astype(float)
    a_ = math.exp(-1.0 / tau)
    y = u - scipy.signal.lfilter([1 - a_], [1, -a_], u) + rng.normal(0, 0.01, n)
    a = analyse_steps(Capture.from_arrays(np.arange(n) * DT, {"coil": y}))
    assert len(a.edges) == n_edges  # no edge invented on the decays
    assert "jumps" in a.edge_method
    assert all(s.returns_to_baseline and s.step_source == "output peak excursion" for s in a.segments)
    assert [e.direction for e in a.edges] == [(-1) ** k for k in range(n_edges)]


def test_square_wave_response_that_never_settles_is_still_segmented():
    # first-order low-pass with tau = half a half-period: reaches 1 - exp(-2) = 86 % before the
    # next edge (y = 1 - exp(-t/tau)), so the trace has no flat levels and no jumps
    rng = np.random.default_rng(11)
    per_half, n_edges, tau = 200, 9, 100.0
    n = per_half * (n_edges + 1)
    u = ((np.arange(n) // per_half) % 2).astype(float)
    a_ = math.exp(-1.0 / tau)
    y = scipy.signal.lfilter([1 - a_], [1, -a_], u) + rng.normal(0, 0.005, n)
    a = analyse_steps(Capture.from_arrays(np.arange(n) * DT, {"y": y}))
    assert len(a.edges) == n_edges and "does not settle" in a.edge_method
    assert not any(s.settled for s in a.segments)
    assert "too short for the response to settle" in _flags(a)


def test_coherent_average_reduces_noise_and_keeps_the_timing():
    rng = np.random.default_rng(9)
    per_half, n_edges, tau = 250, 40, 20.0
    n = per_half * (n_edges + 1)
    phase = 0.41
    idx = np.arange(n)
    u = (((idx - phase) // per_half) % 2).astype(float)
    a_ = math.exp(-1.0 / tau)
    y = scipy.signal.lfilter([1 - a_], [1, -a_], u) + rng.normal(0, 0.05, n)
    cap = Capture.from_arrays(idx * DT, {"in": u, "out": y})
    raw = analyse_steps(cap)
    avg = analyse_steps(cap, average=True)
    assert avg.averaged and len(avg.segments) == 2
    assert sorted(s.averaged_edges for s in avg.segments) == [20, 20]
    # white noise of N averaged edges: 1/sqrt(N) of one edge's (common practice, no source)
    assert avg.segments[0].noise_rms == pytest.approx(raw.segments[0].noise_rms / math.sqrt(20), rel=0.2)
    truth = tau * math.log(9) * DT  # sampled first order: rise tau ln 9 (Ogata)
    raw_err = np.array([m.transition_time - truth for m in raw.metrics])
    avg_err = np.array([m.transition_time - truth for m in avg.metrics])
    assert np.all(np.abs(avg_err) < 0.06 * truth)
    assert np.sqrt(np.mean(avg_err ** 2)) < np.sqrt(np.mean(raw_err ** 2))


def test_to_dict_is_json_and_text_is_aligned_plain_text():
    t, u, y = _rc_step(noise=0.01, seed=10)
    a = analyse_steps(Capture.from_arrays(t, {"in": u, "out": y}, path="x.csv"))
    d = a.to_dict()
    text = json.dumps(d, allow_nan=False)
    assert json.loads(text)["segments"][0]["metrics"]["rise_time"] == pytest.approx(a.metrics[0].rise_time)
    assert d["file"] == "x.csv" and d["input_channel"] == "in" and len(d["edges"]) == 1
    out = render_text(a)
    assert "rise time 10-90 %" in out and "us" in out and "Decisions" in out
    assert "\t" not in out and "nan" not in out.lower()


@needs_real_captures
def test_real_rc_ladder_capture_from_a_microcontroller():
    """SOURCE.md: 10 Hz square wave from a DAC, 1 kHz ADC, 51 rising edges, 5,120 rows."""
    pd = pytest.importorskip("pandas")
    df = pd.read_csv(REAL / "rc-ladder-adc-step.csv")
    cap = Capture.from_arrays(df["Time"].to_numpy(), {"ADC": df["ADC"].to_numpy(), "DAC": df["DAC"].to_numpy()})
    a = analyse_steps(cap)
    assert a.input_channel == "DAC" and a.output_channel == "ADC"
    assert sum(e.direction > 0 for e in a.edges) == 51  # SOURCE.md: 51 rising edges
    assert a.edges[1].time - a.edges[0].time == pytest.approx(0.05, abs=1e-9)  # 10 Hz square wave
    # stated parts predict a slow pole of 4.56 ms (SOURCE.md); a two-pole rise is slower than the
    # slow pole's own tau ln 9 = 10 ms, and well under the settling window of 50 ms
    avg = analyse_steps(cap, average=True)
    rise = next(m.rise_time for m in avg.metrics if m.rise_time is not None)
    assert 4.56e-3 * math.log(9) < rise < 0.02
    assert not any("too short" in f for f in avg.flags)


@needs_real_captures
def test_real_rl_scope_capture_is_one_decaying_spike():
    """SOURCE.md: inductor voltage, coarse 0.08 V steps, decay time constant near 9 us."""
    pd = pytest.importorskip("pandas")
    df = pd.read_csv(REAL / "rl-square-scope.csv")
    n = len(df)
    t = df.iloc[:, 0].to_numpy()
    uniform = t[0] + np.arange(n) * (t[-1] - t[0]) / (n - 1)  # times are rounded in the file
    a = analyse_steps(Capture.from_arrays(uniform, {"Vout": df.iloc[:, 1].to_numpy()}))
    assert len(a.edges) == 1 and a.segments[0].returns_to_baseline
    assert a.quantisation_step == pytest.approx(0.08, rel=1e-6)  # SOURCE.md: steps of 0.08 V
    tau = a.metrics[0].decay_time / math.log(9)
    assert 7e-6 < tau < 11e-6  # SOURCE.md: "a time constant near 9 us"


def test_one_million_samples_condition_quickly():
    rng = np.random.default_rng(12)
    n = 1_000_000
    idx = np.arange(n)
    u = ((idx // 10_000) % 2).astype(float)
    a_ = math.exp(-1.0 / 500.0)
    y = scipy.signal.lfilter([1 - a_], [1, -a_], u) + rng.normal(0, 0.01, n)
    cap = Capture.from_arrays(idx * DT, {"in": u, "out": y})
    start = time.perf_counter()
    a = analyse_steps(cap)
    elapsed = time.perf_counter() - start
    assert len(a.edges) == 99
    assert elapsed < 2.5  # target well under 1 s; loose bound for a shared 2-core machine


def test_errors_are_fitkit_errors():
    assert issubclass(ConditioningError, FitkitError)


@pytest.mark.parametrize("noise_codes, flagged", [(0.05, True), (1.5, False)])
def test_noise_below_one_code_is_flagged(noise_codes, flagged):
    # 8-bit trace of a first-order step (1 - exp(-t/tau), any circuit text):
    # with noise far below a code the rounding error follows the signal
    # (Widrow & Kollar, Quantization Noise, 2008, from memory), so the user is told.
    rng = np.random.default_rng(12)
    t = np.arange(-500, 4500) * 1e-6
    code = 2.0 / 256
    clean = np.where(t > 0, 1.0 - np.exp(-np.clip(t, 0, None) / 5e-4), 0.0)
    v = code * np.round((clean + rng.normal(0.0, noise_codes * code, t.size)) / code)
    analysis = analyse_steps(Capture.from_arrays(t, {"vout": v}, path="quantised.csv"))
    said = any("below one quantisation code" in f for f in analysis.flags)
    assert said == flagged
