"""Where one edge's window must stop: at the next window, or at the next edge's fitted time.

Consecutive windows of one record overlap (the next starts a quarter interval
before its edge): the samples they share would count twice, overstating the
information (intervals too narrow, by a tenth for a 10-edge square wave), so
a window stops where the next one starts, before the fit; what is left of its
settling is the next window's previous-edge tail
(:meth:`.joint_model.JointModel.previous_tail`). Without an input channel the
conditioning places edges at the output's own mid-level crossing, later than
the real edge, so a window may also include the start of the next edge's
response: the next edge's fitted time says where to stop, after the fit.
"""

from __future__ import annotations

from dataclasses import replace
from typing import Sequence

import numpy as np

from ..conditioning.segment import StepSegment
from ..conditioning.segments import windows_touch
from .joint_model import JointModel
from .least_squares import ModelFit

#: A window is cut only when at least this many of its samples are left.
MIN_KEPT = 8


def consecutive_windows_cut(segments: Sequence[StepSegment]) -> tuple[StepSegment, ...]:
    """Each raw window of one record cut where the next window starts."""
    segs = list(segments)
    for i in range(len(segs) - 1):
        seg, nxt = segs[i], segments[i + 1]
        if windows_touch(seg, nxt):
            segs[i] = _cut_at(seg, float(nxt.time[0]))
    return tuple(segs)


def cut_at_fitted_edges(joint: JointModel, fit: ModelFit) -> list[StepSegment] | None:
    """The joint model's windows cut where they reach the next edge's fitted time
    (edge delays fitted), or None when none does."""
    if not joint.free_t0 or len(joint.segments) < 2:
        return None
    sc = joint.scaling
    segs = list(joint.segments)
    for i in range(len(segs) - 1):
        nxt = joint.segments[i + 1]
        segs[i] = _cut_at(segs[i], nxt.edge_time + fit.values.get(f"t0_{i + 1}", 0.0) * sc.time_unit)
    return segs if any(a is not b for a, b in zip(segs, joint.segments)) else None


def _cut_at(seg: StepSegment, limit: float) -> StepSegment:
    """``seg`` stopped before time ``limit`` (s) when its window reaches past it after its edge."""
    if not seg.time[-1] >= limit > seg.edge_time:
        return seg
    keep = int(np.searchsorted(seg.time, limit, side="left"))
    return _trimmed(seg, keep) if keep >= MIN_KEPT else seg


#: Cut segments kept for reuse, so the next candidate form finds the same
#: objects (and the joint model's prepared-data cache hits).
_TRIMMED: dict[tuple[int, int], tuple[StepSegment, StepSegment]] = {}


def _trimmed(seg: StepSegment, keep: int) -> StepSegment:
    """``seg`` cut to its first ``keep`` samples (the same object for the same cut)."""
    hit = _TRIMMED.get((id(seg), keep))
    if hit is not None and hit[0] is seg:
        return hit[1]
    out = replace(seg, stop=seg.start + keep, time=seg.time[:keep], output=seg.output[:keep],
                  input=None if seg.input is None else seg.input[:keep])
    if len(_TRIMMED) >= 64:
        _TRIMMED.pop(next(iter(_TRIMMED)))
    _TRIMMED[(id(seg), keep)] = (seg, out)
    return out
