"""Quality flags: plain-language warnings on whether a capture can say enough.

Each check names what is wrong, why it matters for the fit, and what to
change at the bench. The thresholds are common practice, no source:

* not settled: the output was still moving at the end of the window after
  the edge (see fitkit.conditioning.segments);
* too few samples across the rise: fewer than MIN_TRANSITION_SAMPLES sample
  intervals in the 10-90 % rise (or fall, or decay);
* too little pre-edge baseline: fewer than MIN_BASELINE_SAMPLES samples
  before the edge, or less than MIN_BASELINE_FRACTION of the segment's
  window (a scope's pre-trigger is usually set to about 10 %);
* clipped: a run of at least MIN_CLIPPED_RUN samples sitting exactly at the
  trace's largest or smallest value, in a trace whose noise would otherwise
  make neighbouring samples differ (noise above half a quantisation step);
* no edge: an error (not a flag) that says what was looked for and that
  ``--edge-time`` forces an edge time.
"""

from __future__ import annotations

import math

import numpy as np

from ..errors import ConditioningError
from ..units import format_value
from .levels import drifts
from .metrics import StepMetrics
from .segment import StepSegment

MIN_TRANSITION_SAMPLES = 5
MIN_BASELINE_SAMPLES = 10
MIN_BASELINE_FRACTION = 0.02
MIN_CLIPPED_RUN = 4
#: A segment whose response sits clipped for more than this share of its samples
#: after the edge is not fitted: the level it settles to is not observed.
MAX_CLIPPED_SHARE = 0.1


def clipped_runs(values: np.ndarray, noise_rms: float, quantisation_step: float | None) -> np.ndarray:
    """(start, stop) index pairs of runs of samples stuck at the trace's max or min.

    Returns an array of shape (k, 2); empty when the trace is too quiet to tell
    clipping from a clean settled level.
    """
    none = np.empty((0, 2), dtype=np.int64)
    v = np.asarray(values, dtype=float)
    if v.size < MIN_CLIPPED_RUN or not (noise_rms > 0):
        return none
    if quantisation_step is not None and noise_rms <= 0.5 * quantisation_step:
        return none
    runs = []
    for extreme in (np.nanmax(v), np.nanmin(v)):
        at = np.concatenate(([False], v == extreme, [False])).astype(np.int8)
        change = np.flatnonzero(np.diff(at))
        starts, stops = change[::2], change[1::2]
        long_enough = (stops - starts) >= MIN_CLIPPED_RUN
        runs.append(np.column_stack((starts[long_enough], stops[long_enough])))
    return np.concatenate(runs).astype(np.int64) if runs else none


def clipped_share(segment: StepSegment, runs: np.ndarray) -> tuple[float, int]:
    """(share of the samples after the edge that lie in clipped runs, their count) of one segment."""
    if runs.size == 0 or segment.time.size == 0:
        return 0.0, 0
    first = segment.start + int(np.searchsorted(segment.time, segment.edge_time))
    after = segment.stop - first
    if after <= 0:
        return 0.0, 0
    count = int(np.sum(np.clip(np.minimum(runs[:, 1], segment.stop) - np.maximum(runs[:, 0], first), 0, None)))
    return count / after, count


def clipped_error(channel: str, level: float, unit: str, count: int, total: int, start: float,
                  path: str | None) -> ConditioningError:
    """The error for a response whose every edge runs into the trace's clip level."""
    return ConditioningError(
        f"the response in channel {channel!r} sits flat at {format_value(level, unit)} from "
        f"{_at(start)} on ({count} of {total} samples after the edges): it is clipped, so the level it "
        "settles to, and with it every time constant, is not observed",
        path=path or None,
        hint="capture again with the whole response on screen (a larger vertical scale or range, more "
             "attenuation, or a smaller drive); fitting only the unclipped start would guess the final level")


def _at(seconds: float) -> str:
    return format_value(seconds, "s")


def segment_flags(segment: StepSegment, metrics: StepMetrics, *,
                  clipped: dict[str, np.ndarray], pulse: bool = False, first: bool = False) -> tuple[str, ...]:
    """Plain-language quality warnings for one segment.

    ``clipped`` maps a channel name to its clipped runs (from clipped_runs).
    ``pulse``: the window holds a whole drive pulse (both edges), whose step
    metrics (settling to a final level, the 10-90 % transition) do not apply.
    ``first``: the record's first window (no earlier edge of the record is modelled before it).
    """
    flags: list[str] = []
    where = f"edge at {_at(segment.edge_time)}"
    if not segment.settled and not pulse:
        flags.append(f"{where}: the window after the edge is too short for the response to settle "
                     "(the final level is not reached), so time constants fitted to it will be poorly "
                     "determined; capture more time after each edge (slower time base or lower "
                     "square-wave frequency)")
    transition = metrics.transition_time
    kind = "rise" if metrics.rise_time is not None else "fall" if metrics.fall_time is not None else "decay"
    dt = segment.sample_interval
    if not pulse and metrics.samples_across_transition is not None \
            and metrics.samples_across_transition < MIN_TRANSITION_SAMPLES:
        flags.append(f"{where}: only {metrics.samples_across_transition:.1f} samples across the "
                     f"10-90 % {kind} ({_at(transition)} at {_at(dt)} per sample): the sample interval "
                     "is too coarse for the fastest time constant; use a faster sample rate")
    n_before = segment.n_before_edge
    before = float(segment.edge_time - segment.time[0]) if segment.time.size else 0.0
    window = float(segment.time[-1] - segment.time[0]) if segment.time.size > 1 else 0.0
    short_in_time = before < MIN_BASELINE_FRACTION * window
    if n_before < MIN_BASELINE_SAMPLES or short_in_time:
        remedy = ("move the trigger point so more of the record comes before the edge" if segment.start == 0
                  else "a lower square-wave frequency or a faster sample rate gives each edge more "
                       "settled samples before it")
        flags.append(f"{where}: too little baseline before the edge ({n_before} samples, "
                     f"{_at(before)}), so the starting level is poorly determined; {remedy}")
    if first and begins_moving(segment):
        flags.append(f"{where}: the output is already moving where the record begins (during the response "
                     "to an earlier change of the drive, or to this edge if it came before the first sample), "
                     "so the fit rests on its assumption about what came before; move the trigger point or "
                     "lengthen the record so it begins where the response has settled")
    for name, runs in clipped.items():
        if runs.size == 0:
            continue
        inside = runs[(runs[:, 1] > segment.start) & (runs[:, 0] < segment.stop)]
        if inside.size:
            count = int(np.sum(np.minimum(inside[:, 1], segment.stop) - np.maximum(inside[:, 0], segment.start)))
            flags.append(f"{where}: {count} samples of channel {name!r} sit flat at the trace's extreme "
                         "value and look clipped; change the vertical scale or offset so the whole "
                         "trace stays on screen")
    if segment.returns_to_baseline:
        flags.append(f"{where}: the output returns to its baseline (a high-pass or band-pass "
                     f"response); the step size is taken from the {segment.step_source}")
    return tuple(flags)


#: The pre-edge samples move when a straight line through them changes by more than this many
#: noise sigmas and this share of the step across them, at more than 4 standard errors
#: (common practice, no source).
MOVING_SIGMAS = 8.0
MOVING_SHARE = 0.05


def begins_moving(segment: StepSegment) -> bool:
    """True when the output before the segment's edge is not at rest: a straight line through the
    first half of the pre-edge samples (the second can hold the start of the response itself, the
    edge time being its mid-level crossing without a drive channel) changes by more than
    MOVING_SIGMAS noise sigmas and MOVING_SHARE of the step."""
    n = segment.n_before_edge // 2
    noise = segment.noise_rms if math.isfinite(segment.noise_rms) else 0.0
    step = abs(segment.step_size) if math.isfinite(segment.step_size) else 0.0
    return drifts(segment.time[:n], segment.output[:n], max(MOVING_SIGMAS * noise, MOVING_SHARE * step))


def no_edge_error(channel: str, looked_for: str, path: str | None) -> ConditioningError:
    """The error for a capture in which no edge was found."""
    return ConditioningError(
        f"no edge found in channel {channel!r}: looked for {looked_for}, and the trace never "
        "changes level clearly enough",
        path=path or None,
        hint="check that the capture holds a step, or pass --edge-time SECONDS to force the edge time")
