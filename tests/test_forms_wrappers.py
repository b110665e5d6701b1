"""The dead-time and pulse wrappers, on every form, against scipy.signal.lsim.

Sources named beside each check:
* scipy.signal.lsim of the wrapped form's own transfer function driven by a
  shifted step (dead time) or by a rectangular pulse (pulse response), with a
  zero-order-hold input whose edges fall on samples, so the simulation is exact;
* the fitting engine end to end on simulated captures (truth known).
"""

import math

import numpy as np
import pytest
import scipy.signal

from fitkit.conditioning.segment import StepSegment
from fitkit.errors import OptionError
from fitkit.fitting import fit_segments
from fitkit.forms import FORMS, delayed, get_form, pulse_response
from fitkit.forms.dead_time import trial_delays
from fitkit.forms.pulse import step_from_pulse
from test_forms_metrics import SAMPLE_SHAPES

TOL = 1e-6  # agreement with lsim, in units of the step


def _case(name):
    """(form, its sample shape, a time grid from 0 over the response of 6001 samples, spacing)."""
    form, shape = FORMS[name], SAMPLE_SHAPES[name]
    return (form, shape, *_grid(form, shape))


def _grid(form, shape):
    """A time grid from 0 over the response, 6000 samples, and its spacing."""
    settle = form.derived(**shape).get("settling_time_2pct")
    span = 2.0 * settle if settle else 20.0 * form.derived(**shape)["peak_time"]
    t = np.linspace(0.0, span, 6001)
    return t, t[1]


def _lsim(form, shape, u, t):
    """scipy.signal.lsim of the form's transfer function, input held between samples."""
    _, y, _ = scipy.signal.lsim(form.transfer_function(**shape), u, t, interp=False)
    return y


@pytest.mark.parametrize("name", list(FORMS))
def test_delayed_form_matches_lsim_of_a_shifted_step(name):
    # reference: scipy.signal.lsim of H(s) with the input step delayed by a whole number of samples
    base, shape, t, dt = _case(name)
    delay = 700 * dt
    form = delayed(base)
    got = form.unit_step(t, **shape, delay=delay)
    want = _lsim(form, {**shape, "delay": delay}, (t >= delay - dt / 2).astype(float), t)
    assert np.max(np.abs(got - want)) < TOL
    assert np.all(got[t < delay] == 0.0)


@pytest.mark.parametrize("name", list(FORMS))
def test_pulse_response_matches_lsim_of_a_pulse(name):
    # reference: scipy.signal.lsim of H(s) driven by a rectangular pulse starting at t = 0
    base, shape, t, dt = _case(name)
    width = 450 * dt
    form = pulse_response(base, width)
    u = ((t >= -dt / 2) & (t < width - dt / 2)).astype(float)
    assert np.max(np.abs(form.unit_step(t, **shape) - _lsim(base, shape, u, t))) < TOL
    # the width as a shape parameter (as the engine passes it) gives the same response
    assert np.array_equal(form.unit_step(t, **shape, pulse_width=width), form.unit_step(t, **shape))
    assert form.final_value == 0.0 and form.held == {"pulse_width": width}


def test_wrapped_names_shapes_and_registry():
    d = get_form("first-order-with-delay")
    assert d is delayed(FORMS["first-order"]) and delayed(d) is d
    assert d.shape_names == ("tau", "delay") and d.derived_units["delay"] == "s"
    # forms fitted in internal coordinates are wrapped in their reported ones
    assert get_form("two-real-pole-with-delay").shape_names == ("tau1", "tau2", "delay")
    assert pulse_response(FORMS["two-real-pole-band-pass"], 1e-5).shape_names == ("tau1", "tau2", "pulse_width")
    assert get_form("two-real-pole-with-delay").canonical_shape({"tau1": 1.0, "tau2": 2.0, "delay": 3.0}) == \
        {"tau1": 2.0, "tau2": 1.0, "delay": 3.0}
    with pytest.raises(OptionError):
        get_form("no-such-form-with-delay")
    with pytest.raises(OptionError):
        pulse_response(FORMS["first-order"], 0.0)


@pytest.mark.parametrize("name", ["first-order", "two-real-pole", "underdamped", "underdamped-band-pass"])
def test_delayed_guesses_are_positive_and_one_delay_is_near_the_truth(name):
    base, shape, t, dt = _case(name)
    t = np.concatenate([-t[1:600][::-1], t])
    delay = 300 * dt
    y = delayed(base).unit_step(t, **shape, delay=delay)
    y = y / (np.max(np.abs(y)) if base.final_value == 0 else 1.0)
    y = y + 0.01 * np.random.default_rng(4).standard_normal(t.size)
    starts = delayed(base).guess(t, y)
    assert 1 <= len(starts) <= 12
    assert all(set(s) == set(delayed(base).shape_names) and min(s.values()) > 0 for s in starts)
    assert min(abs(math.log(d / delay)) for d in trial_delays(t, y)) < math.log(1.5)


def test_step_rebuilt_from_a_pulse_response():
    # s(t) = p(t) + s(t - W) read backwards; checked against the form's own step response
    form = FORMS["two-real-pole"]
    t = np.linspace(-1e-3, 1e-2, 5501)
    shape = {"tau1": 1e-3, "tau2": 2e-4}
    for width in (2e-4, 7.3e-4, 3e-3):
        p = pulse_response(form, width).unit_step(t, **shape)
        assert np.max(np.abs(step_from_pulse(t, p, width) - form.unit_step(t, **shape))) < 2e-3


def _segment(form, shape, dt, n_pre, n_post, sigma, seed, with_input=False):
    """A simulated capture (0.5 V baseline, 2.5 V step at t0 = 0) as one StepSegment. With an
    input channel, the sampled input step's piecewise-linear reading crosses mid-level half a
    sample early, so the output's true edge is put there."""
    t = np.arange(-n_pre, n_post) * dt
    t0 = -dt / 2 if with_input else 0.0
    rng = np.random.default_rng(seed)
    y = form.response(t, baseline=0.5, step=2.5, t0=t0, **shape) + sigma * rng.standard_normal(t.size)
    u = (t >= 0).astype(float) if with_input else None
    extra = dict(input_before=0.0, input_after=1.0) if with_input else {}
    return StepSegment(0, t.size, t, y, u, t0, 1, float(y[t < 0].mean()), float(y[-n_post // 10:].mean()),
                       noise_rms=sigma, **extra)


def test_logger_one_sample_late_is_measured_with_the_input_channel():
    # the bench case: an RC read by a logger one sample period (1 ms) late, drive channel recorded
    form = get_form("first-order-with-delay")
    seg = _segment(form, {"tau": 5e-3, "delay": 1e-3}, 1e-3, 30, 60, 0.01, seed=1, with_input=True)
    r = fit_segments([seg], form)
    for k, v in {"tau": 5e-3, "delay": 1e-3}.items():
        lo, hi = r.parameters[k].ci95
        assert lo - (hi - lo) / 2 <= v <= hi + (hi - lo) / 2, r.parameters[k]


def test_a_delay_the_data_do_not_show_is_not_reported_as_a_measurement():
    form = get_form("first-order-with-delay")
    # with the input channel and no dead time: not determined, or bounded below one sample
    seg = _segment(form, {"tau": 5e-3, "delay": 0.0}, 1e-3, 30, 60, 0.01, seed=2, with_input=True)
    est = fit_segments([seg], form).parameters["delay"]
    assert not est.determined or est.ci95[1] < 1e-3
    # ideal-step mode: the edge time t0 and the delay trade exactly, so the delay is not determined
    seg = _segment(form, {"tau": 5e-3, "delay": 1e-3}, 1e-4, 100, 400, 0.01, seed=3)
    r = fit_segments([seg], form)
    assert not r.parameters["delay"].determined
    assert r.parameters["tau"].ci95[0] <= 5e-3 <= r.parameters["tau"].ci95[1]


def test_pulse_response_fitted_with_its_width_held():
    # a 50 us drive pulse into a 100 us RC: tau, and the height of the equivalent step (2.5 V), not
    # the output's peak (about 1 V)
    form = pulse_response(FORMS["first-order"], 50e-6)
    seg = _segment(form, {"tau": 100e-6}, 2e-6, 60, 600, 0.01, seed=5)
    r = fit_segments([seg], form, fixed=form.held)
    assert r.parameters["pulse_width"].interval_method == "held fixed"
    for k, v in {"tau": 100e-6, "step": 2.5}.items():
        lo, hi = r.parameters[k].ci95
        assert lo - (hi - lo) / 2 <= v <= hi + (hi - lo) / 2, r.parameters[k]


@pytest.mark.parametrize("name", list(FORMS))
def test_jump_at_the_edge_is_declared_truthfully(name):
    # the engine may fit the edge time only of a response that starts continuously; each form's
    # declaration is checked against its own response just after the edge
    base, shape, t, dt = _case(name)
    start = float(np.abs(base.unit_step(np.array([1e-9 * dt]), **shape))[0])
    assert base.edge_jumps == (start > 1e-3), start
    assert delayed(base).edge_jumps == base.edge_jumps
    assert pulse_response(base, 10 * dt).edge_jumps == base.edge_jumps
