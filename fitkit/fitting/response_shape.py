"""What the response looks like, read off the segments, to choose the candidate forms.

``returns_to_baseline``: the output comes back to its pre-edge level (a
high-pass or band-pass) while its recorded drive, if any, does not;
``moves_wrong_way``: the output first moves against its step (a right-half-plane
zero, or a probe or ground artefact). Used by fitkit.fitting.step_fit with
fitkit.fitting.selection.default_candidates.
"""

from __future__ import annotations

import math
from typing import Sequence

import numpy as np

from ..conditioning.segment import StepSegment


def returns_to_baseline(segments: Sequence[StepSegment]) -> bool:
    """True when the response decays back to its pre-edge level (high-pass shape) while its
    drive, when recorded, does not (a drive pulse that returns is the low-pass forms' case)."""
    seg = segments[0]
    if seg.drive_returns:
        return False
    excursion = float(np.max(np.abs(np.asarray(seg.output) - seg.baseline))) if seg.output.size else 0.0
    return excursion > 0 and abs(seg.final - seg.baseline) < 0.2 * excursion


#: A response "first moves the wrong way" when, before it first crosses half its step, its
#: 5-sample running mean goes against the step by more than this many noise sigmas ...
WRONG_WAY_SIGMAS = 6.0
#: ... and by more than this fraction of the step (common practice, no source).
WRONG_WAY_FRACTION = 0.02


def moves_wrong_way(segments: Sequence[StepSegment]) -> bool:
    """True when, on most edges, the output first moves against its step (an undershoot: a
    right-half-plane zero, or a probe or ground artefact) before it rises."""
    votes = []
    for seg in segments:
        step = float(seg.final - seg.baseline)
        if seg.returns_to_baseline or not (math.isfinite(step) and step != 0.0) or seg.output.size < 10:
            continue
        y = (np.asarray(seg.output, dtype=float) - seg.baseline) / step
        smooth = np.convolve(y, np.ones(5) / 5.0, mode="valid")
        crossed = np.flatnonzero(smooth > 0.5)
        before = smooth[:crossed[0]] if crossed.size else smooth
        noise = seg.noise_rms / abs(step) if math.isfinite(seg.noise_rms) else 0.0
        depth = -float(np.min(before)) if before.size else 0.0
        votes.append(depth > max(WRONG_WAY_SIGMAS * noise / math.sqrt(5.0), WRONG_WAY_FRACTION))
    return bool(votes) and sum(votes) > len(votes) / 2
