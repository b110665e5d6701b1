"""Derived quantities of the forms against textbook closed forms and python-control.

Sources named beside each check:
* Ogata, *Modern Control Engineering*, transient-response chapter (from memory): first-order 10-90 %
  rise time tau ln 9 and 2 % settling time tau ln 50 (from y = 1 - exp(-t/tau));
  percent overshoot 100 exp(-pi zeta / sqrt(1 - zeta^2)) and peak time pi / wd.
* Nise, *Control Systems Engineering*, frequency-response chapter: -3 dB
  bandwidth of the canonical second-order system
  w_bw = w0 sqrt(1 - 2 zeta^2 + sqrt(4 zeta^4 - 4 zeta^2 + 2)).
* python-control's step_info (RiseTime 10-90 %, SettlingTime 2 %) on the
  same transfer function.
"""

import math
import time

import numpy as np
import pytest

from fitkit.forms import FORMS
from fitkit.forms.first_order import FIRST_ORDER
from fitkit.forms.first_order_decay import FIRST_ORDER_DECAY
from fitkit.forms.metrics import half_power_frequency, step_metrics
from fitkit.forms.second_order import SECOND_ORDER, percent_overshoot, timing_metrics
from fitkit.forms.underdamped import UNDERDAMPED

SAMPLE_SHAPES = {
    "first-order": {"tau": 2e-6},
    "first-order-decay": {"tau": 3e-3},
    "two-real-pole": {"tau1": 1e-3, "tau2": 2e-4},
    "critically-damped": {"tau": 5e-9},
    "underdamped": {"f0": 2e4, "Q": 4.0},
    "second-order": {"f0": 50.0, "Q": 0.3},
    "three-real-pole": {"tau1": 1.0, "tau2": 0.4, "tau3": 0.1},
    "four-real-pole": {"tau1": 1e-3, "tau2": 1e-3, "tau3": 5e-4, "tau4": 1e-4},
    "five-real-pole": {"tau1": 2.0, "tau2": 1.0, "tau3": 1.0, "tau4": 0.5, "tau5": 0.1},
    "pole-zero": {"tau_z": 3e-3, "tau1": 1e-3, "tau2": 2e-4},
    "underdamped-band-pass": {"f0": 1.5e3, "Q": 2.0},
    "two-real-pole-band-pass": {"tau1": 178e-6, "tau2": 62e-6},
    "underdamped-zero": {"f0": 1e3, "Q": 2.0, "tau_z": 1e-4},
    "underdamped-undershoot": {"f0": 1e3, "Q": 2.0, "tau_z": 1e-4},
    "two-real-pole-undershoot": {"tau_z": 3e-4, "tau1": 1e-3, "tau2": 2e-4},
}


def test_every_form_has_a_sample_shape():
    assert set(SAMPLE_SHAPES) == set(FORMS)


@pytest.mark.parametrize("tau", [1e-9, 1e-3, 7.0])
def test_first_order_metrics_match_textbook(tau):
    # Ogata, transient-response chapter: 10-90 % rise tau ln 9, 2 % settling tau ln 50, -3 dB at 1/(2 pi tau)
    m = step_metrics(lambda t: FIRST_ORDER.unit_step(t, tau=tau), horizon=5 * tau, resolution=tau / 20)
    assert m["rise_time"] == pytest.approx(tau * math.log(9.0), rel=1e-12)
    assert m["settling_time_2pct"] == pytest.approx(tau * math.log(50.0), rel=1e-12)
    assert m["overshoot"] == 0.0
    num, den = FIRST_ORDER.transfer_function(tau=tau)
    assert half_power_frequency(num, den, scale=1 / tau) == pytest.approx(1 / (2 * math.pi * tau), rel=1e-12)


@pytest.mark.parametrize("tau", [1e-6, 0.2])
def test_first_order_decay_metrics_match_textbook(tau):
    # exp(-t/tau) falls from 90 % to 10 % in tau ln 9 and enters the 2 % band at tau ln 50 (Ogata,
    # transient-response chapter, applied to the complementary rise); high-pass corner 1/(2 pi tau)
    d = FIRST_ORDER_DECAY.derived(tau=tau)
    assert d["decay_time"] == pytest.approx(tau * math.log(9.0), rel=1e-12)
    assert d["settling_time_2pct"] == pytest.approx(tau * math.log(50.0), rel=1e-12)
    assert d["cutoff_3db"] == pytest.approx(1 / (2 * math.pi * tau), rel=1e-12)


@pytest.mark.parametrize("q", [0.55, 0.7071, 1.0, 3.0, 10.0, 30.0])
def test_numerical_overshoot_and_peak_time_match_textbook(q):
    # Ogata, transient-response chapter: percent overshoot and peak time pi / wd
    f0 = 1e3
    zeta = 1 / (2 * q)
    m = timing_metrics(f0=f0, Q=q)
    expected = 100 * math.exp(-math.pi * zeta / math.sqrt(1 - zeta ** 2))
    assert m["overshoot"] == pytest.approx(expected, rel=1e-9)
    assert percent_overshoot(q) == pytest.approx(expected, rel=1e-14)
    wd = 2 * math.pi * f0 * math.sqrt(1 - zeta ** 2)
    assert m["peak_time"] == pytest.approx(math.pi / wd, rel=1e-6)
    d = UNDERDAMPED.derived(f0=f0, Q=q)
    assert d["peak_time"] == pytest.approx(math.pi / wd, rel=1e-14)
    assert d["damped_frequency"] == pytest.approx(wd / (2 * math.pi), rel=1e-14)


@pytest.mark.parametrize("q", [0.1, 0.3, 0.5, 0.7071, 2.0, 30.0])
def test_second_order_bandwidth_matches_closed_form(q):
    # Nise, frequency-response chapter: w_bw = w0 sqrt(1 - 2 z^2 + sqrt(4 z^4 - 4 z^2 + 2))
    f0 = 1234.0
    z = 1 / (2 * q)
    closed = f0 * math.sqrt(1 - 2 * z ** 2 + math.sqrt(4 * z ** 4 - 4 * z ** 2 + 2))
    assert SECOND_ORDER.derived(f0=f0, Q=q)["bandwidth_3db"] == pytest.approx(closed, rel=1e-11)


def test_critically_damped_bandwidth_and_overdamped_q():
    # |1/(1 + j w tau)^2|^2 = 1/2 gives (w tau)^2 = sqrt(2) - 1 (worked by hand from the definition)
    tau = 5e-9
    d = FORMS["critically-damped"].derived(tau=tau)
    assert d["bandwidth_3db"] == pytest.approx(math.sqrt(math.sqrt(2) - 1) / (2 * math.pi * tau), rel=1e-12)
    assert d["Q"] == 0.5 and d["zeta"] == 1.0 and d["overshoot"] == 0.0
    # two real poles: Q = sqrt(tau1 tau2)/(tau1 + tau2) never exceeds 1/2 (AM-GM)
    for r in (1.0, 0.5, 0.02):
        assert FORMS["two-real-pole"].derived(tau1=1.0, tau2=r)["Q"] <= 0.5 + 1e-15


@pytest.mark.parametrize("name", list(FORMS))
def test_rise_and_settling_agree_with_python_control_step_info(name):
    # reference: python-control step_info (0.10) on a dense sampled response of the same transfer
    # function. Convention differences: step_info takes the first *sample* at or above 10 % / 90 %
    # (no interpolation) and reports settling as the first sample after the last one outside
    # +-2 %, and its overshoot is the largest sample; fitkit refines each crossing between samples.
    # So agreement is to about one sample spacing.
    control = pytest.importorskip("control")
    form = FORMS[name]
    shape = SAMPLE_SHAPES[name]
    d = form.derived(**shape)
    if "settling_time_2pct" not in d:
        pytest.skip("a band-pass has no rise or settling to a new level (peak checks: test_forms_band_pass.py)")
    settle = d["settling_time_2pct"]
    t = np.linspace(0.0, 3 * settle, 30001)
    dt = t[1]
    system = control.tf(*form.transfer_function(**shape))
    if form.final_value == 0:  # the decay: compare with the complementary rise 1 - y
        system = 1 - system
    info = control.step_info(system, T=t, SettlingTimeThreshold=0.02, RiseTimeLimits=(0.1, 0.9))
    rise_name = "decay_time" if form.final_value == 0 else "rise_time"
    assert d[rise_name] == pytest.approx(info["RiseTime"], abs=2 * dt)
    assert settle == pytest.approx(info["SettlingTime"], abs=2 * dt)
    if "overshoot" in d:
        assert d["overshoot"] == pytest.approx(info["Overshoot"], abs=1e-3)
    if "undershoot" in d:  # a right-half-plane zero: step_info's Undershoot, % of the final value
        assert d["undershoot"] == pytest.approx(info["Undershoot"], abs=1e-3)


@pytest.mark.parametrize("name", list(FORMS))
def test_derived_quantities_are_smooth_for_numerical_differentiation(name):
    # Every form is time-scale invariant: scaling all time constants by k (f0 by 1/k) scales
    # times by k and frequencies by 1/k. A central difference with a 1e-6 step must recover
    # d ln(time)/d ln(k) = 1 to 1e-5; a metric with numerical noise above ~1e-12 would fail.
    form = FORMS[name]
    shape = SAMPLE_SHAPES[name]
    h = 1e-6

    def scaled(k):
        return {n: (v / k if n == "f0" else v if n == "Q" else v * k) for n, v in shape.items()}

    up, down = form.derived(**scaled(1 + h)), form.derived(**scaled(1 - h))
    for key, unit in form.derived_units.items():
        if unit not in ("s", "Hz") or not math.isfinite(up[key]) or up[key] == 0:
            continue
        slope = (math.log(up[key]) - math.log(down[key])) / (math.log(1 + h) - math.log(1 - h))
        assert slope == pytest.approx(1.0 if unit == "s" else -1.0, abs=1e-5), key


@pytest.mark.parametrize("name", list(FORMS))
def test_derived_keys_units_and_cost(name):
    form = FORMS[name]
    shape = SAMPLE_SHAPES[name]
    d = form.derived(**shape)
    assert set(d) == set(form.derived_units)
    assert all(isinstance(v, float) and math.isfinite(v) for v in d.values())
    if form.order == 2:  # every second-order form reports f0, Q and zeta
        assert {"f0", "Q", "zeta"} <= set(d)
        assert d["zeta"] == pytest.approx(1 / (2 * d["Q"]))
    if form.final_value == 1:
        assert {"bandwidth_3db", "rise_time", "overshoot", "settling_time_2pct"} <= set(d)
    # cheap enough to differentiate numerically: generous bound, best of three
    best = min(_timed(form.derived, shape) for _ in range(3))
    assert best < 0.05


def _timed(fn, shape):
    start = time.process_time()  # CPU time: robust to other jobs sharing the machine
    fn(**shape)
    return time.process_time() - start


@pytest.mark.parametrize("name", list(FORMS))
def test_extreme_shapes_give_finite_responses_and_derived_quantities(name):
    # time scales from 1 ns to 10 s, time-constant ratios down to 1e-4, zeros up to 1e3 times the
    # slowest pole, Q from 1e-3 (1/2 for underdamped) to 1e4: no error, nothing infinite or nan
    form = FORMS[name]
    rng = np.random.default_rng(11 + len(name))
    for _ in range(8):
        scale = 10 ** rng.uniform(-9, 1)
        shape = {}
        for spec in form.shape:
            if spec.kind == "time":
                shape[spec.name] = scale * 10 ** rng.uniform(-4, 3 if spec.name == "tau_z" else 0)
            elif spec.kind == "frequency":
                shape[spec.name] = 1 / scale
            else:
                # within the form's declared range (two-real-pole: Q <= 1/2)
                shape[spec.name] = 10 ** rng.uniform(math.log10(0.5001) if spec.lower else -3,
                                                     math.log10(spec.upper) if spec.upper else 4)
        d = form.derived(**shape)
        assert all(math.isfinite(v) for v in d.values()), (shape, d)
        t = np.r_[-1.0, 0.0, np.geomspace(1e-6, 1e6, 60)] * scale
        assert np.all(np.isfinite(form.unit_step(t, **shape))), shape
