"""StepSegment: one edge of a capture, cut out and described, ready to fit.

This is the contract between conditioning (which finds edges and levels) and
fitting (which fits forms to segments). Times in seconds (absolute capture
time, not relative to the edge), levels in volts.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np


@dataclass(frozen=True)
class StepSegment:
    """One edge and the response around it.

    Attributes
    ----------
    start, stop: slice of the capture's sample indices this segment covers
        (``capture.time[start:stop]``), so every sample keeps its original index.
    time: sample times in seconds (absolute).
    output: the response (output channel) in volts.
    input: the drive (input channel) in volts, or None when there is no input channel.
    edge_time: time of the edge in seconds, to sub-sample precision
        (interpolated mid-level crossing of the input, or the output's
        estimate when there is no input channel).
    direction: +1 for a rising edge of the drive, -1 for a falling one.
    baseline: settled output level before the edge (V).
    final: output level the response settles to (or is heading for) after the edge (V).
    input_before, input_after: input levels before and after the edge (V), or None.
    noise_rms: robust estimate of the output noise standard deviation (V).
    quantisation_step: output quantisation step (V), or None when not visibly quantised.
    averaged_edges: number of edges coherently averaged into this segment (1 = raw).
    flags: plain-language quality warnings for this segment.
    """

    start: int
    stop: int
    time: np.ndarray
    output: np.ndarray
    input: np.ndarray | None
    edge_time: float
    direction: int
    baseline: float
    final: float
    input_before: float | None = None
    input_after: float | None = None
    noise_rms: float = float("nan")
    quantisation_step: float | None = None
    averaged_edges: int = 1
    flags: tuple[str, ...] = field(default_factory=tuple)

    @property
    def step(self) -> float:
        """final - baseline, in volts (signed)."""
        return self.final - self.baseline

    @property
    def n_points(self) -> int:
        return int(self.time.size)
