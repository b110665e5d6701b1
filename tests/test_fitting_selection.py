"""Automatic model selection: the right form when the data can tell, the simpler one when not.

Responses from scipy.signal and python-control (test_fitting_support); the
criterion is AICc with a margin of 10 in favour of the simpler form
(fitkit.fitting.selection). Each case runs 40 captures with fixed seeds and
requires at least 95 % (38 of 40) correct choices.
"""

from __future__ import annotations

import numpy as np
import pytest

from fitkit.fitting import fit_segments
from fitkit.fitting.selection import MARGIN

from support.fitting_sims import first_order_tf, second_order_tf, simulated_segment, step_control, two_pole_tf

N = 40

CASES = [
    # (label, transfer function, dt, noise, expected form)
    # distinguishable at this SNR
    ("first order", first_order_tf(1e-6), 1e-6 / 40, 0.01, "first-order"),
    ("two real poles 4:1", two_pole_tf(1e-6, 0.25e-6), 1e-6 / 40, 0.005, "two-real-pole"),
    ("ringing Q = 2", second_order_tf(100e3, 2.0), 1 / (100e3 * 40), 0.02, "underdamped"),
    # not distinguishable: the second pole is below one sample interval
    ("second pole under a sample", two_pole_tf(1e-6, 0.01e-6), 1e-6 / 40, 0.01, "first-order"),
    # not distinguishable at this noise: a second pole of 1/50 of the first
    ("faint second pole", two_pole_tf(1e-6, 0.02e-6), 1e-6 / 20, 0.05, "first-order"),
]


@pytest.mark.parametrize("label, tf, dt, noise, expected", CASES, ids=[c[0] for c in CASES])
def test_selection_picks_the_supported_form(label, tf, dt, noise, expected):
    rng = np.random.default_rng(1234)
    chosen = []
    for _ in range(N):
        seg = simulated_segment(tf, dt=dt, n_before=60, n_after=440, rng=rng, noise=noise,
                                simulator=step_control)
        r = fit_segments([seg], "auto", intervals="covariance", derived=False)
        chosen.append(r.model)
    right = sum(c == expected for c in chosen)
    assert right >= 0.95 * N, (label, {m: chosen.count(m) for m in set(chosen)})


def test_selection_records_every_candidate_and_a_plain_reason():
    rng = np.random.default_rng(5)
    seg = simulated_segment(second_order_tf(50e3, 3.0), dt=1 / (50e3 * 40), n_before=60, n_after=440,
                            rng=rng, noise=0.02)
    r = fit_segments([seg], "auto")
    names = [c.model for c in r.selection]
    assert "first-order" in names and "underdamped" in names
    chosen = [c for c in r.selection if c.note == "chosen"]
    assert len(chosen) == 1 and chosen[0].model == r.model == "underdamped"
    assert chosen[0].delta == 0.0
    assert "AICc" in r.selection_reason and f"{MARGIN:g}" in r.selection_reason
    assert r.derived["f0"].contains(50e3) and r.derived["Q"].determined


def test_equal_poles_are_two_real_poles_that_the_data_cannot_tell_apart():
    # Textbook: two equal real poles, 1/(1 + s tau)^2 (critically damped, Q = 1/2,
    # f0 = 1/(2 pi tau)). two-real-pole is fitted in (tau0, Q), regular at Q = 1/2, so it
    # converges and is chosen, reporting tau1 = tau2 or nearly so with intervals that
    # hold the truth; the double pole stays a fallback when no second-order form holds.
    import math
    from support.fitting_sims import two_pole_tf
    tau = 1e-6
    for seed in range(6):
        rng = np.random.default_rng(seed)
        seg = simulated_segment(two_pole_tf(tau, tau), dt=tau / 50, n_before=100, n_after=600, rng=rng,
                                noise=1e-3, edge_error=tau, simulator=step_control)
        r = fit_segments([seg], "auto")
        assert r.model in ("critically-damped", "two-real-pole")
        assert r.derived["f0"].value == pytest.approx(1 / (2 * math.pi * tau), rel=0.01)
        assert r.derived["Q"].value == pytest.approx(0.5, rel=0.01)
        if r.model == "two-real-pole":
            assert r.parameters["tau1"].value >= r.parameters["tau2"].value
            # 95 % intervals; with 6 captures a miss would be a 1-in-3 event at most, so
            # the widened check (2x the interval about its centre) cannot flake
            for name in ("tau1", "tau2"):
                lo, hi = r.parameters[name].ci95
                mid, half = 0.5 * (lo + hi), 0.5 * (hi - lo)
                assert mid - 2 * half <= tau <= mid + 2 * half, (name, r.parameters[name])


def test_double_pole_fallback_when_no_second_order_form_holds():
    from fitkit.fitting.selection import Candidate, needs_fallback
    from fitkit.forms import FORMS
    failed = [Candidate(FORMS[n], None, {}, False, "did not converge") for n in ("two-real-pole", "underdamped")]
    assert needs_fallback(failed)
    assert not needs_fallback(failed[:1] + [Candidate(FORMS["underdamped"], None, {}, True, "")])


def test_real_pole_forms_are_not_fitted_to_a_ringing_response():
    """A product of first-order lags has a positive impulse response (a convolution
    of decaying exponentials), so its step response cannot overshoot: once the
    two-real-pole fit lies clearly beyond Q = 1/2 the three-real-pole form is not
    fitted, and the candidate table says why. Response from scipy.signal (step_scipy)."""
    rng = np.random.default_rng(8)
    seg = simulated_segment(second_order_tf(50e3, 3.0), dt=1 / (50e3 * 40), n_before=60, n_after=440,
                            rng=rng, noise=0.02)
    r = fit_segments([seg], "auto", intervals="covariance", derived=False)
    three = next(c for c in r.selection if c.model == "three-real-pole")
    assert not three.converged and three.note.startswith("not tried: the response rings")
    assert r.model == "underdamped"


def test_real_pole_forms_are_fitted_when_the_response_does_not_ring():
    # three separated real poles (no overshoot): the three-real-pole candidate is fitted;
    # response from python-control (step_control)
    rng = np.random.default_rng(9)
    tf = ([1.0], list(np.polymul(np.polymul([1e-6, 1.0], [0.3e-6, 1.0]), [0.1e-6, 1.0])))
    seg = simulated_segment(tf, dt=1e-6 / 40, n_before=60, n_after=440, rng=rng, noise=0.002,
                            simulator=step_control)
    r = fit_segments([seg], "auto", intervals="covariance", derived=False)
    three = next(c for c in r.selection if c.model == "three-real-pole")
    assert three.converged and not three.note.startswith("not tried")
