"""The still-settling responses to earlier edges inside an edge's window.

A window starts a quarter interval before its edge, so the response to the
previous edge has had only about 3/4 of the interval to settle (e^-7.5 =
5.5e-4 of the step left at ten time constants). At high SNR or over a long
record that tail is far above the noise, so it is modelled: the previous
edge, taken as an ideal step of its measured size, contributes
step_prev (s(t + delta) - s_final) to this window (superposition of the
responses to the drive's steps; common practice, no source). In
measured-input mode the step is the input's, normalised (it is then scaled by
the fitted gain with the rest of the response); else the output's measured
step (its error is a small fraction of a small tail).

When the response does not settle between edges (a square wave whose half
period is a few time constants), the edges before the previous one still
reach the window too: 3 % of the step two edges back when the half period is
two time constants. Those are added the same way (:func:`earlier_steps`),
placed by their measured edge times, while the windows between are marked
unsettled by conditioning. Only consecutive raw edges of one record
(windows that touch or overlap) count; a coherent average carries its own
averaged edges' previous and earlier edges, averaged
(``StepSegment.previous_edges``).

All times are scaled (:mod:`.scaling`): (time since the edge, step) pairs.
"""

from __future__ import annotations

import math
from typing import Sequence

from ..conditioning.segment import StepSegment
from .scaling import Scaling

#: At most this many edges before the previous one are added to a window.
MAX_EARLIER_EDGES = 8


def previous_step(segments: Sequence[StepSegment], i: int, scaling: Scaling,
                  measured_input: bool) -> tuple[float, float] | None:
    """(time since the previous edge, its step) for edge i, scaled, or None when
    edge i has no previous edge reaching its window."""
    seg = segments[i]
    if seg.averaged_edges != 1:
        return _previous_of_average(seg, scaling, measured_input)
    if i == 0 or not _consecutive(segments[i - 1], seg):
        return None
    return _step_between(segments, i - 1, i, scaling, measured_input)


def earlier_steps(segments: Sequence[StepSegment], i: int, scaling: Scaling,
                  measured_input: bool) -> tuple[tuple[float, float], ...]:
    """(time since, step) of the edges before edge i's previous one whose
    response had not settled: edge j is included while every window from j + 1
    to i - 1 is consecutive with the next and marked unsettled (its response
    still moving at its end), at most :data:`MAX_EARLIER_EDGES`."""
    if segments[i].averaged_edges != 1:
        recorded = segments[i].previous_edges or ()
        return tuple(p for p in (_scaled(r, scaling, measured_input) for r in recorded[1:]) if p is not None)
    if previous_step(segments, i, scaling, measured_input) is None:
        return ()
    out = []
    j = i - 2
    while j >= 0 and len(out) < MAX_EARLIER_EDGES:
        later = segments[j + 1]
        if later.settled or later.averaged_edges != 1 or not _consecutive(segments[j], later):
            break
        pair = _step_between(segments, j, i, scaling, measured_input)
        if pair is not None:
            out.append(pair)
        j -= 1
    return tuple(out)


def _consecutive(earlier: StepSegment, later: StepSegment) -> bool:
    """Raw windows of one record that touch or overlap, in time order."""
    return (earlier.averaged_edges == 1 and not earlier.stop < later.start
            and earlier.edge_time < later.edge_time)


def _step_between(segments: Sequence[StepSegment], j: int, i: int, scaling: Scaling,
                  measured_input: bool) -> tuple[float, float] | None:
    """(time from edge j to edge i, edge j's step), scaled, or None when not measured."""
    seg, earlier = segments[i], segments[j]
    if measured_input:
        after = segments[j + 1]
        if after.input_before is None or earlier.input_before is None:
            return None
        step = (after.input_before - earlier.input_before) / scaling.input_unit
    else:
        size = earlier.step_size if math.isfinite(earlier.step_size) else earlier.final - earlier.baseline
        step = size / scaling.volt_unit
    delta = (seg.edge_time - earlier.edge_time) / scaling.time_unit
    return (delta, step) if math.isfinite(step) and step != 0.0 and delta > 0 else None


def _previous_of_average(seg: StepSegment, scaling: Scaling, measured_input: bool) -> tuple[float, float] | None:
    """A coherent average's previous edges, as conditioning recorded them."""
    return _scaled(seg.previous_edges[0], scaling, measured_input) if seg.previous_edges else None


def _scaled(recorded: tuple[float, float, float], scaling: Scaling, measured_input: bool
            ) -> tuple[float, float] | None:
    """(time since, step) scaled from conditioning's (seconds, output step V, input step V)."""
    delta_s, out_step, in_step = recorded
    step = in_step / scaling.input_unit if measured_input else out_step / scaling.volt_unit
    delta = delta_s / scaling.time_unit
    return (delta, step) if math.isfinite(step) and step != 0.0 and delta > 0 else None
