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
from ..conditioning.segments import edge_step, input_step, reaching_edges
from .scaling import Scaling

def previous_step(segments: Sequence[StepSegment], i: int, scaling: Scaling,
                  measured_input: bool) -> tuple[float, float] | None:
    """(time since the previous edge, its step) for edge i, scaled, or None when
    edge i has no previous edge reaching its window."""
    seg = segments[i]
    if seg.averaged_edges != 1:
        return _scaled(seg.previous_edges[0], scaling, measured_input) if seg.previous_edges else None
    reaching = reaching_edges(segments, i)
    return _step_between(segments, reaching[0], i, scaling, measured_input) if reaching else None


def earlier_steps(segments: Sequence[StepSegment], i: int, scaling: Scaling,
                  measured_input: bool) -> tuple[tuple[float, float], ...]:
    """(time since, step) of the edges before edge i's previous one whose
    responses still reach its window (:func:`fitkit.conditioning.segments.reaching_edges`;
    for an average, as conditioning recorded them)."""
    seg = segments[i]
    if seg.averaged_edges != 1:
        pairs = (_scaled(r, scaling, measured_input) for r in (seg.previous_edges or ())[1:])
    elif previous_step(segments, i, scaling, measured_input) is None:
        return ()
    else:
        pairs = (_step_between(segments, j, i, scaling, measured_input) for j in reaching_edges(segments, i)[1:])
    return tuple(p for p in pairs if p is not None)


def _step_between(segments: Sequence[StepSegment], j: int, i: int, scaling: Scaling,
                  measured_input: bool) -> tuple[float, float] | None:
    """(time from edge j to edge i, edge j's step), scaled, or None when not measured."""
    return _scaled((segments[i].edge_time - segments[j].edge_time, edge_step(segments, j),
                    input_step(segments, j)), scaling, measured_input)


def _scaled(recorded: tuple[float, float, float], scaling: Scaling, measured_input: bool
            ) -> tuple[float, float] | None:
    """(time since, step) scaled from (seconds, output step V, input step V)."""
    delta_s, out_step, in_step = recorded
    step = in_step / scaling.input_unit if measured_input else out_step / scaling.volt_unit
    delta = delta_s / scaling.time_unit
    return (delta, step) if math.isfinite(step) and step != 0.0 and delta > 0 else None
