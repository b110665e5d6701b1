"""Second-order forms with a real zero of either sign, against outside references.

Sources named beside each check:
* scipy.signal.step of the form's own transfer function (state-space simulation);
* python-control's step_info (Overshoot, Undershoot) on the same transfer function;
* the initial value theorem, y'(0+) = lim s^2 Y(s) = lim s H(s) (Ogata, *Modern Control
  Engineering*, Laplace-transform chapter; from memory);
* closed forms worked by hand from partial fractions (common practice, no source), each
  stated beside its check.
"""

import math

import numpy as np
import pytest
import scipy.signal

from fitkit.conditioning.segment import StepSegment
from fitkit.fitting import fit_segments
from fitkit.forms import FORMS
from fitkit.forms.second_order_zero import TWO_REAL_POLE_UNDERSHOOT, UNDERDAMPED_UNDERSHOOT, UNDERDAMPED_ZERO

UNDERDAMPED_PAIR = (UNDERDAMPED_ZERO, UNDERDAMPED_UNDERSHOOT)


@pytest.mark.parametrize("form", UNDERDAMPED_PAIR, ids=lambda f: f.name)
@pytest.mark.parametrize("q", [0.5 * (1 + 1e-9), 0.6, 2.0, 20.0])
@pytest.mark.parametrize("tz_w0", [0.01, 0.3, 1.0, 3.0, 30.0])
def test_underdamped_zero_forms_match_scipy_step(form, q, tz_w0):
    # reference: scipy.signal.step of w0^2 (1 +- s tau_z)/(s^2 + w0/Q s + w0^2)
    f0 = 1e3
    w0 = 2 * math.pi * f0
    shape = {"f0": f0, "Q": q, "tau_z": tz_w0 / w0}
    t = np.linspace(0, 12 * max(2 * q, 2) / w0, 3000)
    _, want = scipy.signal.step(form.transfer_function(**shape), T=t)
    assert np.max(np.abs(form.unit_step(t, **shape) - want)) < 1e-8 * max(1.0, tz_w0)


@pytest.mark.parametrize("ratio", [1.0, 1 - 1e-9, 0.3, 0.02])
@pytest.mark.parametrize("tau_z", [1e-5, 3e-4, 1e-2])
def test_real_pole_undershoot_matches_scipy_step_and_equal_poles(ratio, tau_z):
    # reference: scipy.signal.step of (1 - s tau_z)/((1 + s tau1)(1 + s tau2)), exact at tau1 = tau2
    shape = {"tau_z": tau_z, "tau1": 1e-3, "tau2": 1e-3 * ratio}
    t = np.linspace(0, 0.012, 3000)
    y = TWO_REAL_POLE_UNDERSHOOT.unit_step(t, **shape)
    assert np.all(np.isfinite(y))
    _, want = scipy.signal.step(TWO_REAL_POLE_UNDERSHOOT.transfer_function(**shape), T=t)
    assert np.max(np.abs(y - want)) < 1e-8 * max(1.0, tau_z / 1e-3)


@pytest.mark.parametrize("form, sign", [(UNDERDAMPED_ZERO, 1.0), (UNDERDAMPED_UNDERSHOOT, -1.0)],
                         ids=["left", "right"])
def test_initial_slope_has_the_sign_of_the_zero(form, sign):
    # initial value theorem: y'(0+) = lim s H(s) = sign tau_z w0^2 (the poles alone give 0)
    f0, q, tau_z = 2e3, 1.5, 5e-5
    w0 = 2 * math.pi * f0
    h = 1e-10
    slope = float(form.unit_step(np.array([h]), f0=f0, Q=q, tau_z=tau_z)[0]) / h
    assert slope == pytest.approx(sign * tau_z * w0 ** 2, rel=1e-5)


@pytest.mark.parametrize("tau_z", [1e-5, 2e-4, 3e-3])
def test_real_pole_undershoot_matches_its_partial_fraction_closed_form(tau_z):
    # partial fractions of (1 - s tau_z)/(s (1 + s tau1)(1 + s tau2)) (worked by hand):
    # y = 1 - (tau1 + tau_z)/(tau1 - tau2) exp(-t/tau1) + (tau2 + tau_z)/(tau1 - tau2) exp(-t/tau2);
    # y' = 0 at t* = ln[tau1 (tau2 + tau_z) / (tau2 (tau1 + tau_z))] / (1/tau2 - 1/tau1), and the
    # undershoot is -100 y(t*) % of the final value
    tau1, tau2 = 1e-3, 2.5e-4
    t_star = math.log(tau1 * (tau2 + tau_z) / (tau2 * (tau1 + tau_z))) / (1 / tau2 - 1 / tau1)

    def closed(t):
        return (1 - (tau1 + tau_z) / (tau1 - tau2) * np.exp(-t / tau1)
                + (tau2 + tau_z) / (tau1 - tau2) * np.exp(-t / tau2))

    t = np.linspace(0, 0.01, 1001)
    assert np.max(np.abs(TWO_REAL_POLE_UNDERSHOOT.unit_step(t, tau_z=tau_z, tau1=tau1, tau2=tau2) - closed(t))) < 1e-13
    d = TWO_REAL_POLE_UNDERSHOOT.derived(tau_z=tau_z, tau1=tau1, tau2=tau2)
    assert d["undershoot"] == pytest.approx(-100 * float(closed(np.array(t_star))), rel=1e-9)
    assert d["zero_frequency"] == pytest.approx(1 / (2 * math.pi * tau_z), rel=1e-15)


@pytest.mark.parametrize("form, sign", [(UNDERDAMPED_ZERO, 1.0), (UNDERDAMPED_UNDERSHOOT, -1.0)],
                         ids=["left", "right"])
@pytest.mark.parametrize("tz_w0", [0.2, 0.8, 2.5])
def test_overshoot_matches_its_closed_form(form, sign, tz_w0):
    # y = 1 - exp(-a t)[cos(wd t) + (a - sign tau_z w0^2) sin(wd t)/wd] (the low-pass step plus
    # sign tau_z times its derivative, Franklin, Powell & Emami-Naeini, effect of zeros, from memory);
    # y' = (w0^2/wd) exp(-a t)[(1 - sign tau_z a) sin(wd t) + sign tau_z wd cos(wd t)] vanishes where
    # tan(wd t) = -sign tau_z wd/(1 - sign tau_z a): the peak is the first such t after the wrong-way dip
    # (worked by hand)
    f0, q = 1e3, 2.0
    w0 = 2 * math.pi * f0
    tau_z = tz_w0 / w0
    a = w0 / (2 * q)
    wd = math.sqrt(w0 ** 2 - a ** 2)
    roots = [(math.atan2(-sign * tau_z * wd, 1 - sign * tau_z * a) + k * math.pi) / wd for k in range(-1, 4)]
    roots = [r for r in roots if r > 1e-12]

    def y(t):
        return 1 - math.exp(-a * t) * (math.cos(wd * t) + (a - sign * tau_z * w0 ** 2) * math.sin(wd * t) / wd)

    peak = max(y(r) for r in roots)
    d = form.derived(f0=f0, Q=q, tau_z=tau_z)
    assert d["overshoot"] == pytest.approx(100 * (peak - 1), rel=1e-8)
    if sign < 0:
        low = min(y(r) for r in roots)
        assert d["undershoot"] == pytest.approx(-100 * low, rel=1e-8)


def test_zero_forms_name_the_sign_and_only_the_undershoot_ones_are_automatic():
    # the undershoot forms are tried when a response first moves the wrong way (tests/test_real_shapes.py)
    assert not FORMS["underdamped-zero"].auto_candidate
    for name in ("underdamped-zero", "underdamped-undershoot", "two-real-pole-undershoot"):
        assert FORMS[name].auto_candidate == name.endswith("undershoot")
        assert all(p.name != "sign" for p in FORMS[name].shape)
        assert FORMS[name].shape_names.count("tau_z") == 1


@pytest.mark.parametrize("form, truth", [
    (UNDERDAMPED_ZERO, {"f0": 10e3, "Q": 2.0, "tau_z": 30e-6}),
    (UNDERDAMPED_UNDERSHOOT, {"f0": 10e3, "Q": 2.0, "tau_z": 8e-6}),
    (TWO_REAL_POLE_UNDERSHOOT, {"tau_z": 30e-6, "tau1": 100e-6, "tau2": 20e-6}),
])
def test_engine_recovers_a_simulated_capture_with_a_zero(form, truth):
    # end to end through the fitting engine, fitted by name, one seeded draw at 40 dB
    dt = 1.5e-6
    t = np.arange(-150, 900) * dt
    rng = np.random.default_rng(16)
    y = form.response(t, baseline=0.5, step=2.5, t0=0.0, **truth) + 0.025 * rng.standard_normal(t.size)
    seg = StepSegment(0, t.size, t, y, None, 0.0, 1, float(y[t < 0].mean()), float(y[-100:].mean()),
                      noise_rms=0.025)
    r = fit_segments([seg], form.name)
    for k, v in truth.items():
        # within twice the 95 % half-width (about 4 standard errors): one draw, not a coverage study
        lo, hi = r.parameters[k].ci95
        assert lo - (hi - lo) / 2 <= v <= hi + (hi - lo) / 2, (k, r.parameters[k])
        assert (hi - lo) < 0.1 * v


def test_the_zero_time_constant_is_tau_z_and_tz_still_finds_it():
    # named like every other time constant; a script written for the older name keeps working
    from support.report_results import make_result
    result = make_result("pole-zero")
    assert "tau_z" in result.parameters and "tz" not in result.parameters
    assert result.quantity("tz") is result.quantity("tau_z")
