"""The band-pass forms (voltage across the series resistor of an RLC) against outside references.

Sources named beside each check:
* scipy.signal.step / scipy.signal.freqs of the form's own transfer function;
* lcapy's symbolic nodal analysis of the series RLC with the output across R;
* Nilsson & Riedel, *Electric Circuits*, chapter on the natural and step
  responses of RLC circuits (from memory): the series RLC current after a
  step V is i = V/(wd L) exp(-alpha t) sin(wd t) (underdamped),
  V/(L (s1 - s2)) (exp(s1 t) - exp(s2 t)) (overdamped, s1,2 = -alpha +- sqrt(alpha^2 - w0^2)),
  V t/L exp(-alpha t) (critically damped), alpha = R/(2L), w0 = 1/sqrt(LC);
  the peak times follow by setting di/dt = 0 (worked by hand).
"""

import math

import numpy as np
import pytest
import scipy.optimize
import scipy.signal

from fitkit.conditioning.segment import StepSegment
from fitkit.fitting import fit_segments
from fitkit.forms import FORMS
from fitkit.forms.band_pass import (TWO_REAL_POLE_BAND_PASS, UNDERDAMPED_BAND_PASS, band_pass_step,
                                    band_pass_tf, peak_time)
from fitkit.forms.two_real_pole import fit_coordinates

#: Series RLC of the reference captures' lab (100 mH, 0.1 uF); resistances for three dampings
L, C = 0.1, 0.1e-6


def _rlc_current_step(t, R):
    """Nilsson & Riedel's series-RLC step current for V = 1 (A), all three damping cases."""
    alpha, w0 = R / (2 * L), 1 / math.sqrt(L * C)
    if alpha < w0:
        wd = math.sqrt(w0 ** 2 - alpha ** 2)
        return np.exp(-alpha * t) * np.sin(wd * t) / (wd * L)
    if alpha == w0:
        return t / L * np.exp(-alpha * t)
    root = math.sqrt(alpha ** 2 - w0 ** 2)
    s1, s2 = -alpha + root, -alpha - root
    return (np.exp(s1 * t) - np.exp(s2 * t)) / (L * (s1 - s2))


def _rlc_shape(R):
    """(f0 in Hz, Q) of the series RLC: w0 = 1/sqrt(LC), Q = sqrt(L/C)/R."""
    return 1 / (2 * math.pi * math.sqrt(L * C)), math.sqrt(L / C) / R


@pytest.mark.parametrize("R", [470.8, 2000.0, 2250.0, 6000.0])
def test_step_is_the_resistor_voltage_of_a_series_rlc(R):
    # reference: Nilsson & Riedel's closed forms of the RLC step current, times R (2000 Ohm is
    # critical damping for 100 mH and 0.1 uF)
    f0, q = _rlc_shape(R)
    t = np.linspace(0, 3e-3, 3001)
    want = R * _rlc_current_step(t, R)
    assert np.max(np.abs(band_pass_step(t, f0, q) - want)) < 1e-12
    form = UNDERDAMPED_BAND_PASS if q > 0.5 else TWO_REAL_POLE_BAND_PASS
    shape = {"f0": f0, "Q": q} if q > 0.5 else {"tau0": 1 / (2 * math.pi * f0), "Q": q}
    assert np.max(np.abs(form.unit_step(t, **shape) - want)) < 1e-12


def test_transfer_function_is_the_series_rlc_across_r():
    # reference: lcapy nodal analysis of V -> L -> C -> R -> ground, output across R
    lcapy = pytest.importorskip("lcapy")
    R = 470.8
    circuit = lcapy.Circuit(f"L1 1 2 {L}\nC1 2 3 {C}\nR1 3 0 {R}")
    h = circuit.transfer(1, 0, 3, 0)
    num = np.array([c.fval for c in h.N.coeffs()])
    den = np.array([c.fval for c in h.D.coeffs()])
    ours_num, ours_den = band_pass_tf(*_rlc_shape(R))
    s = 1j * np.geomspace(1e2, 1e6, 25)
    assert np.allclose(np.polyval(ours_num, s) / np.polyval(ours_den, s), np.polyval(num, s) / np.polyval(den, s),
                       rtol=1e-10, atol=0)


@pytest.mark.parametrize("q", [0.05, 0.3, 0.5 * (1 - 1e-9), 0.5, 0.5 * (1 + 1e-9), 0.7, 5.0, 50.0])
def test_step_matches_scipy_across_damping(q):
    # reference: scipy.signal.step of the transfer function (state-space matrix exponential)
    f0 = 2e3
    t = np.linspace(0, 12 * max(2 * q, 1 / q) / (2 * math.pi * f0), 4000)
    _, want = scipy.signal.step(band_pass_tf(f0, q), T=t)
    assert np.max(np.abs(band_pass_step(t, f0, q) - want)) < 1e-9


def test_real_pole_form_is_regular_at_equal_poles():
    # 2 (t/tau) exp(-t/tau) at tau1 = tau2 = tau: Nilsson & Riedel's critically damped current t/L
    # exp(-alpha t) times R, with R/L = 2 alpha = 2/tau
    tau = 1e-4
    t = np.linspace(0, 2e-3, 2001)
    want = 2 * t / tau * np.exp(-t / tau)
    for tau2 in (tau, tau * (1 - 1e-12), tau * (1 - 1e-7)):
        got = TWO_REAL_POLE_BAND_PASS.unit_step(t, tau1=tau, tau2=tau2)
        # the response moves by the order of the poles' separation, nothing more (no 0/0)
        assert np.max(np.abs(got - want)) < 2 * (tau - tau2) / tau + 1e-14
    assert np.max(np.abs(TWO_REAL_POLE_BAND_PASS.unit_step(t, tau0=tau, Q=0.5) - want)) < 1e-14
    # the two coordinate sets describe one response
    c = fit_coordinates(3e-4, 4e-5)
    assert np.max(np.abs(TWO_REAL_POLE_BAND_PASS.unit_step(t, **c)
                         - TWO_REAL_POLE_BAND_PASS.unit_step(t, tau1=4e-5, tau2=3e-4))) < 1e-14


@pytest.mark.parametrize("q", [0.1, 0.5, 0.8, 3.0, 30.0])
def test_peak_of_h_is_one_at_f0_and_bandwidth_is_f0_over_q(q):
    # reference: scipy.signal.freqs of the transfer function on a dense logarithmic grid
    f0 = 1234.0
    w = np.geomspace(2 * math.pi * f0 / 1e4, 2 * math.pi * f0 * 1e4, 200001)
    _, h = scipy.signal.freqs(*band_pass_tf(f0, q), worN=w)
    gain = np.abs(h)
    k = int(np.argmax(gain))
    assert gain[k] == pytest.approx(1.0, abs=1e-9)
    assert w[k] / (2 * math.pi) == pytest.approx(f0, rel=1e-4)
    def excess(wi):
        return abs(scipy.signal.freqs(*band_pass_tf(f0, q), worN=[wi])[1][0]) ** 2 - 0.5

    # the two half-power frequencies, by root finding on either side of the peak
    edges = [scipy.optimize.brentq(excess, w[0], w[k], xtol=1e-12, rtol=1e-15),
             scipy.optimize.brentq(excess, w[k], w[-1], xtol=1e-12, rtol=1e-15)]
    band = (edges[1] - edges[0]) / (2 * math.pi)
    form = UNDERDAMPED_BAND_PASS if q > 0.5 else TWO_REAL_POLE_BAND_PASS
    shape = {"f0": f0, "Q": q} if q > 0.5 else {"tau0": 1 / (2 * math.pi * f0), "Q": q}
    assert form.derived(**shape)["bandwidth_3db"] == pytest.approx(band, rel=1e-9)


@pytest.mark.parametrize("R", [470.8, 1000.0, 2000.0, 2250.0, 6000.0])
def test_peak_time_and_value_match_closed_forms(R):
    # reference: di/dt = 0 in Nilsson & Riedel's currents (worked by hand): tp = atan(wd/alpha)/wd,
    # 1/alpha at critical damping, ln(s2/s1)/(s1 - s2) overdamped; the peak value is R i(tp).
    # Also the maximum of scipy.signal.step on a fine grid.
    f0, q = _rlc_shape(R)
    alpha, w0 = R / (2 * L), 1 / math.sqrt(L * C)
    if alpha < w0:
        wd = math.sqrt(w0 ** 2 - alpha ** 2)
        tp = math.atan(wd / alpha) / wd
    elif alpha == w0:
        tp = 1 / alpha
    else:
        root = math.sqrt(alpha ** 2 - w0 ** 2)
        s1, s2 = -alpha + root, -alpha - root
        tp = math.log(s2 / s1) / (s1 - s2)
    form = UNDERDAMPED_BAND_PASS if q > 0.5 else TWO_REAL_POLE_BAND_PASS
    shape = {"f0": f0, "Q": q} if q > 0.5 else {"tau0": 1 / w0, "Q": q}
    d = form.derived(**shape)
    assert d["peak_time"] == pytest.approx(tp, rel=1e-12)
    assert d["peak_value"] == pytest.approx(R * float(_rlc_current_step(np.array(tp), R)), rel=1e-12)
    t = np.linspace(0, 1.5 * tp, 15001)
    _, y = scipy.signal.step(band_pass_tf(f0, q), T=t)
    assert t[np.argmax(y)] == pytest.approx(tp, abs=2 * t[1])
    assert y.max() == pytest.approx(d["peak_value"], rel=1e-8)


def test_peak_time_is_continuous_through_critical_damping():
    w0 = 1e4
    at_half = peak_time(w0, 0.5)
    assert at_half == pytest.approx(1 / w0, rel=1e-15)  # 1/alpha with alpha = w0
    for eps in (1e-14, 1e-10, 1e-6):
        for q in (0.5 * (1 - eps), 0.5 * (1 + eps)):
            assert abs(peak_time(w0, q) / at_half - 1) < 10 * eps + 1e-14


@pytest.mark.parametrize("name, truth", [
    ("underdamped-band-pass", {"f0": 1.5e3, "Q": 2.0}),
    ("underdamped-band-pass", {"f0": 1.5e3, "Q": 8.0}),
    ("underdamped-band-pass", {"f0": 20.0, "Q": 0.8}),
    ("two-real-pole-band-pass", {"tau1": 178e-6, "tau2": 62e-6}),
    ("two-real-pole-band-pass", {"tau1": 1e-3, "tau2": 1e-3}),
    ("two-real-pole-band-pass", {"tau1": 1e-3, "tau2": 2e-5}),
])
def test_first_guess_is_read_off_the_data(name, truth):
    # the leading start comes from the zero crossings and decrement (ringing) or from the
    # fall time over the peak time (real poles), within 30 % of the truth with 1 % noise
    form = FORMS[name]
    scale = (1 / truth["f0"]) * truth["Q"] if "f0" in truth else truth["tau1"]
    t = np.linspace(-0.2 * scale, 8 * scale, 4000)
    y = form.unit_step(t, **truth)
    rng = np.random.default_rng(2)
    y_norm = y / y.max() + 0.01 * rng.standard_normal(t.size)
    first = form.guess(t, y_norm)[0]
    if form.reported_shape:
        q = form.region_quantities(**first)
        first = {"tau1": float(q["tau1"]), "tau2": float(q["tau2"])}
    for k, v in truth.items():
        assert first[k] == pytest.approx(v, rel=0.3), (first, truth)


@pytest.mark.parametrize("form, truth", [(UNDERDAMPED_BAND_PASS, {"f0": 1.5e3, "Q": 2.0}),
                                         (TWO_REAL_POLE_BAND_PASS, {"tau1": 178e-6, "tau2": 62e-6})])
def test_engine_recovers_a_simulated_band_pass_capture(form, truth):
    # end to end through the fitting engine, one seeded draw at 40 dB
    dt = 5e-6
    t = np.arange(-200, 1200) * dt
    rng = np.random.default_rng(15)
    y = form.response(t, baseline=2.48, step=-5.0, t0=0.0, **truth) + 0.05 * rng.standard_normal(t.size)
    seg = StepSegment(0, t.size, t, y, None, 0.0, -1, float(y[t < 0].mean()), float(y[-100:].mean()),
                      noise_rms=0.05, returns_to_baseline=True)
    r = fit_segments([seg], form.name)
    for k, v in truth.items():
        # within twice the 95 % half-width (about 4 standard errors): one draw, not a coverage study
        lo, hi = r.parameters[k].ci95
        assert lo - (hi - lo) / 2 <= v <= hi + (hi - lo) / 2, (k, r.parameters[k])
        assert (hi - lo) < 0.1 * v
    assert r.parameters["step"].ci95[0] <= -5.0 <= r.parameters["step"].ci95[1]
