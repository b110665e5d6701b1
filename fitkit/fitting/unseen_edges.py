"""An edge that came before its window's first sample, under a single exponential.

A record that begins after the drive switched (a logger started by hand, a capacitor charging
curve from its first sample on) shows a first-order response only as
b + s (1 - exp(-(t - t0)/tau)) = (b + s) - s exp(t0/tau) exp(-t/tau) at every sample: only
b + s and s exp(t0/tau) reach the data, so the edge time, the baseline and the step trade off
exactly and tau alone is measured. Fitted with all three free, the Jacobian is singular to
about 1e-11 and what is computed from its inverse is rounding error: on one real
microcontroller capture the correlated-residual correction said "white noise" (tau's interval
0.14 % wide), and on the same file with its time column in seconds or an offset added the time
constant came out "not determined" and the capture was refused.

Such an edge's time is held at its window's first sample (any earlier time gives the same fit),
which leaves b + s and s determined and the fit well conditioned; its baseline, step and time
are then reported as not determined, since the record does not hold them
(fitkit.fitting.estimates.level_estimates).
"""

from __future__ import annotations

from typing import TYPE_CHECKING, Mapping

if TYPE_CHECKING:
    from .form_fit import FormFit

#: Forms whose response is one exponential from the edge on: a shift of the edge before the first
#: sample is the same as a larger step from another baseline.
SINGLE_EXPONENTIAL = ("first-order",)


def unseen_edge_times(ff: "FormFit", fixed: Mapping[str, float]) -> dict[str, float]:
    """{"t0_i": first sample time (s)} for every edge of a single-exponential fit whose fitted
    time lies before its window's first sample (its time free, not held by the caller); empty
    when there is none."""
    joint = ff.joint
    if ff.form.name not in SINGLE_EXPONENTIAL or not joint.free_t0 or not ff.converged:
        return {}
    out = {}
    for i, seg in enumerate(joint.segments):
        key = f"t0_{i}"
        if key in fixed or key not in ff.fit.values or "t0" in fixed:
            continue
        first = float(seg.time[0])
        if seg.edge_time + ff.fit.values[key] * joint.scaling.time_unit < first:
            out[key] = first
    return out
