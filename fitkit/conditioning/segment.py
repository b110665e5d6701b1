"""StepSegment: one edge of a capture, cut out and described, ready to fit.

This is the contract between conditioning (which finds edges and levels) and
fitting (which fits forms to segments). Times in seconds (absolute capture
time, not relative to the edge), levels in volts.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from ..results import json_number


#: A recorded drive "returns" when it ends within this share of its largest excursion from where
#: it began (a pulse inside the window); an output likewise returns to its baseline.
RETURN_FRACTION = 0.3


def drive_returns(drive: np.ndarray | None, before: float | None, after: float | None) -> bool:
    """True when a recorded drive (V) ends near where it began: a pulse inside the window, which
    explains an output that returns to its baseline as well."""
    if drive is None or before is None or after is None or not np.asarray(drive).size:
        return False
    excursion = float(np.max(np.abs(np.asarray(drive, dtype=float) - before)))
    return abs(after - before) < RETURN_FRACTION * excursion


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
    noise_on_baseline: True when ``noise_rms`` is the spread of the settled pre-edge
        baseline (which holds band-limited noise too), False when the baseline was too
        short and the channel's sample-to-sample estimate stands in (which band-limited
        noise makes too low).
    quantisation_step: output quantisation step (V), or None when not visibly quantised.
    averaged_edges: number of edges coherently averaged into this segment (1 = raw).
    flags: plain-language quality warnings for this segment.
    returns_to_baseline: True when the output spikes or moves and then comes
        back to its baseline (a high-pass or band-pass response); ``final`` then
        equals ``baseline`` (or the measured settled level), and ``step`` is
        about zero, so use ``step_size`` as the size of the step.
    step_size: the signed step (V) that is 100 % for the model-free metrics:
        ``final - baseline`` for a response that settles to a new level; for a
        response that returns to its baseline, the input's step
        ``input_after - input_before`` when there is an input channel, else the
        peak excursion of the output. NaN when not measured.
    step_source: where ``step_size`` comes from: "output levels", "input step"
        or "output peak excursion".
    settled: False when the output was still moving at the end of the window
        (``final`` is then the mean of the last samples, not the settled level).
    sample_interval: seconds between samples, as the reader knew it
        (Capture.sample_interval, passed on by conditioning); a segment built by
        hand gets its own time axis's median interval (NaN below two samples).
    alignment_variance: for a coherent average, the variance (s^2) of the
        kernel its alignment smeared the output with: the edges' sub-sample
        interpolation and, when they were located on the output itself, the
        jitter of those locations (:func:`.segments.average_segments`); 0 for a raw edge.
    previous_edges: for a coherent average, for the previous edge and each
        earlier one whose response had not settled: (seconds from that edge to
        this one, its output step in V, its input step in V or NaN), averaged
        over the averaged edges (a step of 0 for an edge without one), so that
        the fit can model their still-settling tails as it does for a raw edge
        (:mod:`fitkit.fitting.previous_tails`); None for a raw edge or when no
        averaged edge follows another.
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
    returns_to_baseline: bool = False
    step_size: float = float("nan")
    step_source: str = "output levels"
    settled: bool = True
    sample_interval: float = float("nan")
    alignment_variance: float = 0.0
    previous_edges: tuple[tuple[float, float, float], ...] | None = None
    noise_on_baseline: bool = False

    def __post_init__(self) -> None:
        if not math.isfinite(self.sample_interval):
            t = np.asarray(self.time, dtype=float)
            object.__setattr__(self, "sample_interval", float(np.median(np.diff(t))) if t.size > 1 else math.nan)

    @property
    def step(self) -> float:
        """final - baseline, in volts (signed)."""
        return self.final - self.baseline

    @property
    def n_points(self) -> int:
        return int(self.time.size)

    @property
    def drive_returns(self) -> bool:
        """The recorded drive ends near where it began (see :func:`drive_returns`)."""
        return drive_returns(self.input, self.input_before, self.input_after)

    @property
    def n_before_edge(self) -> int:
        """Number of samples before the edge time."""
        return int(np.searchsorted(self.time, self.edge_time, side="right"))

    def to_dict(self) -> dict[str, Any]:
        """Description of the segment as plain JSON-ready types (no sample arrays)."""
        return {
            "start": self.start, "stop": self.stop, "n_points": self.n_points,
            "n_before_edge": self.n_before_edge,
            "time_first": json_number(self.time[0]) if self.time.size else None,
            "time_last": json_number(self.time[-1]) if self.time.size else None,
            "edge_time": json_number(self.edge_time), "direction": self.direction,
            "baseline": json_number(self.baseline), "final": json_number(self.final),
            "step": json_number(self.step), "step_size": json_number(self.step_size),
            "step_source": self.step_source, "returns_to_baseline": self.returns_to_baseline,
            "settled": self.settled,
            "input_before": json_number(self.input_before), "input_after": json_number(self.input_after),
            "noise_rms": json_number(self.noise_rms),
            "quantisation_step": json_number(self.quantisation_step),
            "averaged_edges": self.averaged_edges, "flags": list(self.flags),
        }
