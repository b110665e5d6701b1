"""First-order decay: a high-pass with one pole (coupling capacitor, AC-coupled input).

At the edge the output jumps by ``step`` and then decays back to ``baseline``:

    unit_step(t) = exp(-t / tau) for t >= 0,    H(s) = tau s / (1 + tau s).

Here ``step`` is the size of the jump and ``final_value`` is 0: the response
normalised for ``guess`` jumps to 1 and decays to 0.
Derived: tau, the -3 dB corner (lower cut-off) of the high-pass, the 90 % to
10 % decay time (tau ln 9 for this form) and the 2 % settling time (tau ln 50),
all from the numerical helpers in fitkit.forms.metrics.
"""

from __future__ import annotations

import numpy as np

from .base import Form, ParamSpec, causal
from .metrics import half_power_frequency, step_metrics
from .shape_measures import decay_time_scale


def unit_step(t_rel: np.ndarray, *, tau: float) -> np.ndarray:
    """exp(-t/tau) after the edge (1 at the edge itself), 0 before; seconds."""
    after, t = causal(t_rel)
    return np.where(after, np.exp(-t / tau), 0.0)


def transfer_function(*, tau: float) -> tuple[np.ndarray, np.ndarray]:
    """H(s) = tau s / (tau s + 1)."""
    return np.array([tau, 0.0]), np.array([tau, 1.0])


def guess(t_rel: np.ndarray, y_norm: np.ndarray) -> list[dict[str, float]]:
    """Starting taus spread around the time to fall to 1/e of the jump."""
    scale = decay_time_scale(t_rel, y_norm)
    return [{"tau": scale * f} for f in (0.3, 0.6, 1.0, 1.7, 3.0)]


def derived(*, tau: float) -> dict[str, float]:
    """tau (s), cutoff_3db (Hz), decay_time 90->10 % (s), settling_time_2pct (s)."""
    num, den = transfer_function(tau=tau)
    # the decay seen as the complementary rise 1 - exp(-t/tau): same crossing times
    m = step_metrics(lambda t: 1.0 - unit_step(t, tau=tau), horizon=10.0 * tau, resolution=tau / 20.0)
    return {
        "tau": tau,
        "cutoff_3db": half_power_frequency(num, den, scale=1.0 / tau, high_pass=True),
        "decay_time": m["rise_time"],
        "settling_time_2pct": m["settling_time_2pct"],
    }


FIRST_ORDER_DECAY = Form(
    name="first-order-decay",
    summary="single pole high-pass: jumps at the edge, then exp(-t/tau) back to the baseline",
    shape=(ParamSpec("tau", "s", "time", "time constant of the decay"),),
    unit_step=unit_step,
    transfer_function=transfer_function,
    guess=guess,
    derived=derived,
    derived_units={"tau": "s", "cutoff_3db": "Hz", "decay_time": "s", "settling_time_2pct": "s"},
    order=1,
    final_value=0.0,
)
