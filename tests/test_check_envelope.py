"""The tolerance envelope against textbook formulas."""

from __future__ import annotations

import itertools
import math

import numpy as np
import pytest
from scipy import signal

from fitkit.check import loads_design
from fitkit.check.envelope import compare, tolerance_envelope
from support.check_simulator import RC_DESIGN_TOML, SK_DESIGN_TOML

RC = RC_DESIGN_TOML

SK = SK_DESIGN_TOML


def test_rc_envelope_is_bounded_by_the_corner_time_constants():
    # textbook: tau = R C, step response 1 - exp(-t / tau); extremes at the corners
    design = loads_design(RC)
    t = np.linspace(0, 8e-3, 400)
    env = tolerance_envelope(design, t, trials=50, seed=1)
    tau_lo, tau_hi = 9.9e3 * 95e-9, 10.1e3 * 105e-9
    assert env.ranges["tau"] == pytest.approx((tau_lo, tau_hi), rel=1e-9)
    assert env.nominal_quantities["tau"] == pytest.approx(1e-3)
    assert np.allclose(env.low, 1 - np.exp(-t / tau_hi), atol=1e-9)
    assert np.allclose(env.high, 1 - np.exp(-t / tau_lo), atol=1e-9)
    assert np.all(env.low <= env.nominal + 1e-12) and np.all(env.nominal <= env.high + 1e-12)
    assert env.corners == 4 and env.trials == 50
    assert "uniform" in env.to_dict()["distribution"]


def sk_q_f0(r1, r2, c1, c2):
    # unity-gain Sallen-Key (TI application report SLOA049):
    # w0 = 1/sqrt(R1 R2 C1 C2), Q = sqrt(R1 R2 C1 C2) / (C2 (R1 + R2))
    w0 = 1 / math.sqrt(r1 * r2 * c1 * c2)
    return math.sqrt(r1 * r2 * c1 * c2) / (c2 * (r1 + r2)), w0 / (2 * math.pi)


def test_sallen_key_ranges_hold_the_corners_and_stay_inside_the_tolerance_box():
    design = loads_design(SK)
    env = tolerance_envelope(design, np.linspace(0, 3e-3, 200), trials=100, seed=2)
    bands = [(design.parts[p].low, design.parts[p].high) for p in ("R1", "R2", "C1", "C2")]
    corners = [sk_q_f0(*c) for c in itertools.product(*bands)]
    dense = [sk_q_f0(*c) for c in itertools.product(*(np.linspace(lo, hi, 6) for lo, hi in bands))]
    for i, name in enumerate(("Q", "f0")):
        lo, hi = env.ranges[name]
        assert lo <= min(c[i] for c in corners) * (1 + 1e-9) and hi >= max(c[i] for c in corners) * (1 - 1e-9)
        assert lo >= min(c[i] for c in dense) * (1 - 1e-9) and hi <= max(c[i] for c in dense) * (1 + 1e-9)
    q0, f0 = sk_q_f0(10e3, 10e3, 22e-9, 10e-9)
    assert env.nominal_quantities["Q"] == pytest.approx(q0, rel=1e-9)
    assert env.nominal_quantities["f0"] == pytest.approx(f0, rel=1e-9)


def test_capture_against_the_envelope():
    design = loads_design(RC)
    t = np.linspace(0, 8e-3, 400)
    env = tolerance_envelope(design, t, trials=20, seed=3)
    # scipy.signal.step of 1/(tau s + 1) as the measured response
    _, inside = signal.step(signal.lti([1.0], [1e-3, 1.0]), T=t)
    _, slow = signal.step(signal.lti([1.0], [1.5e-3, 1.0]), T=t)
    ok = compare(env, t, 0.2 + 2.0 * inside, baseline=0.2, step=2.0, noise_rms=1e-3)
    bad = compare(env, t, 0.2 + 2.0 * slow, baseline=0.2, step=2.0, noise_rms=1e-3)
    assert ok.fraction_outside == 0.0 and ok.max_excursion == 0.0
    assert bad.fraction_outside > 0.5 and bad.max_excursion > 0.1
    assert bad.margin == pytest.approx(3e-3)
