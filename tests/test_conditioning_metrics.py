"""Model-free step metrics against python-control's step_info and textbook closed forms.

References:
* python-control ``control.step_info`` (and ``control.step_response`` /
  ``scipy.signal.lti.step`` as independent simulators).
* Textbook control results (Ogata, Modern Control Engineering; Dorf & Bishop,
  Modern Control Systems): first-order 10-90 % rise time tau ln 9, 2 %
  settling time tau ln 50 (5 %: tau ln 20); second-order underdamped percent
  overshoot 100 exp(-pi zeta / sqrt(1 - zeta^2)) and peak time
  pi / (wn sqrt(1 - zeta^2)).

Where fitkit's definitions differ from step_info's (documented in
fitkit.conditioning.metrics): step_info reports sample times without
interpolation (so times agree to one sample interval), counts settling time
from the first sample after the last band exit (fitkit: the interpolated band
entry, so fitkit's value is up to one sample earlier), and calls the initial
wrong-way dip "undershoot" (fitkit: preshoot).
"""

from __future__ import annotations

import math

import control
import numpy as np
import pytest
import scipy.signal

from fitkit.capture import Capture
from fitkit.conditioning import analyse_steps

DT = 1e-3          # sample interval, s
PRE = 200          # samples before the edge


def _capture(num, den, *, t_end: float, gain: float = 1.0, offset: float = 0.0, falling: bool = False,
             simulator: str = "control"):
    """Two-channel capture of an ideal step (edge exactly at t = 0, half-way between samples)
    and the system's response, simulated by python-control or scipy.signal."""
    n_post = int(round(t_end / DT))
    t_sim = np.arange(2 * n_post + 1) * (DT / 2)  # half-sample grid: simulators want even spacing
    if simulator == "control":
        y_sim = control.step_response(control.tf(num, den), T=t_sim).outputs
    else:
        _, y_sim = scipy.signal.lti(num, den).step(T=t_sim)
    t_post, y_post = t_sim[1::2], np.asarray(y_sim)[1::2]
    t = np.concatenate(((np.arange(-PRE, 0) + 0.5) * DT, t_post))
    u = (t > 0).astype(float)
    y = np.concatenate((np.zeros(PRE), y_post))
    if falling:
        u, y = 1.0 - u, 1.0 - y
    cap = Capture.from_arrays(t, {"in": offset + gain * u, "out": offset + gain * y})
    return cap, t_post, y_post


def _info(t_post, y_post):
    """step_info on the response from the edge on (time axis starting at the step)."""
    return control.step_info(np.concatenate(([0.0], y_post)), T=np.concatenate(([0.0], t_post)))


@pytest.mark.parametrize("falling", [False, True])
@pytest.mark.parametrize("tau", [0.01, 0.05])
def test_first_order_rise_and_settling_match_textbook(tau, falling):
    cap, t_post, y_post = _capture([1.0], [tau, 1.0], t_end=15 * tau, falling=falling)
    for band, textbook_settling in ((0.02, tau * math.log(50)), (0.05, tau * math.log(20))):
        a = analyse_steps(cap, settling_band=band)
        assert len(a.segments) == 1 and a.input_channel == "in"
        m = a.metrics[0]
        transition = m.fall_time if falling else m.rise_time
        # Ogata / Dorf & Bishop: first-order 10-90 % rise time = tau ln 9 (interpolation error << dt)
        assert transition == pytest.approx(tau * math.log(9), abs=0.05 * DT)
        # Ogata / Dorf & Bishop: 2 % settling time tau ln 50 (= 3.91 tau), 5 %: tau ln 20
        assert m.settling_time == pytest.approx(textbook_settling, abs=0.05 * DT)
        # first-order: no overshoot, 50 % delay tau ln 2 (from y = 1 - exp(-t/tau))
        # (the final level is the mean of the record's tail, 1 - 6e-6 here, not the asymptote)
        assert m.overshoot_percent == pytest.approx(0.0, abs=1e-3)
        assert m.peak_time is None
        assert m.delay == pytest.approx(tau * math.log(2), abs=0.05 * DT)
        assert m.final_value == pytest.approx(0.0 if falling else 1.0, abs=1e-4)
        assert a.edges[0].time == pytest.approx(0.0, abs=1e-12)


@pytest.mark.parametrize("zeta", [0.1, 0.2, 0.4, 0.6, 0.8])
def test_second_order_overshoot_and_peak_time_match_textbook(zeta):
    wn = 2 * math.pi * 10.0
    cap, t_post, y_post = _capture([wn ** 2], [1.0, 2 * zeta * wn, wn ** 2], t_end=12 / (zeta * wn),
                                   simulator="scipy")
    m = analyse_steps(cap).metrics[0]
    # Ogata: percent overshoot = 100 exp(-pi zeta / sqrt(1 - zeta^2)); sampling at 1 ms of a
    # 10 Hz response misses the exact peak by at most 1 - cos(wd dt / 2) of the oscillation.
    textbook = 100 * math.exp(-math.pi * zeta / math.sqrt(1 - zeta ** 2))
    assert m.overshoot_percent == pytest.approx(textbook, abs=0.05)
    # Ogata: peak time = pi / (wn sqrt(1 - zeta^2)), to half a sample
    assert m.peak_time == pytest.approx(math.pi / (wn * math.sqrt(1 - zeta ** 2)), abs=0.5 * DT)


@pytest.mark.parametrize("zeta", [0.15, 0.3, 0.5, 0.707, 1.0, 2.0])
@pytest.mark.parametrize("band", [0.02, 0.05])
def test_second_order_metrics_agree_with_python_control_step_info(zeta, band):
    wn = 2 * math.pi * 5.0
    slowest_pole = zeta * wn if zeta < 1 else wn * (zeta - math.sqrt(zeta ** 2 - 1))  # rad/s
    cap, t_post, y_post = _capture([wn ** 2], [1.0, 2 * zeta * wn, wn ** 2], t_end=15 / slowest_pole)
    m = analyse_steps(cap, settling_band=band).metrics[0]
    info = control.step_info(np.concatenate(([0.0], y_post)), T=np.concatenate(([0.0], t_post)),
                             SettlingTimeThreshold=band)
    # python-control step_info: same 10-90 % levels, first crossings, sample times -> within one sample
    assert m.rise_time == pytest.approx(info["RiseTime"], abs=DT)
    # step_info settles at the first sample after the last exit; fitkit interpolates the entry
    assert info["SettlingTime"] - DT <= m.settling_time <= info["SettlingTime"] + 1e-12
    # same overshoot definition: (peak - final) / step * 100
    assert m.overshoot_percent == pytest.approx(info["Overshoot"], abs=0.02)
    if info["Overshoot"] > 0.5:
        assert m.peak_time == pytest.approx(info["PeakTime"], abs=DT)
        assert m.peak_value == pytest.approx(info["Peak"], abs=1e-3)


def test_wrong_way_start_is_preshoot_equal_to_step_info_undershoot():
    # A non-minimum-phase response (1 - s T) / (1 + s tau)^2 dips the wrong way first.
    T, tau = 0.03, 0.01
    num, den = [-T, 1.0], [tau ** 2, 2 * tau, 1.0]
    cap, t_post, y_post = _capture(num, den, t_end=0.2)
    m = analyse_steps(cap).metrics[0]
    info = _info(t_post, y_post)
    # python-control step_info "Undershoot" = -min(y) / final * 100 for this response
    assert info["Undershoot"] > 10
    assert m.preshoot_percent == pytest.approx(info["Undershoot"], abs=0.05)
    assert m.rise_time == pytest.approx(info["RiseTime"], abs=DT)


def test_metrics_are_independent_of_step_size_and_offset():
    wn, zeta = 2 * math.pi * 8.0, 0.3
    base, _, _ = _capture([wn ** 2], [1.0, 2 * zeta * wn, wn ** 2], t_end=1.0)
    scaled, _, _ = _capture([wn ** 2], [1.0, 2 * zeta * wn, wn ** 2], t_end=1.0, gain=3.3, offset=-1.2)
    m1, m2 = analyse_steps(base).metrics[0], analyse_steps(scaled).metrics[0]
    for name in ("rise_time", "delay", "overshoot_percent", "undershoot_percent", "peak_time", "settling_time"):
        assert getattr(m2, name) == pytest.approx(getattr(m1, name), rel=1e-9, abs=1e-12), name
    assert m2.step == pytest.approx(3.3 * m1.step, rel=1e-9)
    # IEEE Std 181 post-transition undershoot of an underdamped second order: the first dip
    # below the final value after the peak is overshoot^2 in % (Ogata: successive peaks decay
    # by exp(-pi zeta / sqrt(1 - zeta^2)) per half period)
    os_fraction = math.exp(-math.pi * zeta / math.sqrt(1 - zeta ** 2))
    assert m1.undershoot_percent == pytest.approx(100 * os_fraction ** 2, abs=0.1)


def test_reference_levels_are_configurable():
    tau = 0.02
    cap, _, _ = _capture([1.0], [tau, 1.0], t_end=10 * tau)
    m = analyse_steps(cap, reference_levels=(0.2, 0.8)).metrics[0]
    # first order: time from 20 % to 80 % = tau ln(0.8 / 0.2) = tau ln 4 (from y = 1 - exp(-t/tau))
    assert m.rise_time == pytest.approx(tau * math.log(4), abs=0.05 * DT)
    assert m.reference_levels == (0.2, 0.8)
