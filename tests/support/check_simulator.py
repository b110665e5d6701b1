"""Test helper for the board check: an independent board simulator.

The simulator does not use fitkit's circuit code: closed-form transfer functions of each
library topology (circuit textbook formulas, e.g. Horowitz and Hill, The Art
of Electronics, 3rd ed., ch. 1 and 6; the unity-gain Sallen-Key and the
multiple-feedback low-pass as in TI application report SLOA049, "Active
Low-Pass Filter Design") simulated with scipy.signal.lsim.
"""

from __future__ import annotations

import numpy as np
from scipy import signal

from fitkit.capture import Capture


# ---------------------------------------------------------------- independent simulator

def closed_form_tf(topology: str, v: dict[str, float]) -> tuple[list[float], list[float]]:
    """(num, den) of H(s) = Vout/Vin, descending powers of s, from textbook formulas."""
    R1, C1 = v.get("R1"), v.get("C1")
    if topology == "rc-low-pass":
        return [1.0], [R1 * C1, 1.0]
    if topology == "rc-high-pass":
        return [R1 * C1, 0.0], [R1 * C1, 1.0]
    if topology == "rl":              # output across L: sL/(R + sL)
        return [v["L1"] / R1, 0.0], [v["L1"] / R1, 1.0]
    if topology == "rl-across-r":
        return [1.0], [v["L1"] / R1, 1.0]
    if topology == "rc-ladder-2":
        R2, C2 = v["R2"], v["C2"]
        return [1.0], [R1 * C1 * R2 * C2, R1 * C1 + R2 * C2 + R1 * C2, 1.0]
    if topology == "rc-buffered-2":
        R2, C2 = v["R2"], v["C2"]
        return [1.0], list(np.polymul([R1 * C1, 1.0], [R2 * C2, 1.0]))
    if topology == "rlc-series-c":
        L1 = v["L1"]
        return [1.0], [L1 * C1, R1 * C1, 1.0]
    if topology == "rlc-series-r":
        L1 = v["L1"]
        return [R1 * C1, 0.0], [L1 * C1, R1 * C1, 1.0]
    if topology == "sallen-key-low-pass":    # C1 feedback, C2 to ground, unity gain
        R2, C2 = v["R2"], v["C2"]
        return [1.0], [R1 * R2 * C1 * C2, C2 * (R1 + R2), 1.0]
    if topology == "mfb-low-pass":           # C2 at the junction to ground, C1 feedback
        R2, R3, C2 = v["R2"], v["R3"], v["C2"]
        return [-R2 / R1], [R2 * R3 * C1 * C2, C1 * (R2 + R3 + R2 * R3 / R1), 1.0]
    raise KeyError(topology)


def simulate_board(topology: str, values: dict[str, float], *, n: int = 1500, span: float | None = None,
                   noise: float = 3e-3, bits: int = 10, full_scale: tuple[float, float] = (-1.2, 1.2),
                   seed: int = 0, pre: float = 0.1) -> Capture:
    """A two-channel capture (input pad, output) of a 1 V step into the circuit.

    Noise: Gaussian, ``noise`` V rms, band-limited by a 2nd-order Butterworth
    at 0.2 x the sample rate; quantised to ``bits`` over ``full_scale``.
    """
    num, den = closed_form_tf(topology, values)
    sys = signal.lti(num, den)
    poles = np.roots(den)
    slow = 1.0 / np.min(np.abs(poles.real))
    span = span or 7 * slow
    t = np.linspace(-pre * span, (1 - pre) * span, n)
    u = (t >= 0).astype(float)
    _, y, _ = signal.lsim(sys, u, t - t[0])
    rng = np.random.default_rng(seed)
    b, a = signal.butter(2, 0.2)

    def scope(x):
        # vertical range set by the engineer to hold the trace: full_scale, widened when needed
        lo = min(full_scale[0], 1.2 * x.min() - 0.1)
        hi = max(full_scale[1], 1.2 * x.max() + 0.1)
        lsb = (hi - lo) / 2 ** bits
        w = rng.normal(0, 1, x.size)
        w = signal.lfilter(b, a, w)
        w *= noise / w.std()
        return np.clip(np.round((x + w) / lsb) * lsb, lo, hi)
    return Capture.from_arrays(t, {"input": scope(u), "output": scope(y)})


#: Design files used across the check tests (the formats of docs/design-format.md).
RC_DESIGN_TOML = '''name = "RC test board"
drive = "in"
measure = "out"
[circuit]
topology = "rc-low-pass"
[parts.R1]
value = "10k"
tolerance = "1%"
[parts.C1]
value = "100n"
tolerance = "5%"
'''

SK_DESIGN_TOML = '''name = "Sallen-Key test board"
drive = "in"
measure = "out"
[circuit]
topology = "sallen-key-low-pass"
[parts.R1]
value = "10k"
tolerance = "1%"
[parts.R2]
value = "10k"
tolerance = "1%"
[parts.C1]
value = "22n"
tolerance = "5%"
[parts.C2]
value = "10n"
tolerance = "5%"
'''
