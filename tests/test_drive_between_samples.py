"""A drive that jumps between two of its samples: its shape there is unknown.

In measured-input mode the model draws the drive as straight lines between
samples; a generator edge faster than the sampling jumps somewhere inside one
interval. On a thousand edges of a response ringing ten samples a cycle, the
difference between the line and a jump moved Q by about 40 of the joint fit's
standard errors, and its interval missed the truth. fitkit adds that
difference as a systematic term, and where in the interval the jump lies as a
random one (fitkit/fitting/drive_between_samples.py; the coverage with jumps at
random places: tests/test_fitting_measured_input.py).
The captures are the textbook ringing step response summed over ideal edges
half way between samples (tests/support/square_waves.py).
"""

from __future__ import annotations

import numpy as np
from scipy import signal

from fitkit.capture import Capture, Channel
from fitkit.fitting import fit_capture

from support.square_waves import Q, ringing_square_wave


def test_unresolved_drive_jump_widens_the_interval_to_the_truth():
    t, u, y, f0 = ringing_square_wave(100_000, 1000, sigma=0.01)
    r = fit_capture(Capture(time=t, channels=(Channel("input", u, "V", "V"), Channel("output", y, "V", "V"))))
    note = [w for w in r.warnings if w.startswith("the drive jumps between two of its samples")]
    assert len(note) == 1 and "would move Q by" in note[0]
    assert r.quantity("Q").contains(Q) and r.quantity("f0").contains(f0)


def test_a_drive_edge_spread_over_samples_adds_nothing():
    # the same drive through a fast RC (tau = 2 samples, scipy.signal.lfilter of its
    # exact discretisation): the edge spans several samples and the straight lines hold
    t, u, y, _ = ringing_square_wave(100_000, 40, sigma=0.01)
    a = np.exp(-1.0 / 2.0)
    smooth = signal.lfilter([1 - a], [1, -a], u, zi=[a * u[0]])[0]
    r = fit_capture(Capture(time=t, channels=(Channel("input", smooth, "V", "V"), Channel("output", y, "V", "V"))))
    assert not any(w.startswith("the drive jumps between two of its samples") for w in r.warnings)


def test_a_jump_under_a_slow_response_keeps_its_estimates():
    # forty edges, fifty samples a ringing cycle: the line's sharpening is far below the noise,
    # but where each edge lies inside its sample still counts (a delay of up to half a sample
    # against a cycle of fifty), so the note may be given; the estimates stay honest
    t, u, y, f0 = ringing_square_wave(100_000, 40, sigma=0.01)
    r = fit_capture(Capture(time=t, channels=(Channel("input", u, "V", "V"), Channel("output", y, "V", "V"))))
    note = [w for w in r.warnings if w.startswith("the drive jumps between two of its samples")]
    assert all("anywhere in the interval" in w for w in note)
    # one fixed capture: its estimates within 4 of their standard errors (the
    # Monte Carlo of benchmarks/ covers the 95 % rate)
    for name, truth in (("Q", Q), ("f0", f0)):
        e = r.quantity(name)
        assert abs(e.value - truth) < 4 * e.stderr, (name, e.value, truth, e.stderr)
