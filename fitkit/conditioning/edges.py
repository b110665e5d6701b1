"""Finding the edges (transitions) of a step or square-wave trace.

Two ways, chosen from the trace itself:

* Level crossings, for traces that sit at two state levels (a square-wave
  drive, or a response that settles between edges). The trace is in the low
  state after it falls below 25 % of the way from the low to the high level
  and in the high state after it rises above 75 % (hysteresis, so noise and
  slow edges cannot make an edge twice). Each change of state is one edge.
* Jumps, for traces that spend most of the time at one level and leave it
  only briefly (the voltage across an inductor or the output of a high-pass
  filter: a spike at each edge that decays back). An edge is a group of
  consecutive first differences larger than half the largest one and well
  above the noise. A trace that ends at another level than it started is a
  step, not jumps, even when its histogram shows no clear second level (a
  resonant response still ringing): its ringing swings are as steep as its
  edge, so it is read by level crossings. A band-pass response (a series RLC
  measured across R) leaps at its edge, rings and returns to where it started:
  a swing that turns the trace back before it rests, no steeper than the swing
  before it, is that edge's ringing, not an edge (``_rings_on``).

In both, the edge time is the interpolated 50 % crossing of the transition
(IEEE Std 181's mid reference level instant, with linear interpolation
between the two samples bracketing the crossing; with several crossings in
one transition, which noise can cause, the mean of their times). On a slow,
noisy transition the noise can cross both thresholds again; a state held for
fewer than MIN_DWELL_SAMPLES samples, or a fifth of the median spacing of the
edges, is taken for noise, and the pair of edges around it is dropped
(common practice, no source).

The onset of an edge is the last sample before the crossing still within
max(3 noise sigma, 5 % of the amplitude) of the level before, or the last
sample in the old state when the trace never settled there (common practice,
no source); segments end before the next edge's onset. A trace that is
neither two-level nor jumpy (a response that never settles between edges)
falls back to level crossings.

Everything is vectorised over samples; the only Python loop is over edges.
Times in seconds, levels in volts.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any, Sequence

import numpy as np

from ..results import json_number
from .levels import StateLevels

#: Hysteresis thresholds as fractions of the way from the low to the high level.
LOW_THRESHOLD = 0.25
HIGH_THRESHOLD = 0.75
#: A trace whose first and last tenths differ by more than this fraction of its
#: range is a step (levels), not a trace of jumps that returns to its level.
ENDS_APART = 0.3
#: A state held for fewer samples than this (or a fifth of the median edge spacing) is noise.
MIN_DWELL_SAMPLES = 5
#: Two same-sign groups of large differences this many samples apart or closer are one jump.
JUMP_GAP_SAMPLES = 8


@dataclass(frozen=True)
class Edge:
    """One transition of a trace.

    index: first sample after the edge time.
    time: edge time in seconds (interpolated 50 % crossing).
    direction: +1 rising, -1 falling.
    onset_index: last sample still at the level before the edge.
    level_before, level_after: levels either side of the edge (V).
    """

    index: int
    time: float
    direction: int
    onset_index: int
    level_before: float
    level_after: float

    def to_dict(self) -> dict[str, Any]:
        return {"time": json_number(self.time), "index": self.index, "direction": self.direction,
                "onset_index": self.onset_index, "level_before": json_number(self.level_before),
                "level_after": json_number(self.level_after)}


@dataclass(frozen=True)
class EdgeSearch:
    """The edges found in one trace and how they were found (plain words)."""

    edges: tuple[Edge, ...]
    method: str
    #: found by crossings between two state levels (each edge's levels are the trace's rest levels)
    by_levels: bool = False


def is_two_level(levels: StateLevels, noise_rms: float) -> bool:
    """True when a trace sits at two clear state levels (square wave, settled step).

    Both levels must each hold at least 5 % of the samples, be at least 6
    noise sigma apart, span at least 30 % of the peak-to-peak range (so
    ringing or spikes do not pass for a second level), and each be a real
    histogram peak at least 3 times the mean count of the middle bins (so a
    decay that never settles does not pass for a level); common practice, no source.
    """
    amplitude = levels.amplitude
    spread = levels.maximum - levels.minimum
    if not (amplitude > 0 and spread > 0):
        return False
    noise = noise_rms if np.isfinite(noise_rms) else 0.0
    return bool(amplitude > 6 * noise and amplitude >= 0.3 * spread
                and min(levels.fraction_low, levels.fraction_high) >= 0.05
                and not levels.peak_ratio < 3.0)


def edge_sharpness(values: np.ndarray) -> float:
    """Largest sample-to-sample change as a fraction of the peak-to-peak range (0..1).

    Near 1 for a square wave whose edges fall within one sample interval,
    small for a smooth response; used to tell the drive from the response.
    """
    v = np.asarray(values, dtype=float)
    if v.size < 2:
        return 0.0
    spread = float(np.nanmax(v) - np.nanmin(v))
    if spread <= 0:
        return 0.0
    return float(np.nanmax(np.abs(np.diff(v))) / spread)


def _mid_crossing_time(time: np.ndarray, values: np.ndarray, first: int, last: int,
                       mid: float) -> tuple[float, int]:
    """Mean interpolated time of the crossings of ``mid`` in values[first:last+1].

    Returns (time, index of the first sample after the first crossing).
    values[first] and values[last] must lie on opposite sides of ``mid``.
    """
    w = values[first:last + 1] - mid
    side = w >= 0
    k = np.flatnonzero(side[1:] != side[:-1])
    if k.size == 0:  # defensive: treat the whole window as one crossing
        return float(0.5 * (time[first] + time[last])), last
    a, b = w[k], w[k + 1]
    frac = np.where(b != a, -a / np.where(b != a, b - a, 1.0), 0.0)
    t = time[first + k] + frac * (time[first + k + 1] - time[first + k])
    return float(np.mean(t)), int(first + k[0] + 1)


def _drop_short_states(marked: np.ndarray, changes: np.ndarray) -> np.ndarray:
    """Remove pairs of state changes around states held too briefly to be real."""
    changes = list(changes)
    while len(changes) >= 2:
        switch = marked[changes]
        held = np.diff(switch)
        limit = max(MIN_DWELL_SAMPLES, 0.2 * float(np.median(held)))
        k = int(np.argmin(held))
        if held[k] >= limit:
            break
        del changes[k:k + 2]
    return np.asarray(changes, dtype=np.int64)


def _onset(values: np.ndarray, before: int, floor: int, level: float, tol: float) -> int:
    """Last index in [floor, before] whose value is within ``tol`` of ``level``.

    When none is (the trace never settled at that level), ``before`` itself.
    """
    w = values[floor:before + 1]
    ok = np.flatnonzero(np.abs(w - level) <= tol)
    return int(floor + ok[-1]) if ok.size else int(before)


def edges_by_levels(time: np.ndarray, values: np.ndarray, levels: StateLevels,
                    noise_rms: float) -> EdgeSearch:
    """Edges of a two-level trace by hysteresis between 25 % and 75 % of the amplitude."""
    low, amplitude = levels.low, levels.amplitude
    lo_thr = low + LOW_THRESHOLD * amplitude
    hi_thr = low + HIGH_THRESHOLD * amplitude
    state = (values > hi_thr).astype(np.int8)
    state -= (values < lo_thr).astype(np.int8)
    marked = np.flatnonzero(state)
    marks = state[marked]
    del state
    changes = _drop_short_states(marked, np.flatnonzero(marks[1:] != marks[:-1]) + 1)
    tol = max(3 * (noise_rms if np.isfinite(noise_rms) else 0.0), 0.05 * amplitude)
    edges: list[Edge] = []
    floor = 0
    for c in changes:
        last_old, first_new = int(marked[c - 1]), int(marked[c])
        direction = int(marks[c])
        t_edge, index = _mid_crossing_time(time, values, last_old, first_new, levels.mid)
        before, after = (levels.low, levels.high) if direction > 0 else (levels.high, levels.low)
        onset = _onset(values, last_old, floor, before, tol)
        edges.append(Edge(index, t_edge, direction, onset, before, after))
        floor = first_new
    method = (f"crossings of the 50 % level between the state levels, with hysteresis "
              f"between {100 * LOW_THRESHOLD:.0f} % and {100 * HIGH_THRESHOLD:.0f} %")
    return EdgeSearch(tuple(edges), method, by_levels=True)


def edges_by_jumps(time: np.ndarray, values: np.ndarray, noise_rms: float) -> EdgeSearch:
    """Edges of a trace that jumps and decays back: groups of large first differences.

    A difference counts when it exceeds half the largest difference and 4 noise
    sigma times sqrt(2) (the spread of a difference of two noisy samples).
    Differences of one sign no more than two samples apart form one jump (and
    nearby same-sign groups are joined, see ``_merged_jumps``); a jump counts
    when the trace moves by more than 8 noise sigma times sqrt(2) across it, so
    a jump spread over a few samples (each difference well under the whole
    change) is found while a lone noisy difference is not.
    """
    method = "sudden jumps (the trace leaves one level and returns to it)"
    d = np.diff(values)
    if d.size == 0:
        return EdgeSearch((), method)
    size = np.abs(d)
    biggest = float(np.nanmax(size))
    noise = noise_rms if np.isfinite(noise_rms) else 0.0
    threshold = max(0.5 * biggest, 4 * np.sqrt(2.0) * noise)
    if not biggest > threshold:  # nothing stands out of the noise
        return EdgeSearch((), method)
    least_jump = 8 * np.sqrt(2.0) * noise
    cand = np.flatnonzero(size > threshold)
    sign = np.sign(d[cand]).astype(int)
    breaks = np.flatnonzero((np.diff(cand) > 2) | (sign[1:] != sign[:-1])) + 1
    starts, stops = _merged_jumps(cand, sign, np.concatenate(([0], breaks)),
                                  np.concatenate((breaks, [cand.size])) - 1)
    tol_floor = 3 * noise
    edges: list[Edge] = []
    floor = 0
    swing: _Swing | None = None   # the last jump seen: a kept edge or its ringing
    kept: _Swing | None = None    # the last kept edge's jump
    for g0, g1 in zip(starts, stops):
        first, last = int(cand[g0]), int(cand[g1]) + 1
        direction = int(sign[g0])
        before = float(np.median(values[max(floor, first - 8):first + 1]))
        after = float(values[last])
        if not abs(after - before) > least_jump:
            continue
        steepest = float(np.max(size[first:last]))
        seen = _Swing(direction, first, last, after, steepest)
        if swing is not None and kept is not None and _rings_on(values, swing, seen, edges[-1], kept, noise):
            swing = seen
            continue
        swing = kept = seen
        mid = 0.5 * (before + after)
        if (values[first] - mid) * (after - mid) >= 0:  # keep the bracketing samples straddling mid
            mid = 0.5 * (float(values[first]) + after)
        t_edge, index = _mid_crossing_time(time, values, first, last, mid)
        tol = max(tol_floor, 0.05 * abs(after - before))
        onset = _onset(values, first, floor, before, tol)
        edges.append(Edge(index, t_edge, direction, onset, before, after))
        floor = last
    return EdgeSearch(tuple(edges), method)


@dataclass(frozen=True)
class _Swing:
    """A jump of the trace as seen by the jump search: its direction, the indices where its
    group of large differences starts and ends, the level at the end (V) and its largest
    difference (V)."""

    direction: int
    start: int
    end: int
    level: float
    steepest: float


def _rings_on(values: np.ndarray, swing: _Swing, seen: _Swing, edge: Edge, kept: _Swing,
              noise: float) -> bool:
    """True when the jump ``seen`` is a ringing swing of the response to ``edge`` (the last kept
    edge, whose jump is ``kept``), not a new edge: it turns the trace back after ``swing`` (the
    last jump seen, the edge itself or an earlier swing of its ringing), and

    * the trace went on past where that swing's steep part ended, in its direction, before
      turning (a resonance swings through a turning point; after an edge of a response that
      only decays back, a high-pass or RL trace, the trace turns at once);
    * the trace did not rest between the two at the level the edge left (within max(3 noise
      sigma, 5 % of the edge) of it for as many samples as the edge's own steep part, and at
      least MIN_DWELL_SAMPLES): a ringing swing only passes through that level, a response
      that rests there before the next edge has ended;
    * the swing is no steeper than the one before (by 2 sqrt(2) noise sigma): a free
      oscillation decays, while a drive edge adds its own slope to whatever the trace does.

    A jump in the direction of a ringing swing just seen, with no rest between, is the same
    swing (its steep part broken by noise or rounding): the first condition is then not asked.
    A drive edge during a ringing response that passes all three is taken for ringing; the
    trace then does not rest between its edges, which a trace of jumps is assumed to do.
    The decaying free response of a resonance and its continuous slope at a turning point
    are textbook (Nilsson & Riedel, Electric Circuits, 10th ed., Pearson 2015, ch. 8, the
    underdamped step response); the margins are common practice, no source.
    """
    same_swing = seen.direction == swing.direction and swing is not kept
    if not (same_swing or seen.direction == -swing.direction) or seen.start <= swing.end:
        return False
    gap = values[swing.end:seen.start + 1]
    went_on = (np.max(gap) - swing.level) if swing.direction > 0 else (swing.level - np.min(gap))
    edge_size = abs(edge.level_after - edge.level_before)
    resting = np.abs(gap - edge.level_before) <= max(3 * noise, 0.05 * edge_size)
    return bool((same_swing or went_on > max(4 * noise, 0.05 * edge_size))
                and _longest_run(resting) < max(MIN_DWELL_SAMPLES, kept.end - kept.start)
                and seen.steepest <= swing.steepest + 2 * np.sqrt(2.0) * noise)


def _longest_run(flags: np.ndarray) -> int:
    """Length of the longest run of True in a boolean array."""
    padded = np.concatenate(([0], flags.astype(np.int8), [0]))
    ends = np.flatnonzero(np.diff(padded))
    return int(np.max(ends[1::2] - ends[::2])) if ends.size else 0


def _merged_jumps(cand: np.ndarray, sign: np.ndarray, starts: np.ndarray,
                  stops: np.ndarray) -> tuple[list[int], list[int]]:
    """Groups of large differences joined into one jump when they have the same sign and the gap
    between them is at most ``max(JUMP_GAP_SAMPLES, 4 x`` the jump's length so far): a fast rise
    that lasts a few samples (a band-pass rising with its fast pole) dips below the threshold
    between noisy samples, and two rises of one sign with no fall between are one edge."""
    merged_starts, merged_stops = [int(starts[0])], [int(stops[0])]
    for g0, g1 in zip(starts[1:], stops[1:]):
        first_prev, last_prev = cand[merged_starts[-1]], cand[merged_stops[-1]]
        gap = int(cand[g0] - last_prev)
        if sign[g0] == sign[merged_stops[-1]] and gap <= max(JUMP_GAP_SAMPLES, 4 * (last_prev - first_prev + 1)):
            merged_stops[-1] = int(g1)
        else:
            merged_starts.append(int(g0))
            merged_stops.append(int(g1))
    return merged_starts, merged_stops


def detect_edges(time: np.ndarray, values: np.ndarray, levels: StateLevels,
                 noise_rms: float) -> EdgeSearch:
    """All edges of a trace, by level crossings when it is two-level, else by jumps.

    A trace that is neither clearly two-level nor jumpy (a response that does
    not settle between edges) falls back to level crossings when its levels
    still stand well clear of the noise (6 sigma) and span 30 % of its range.
    """
    if is_two_level(levels, noise_rms):
        return edges_by_levels(time, values, levels, noise_rms)
    noise = noise_rms if np.isfinite(noise_rms) else 0.0
    spread = levels.maximum - levels.minimum
    levels_usable = levels.amplitude > 6 * noise and levels.amplitude >= 0.3 * spread > 0
    if levels_usable and ends_apart(values, spread):
        # a step that rings: it ends at another level than it started, which a
        # trace of jumps (leaving one level and returning to it) does not; its
        # ringing swings are as steep as the edge and would pass for jumps
        found = edges_by_levels(time, values, levels, noise_rms)
        return EdgeSearch(found.edges, found.method + " (the trace does not settle at its levels)", by_levels=True)
    jumps = edges_by_jumps(time, values, noise_rms)
    if jumps.edges or not levels_usable:
        return jumps
    found = edges_by_levels(time, values, levels, noise_rms)
    return EdgeSearch(found.edges, found.method + " (the trace does not settle at its levels)", by_levels=True)


def ends_apart(values: np.ndarray, spread: float) -> bool:
    """True when the trace's first and last tenths rest at levels more than
    :data:`ENDS_APART` of its range apart (medians; common practice, no source)."""
    v = np.asarray(values, dtype=float)
    k = max(5, v.size // 10)
    if v.size < 2 * k or not spread > 0:
        return False
    return bool(abs(float(np.nanmedian(v[-k:])) - float(np.nanmedian(v[:k]))) > ENDS_APART * spread)


def forced_edge(time: np.ndarray, values: np.ndarray, edge_time: float) -> Edge:
    """One edge at a given time (s), as with ``--edge-time``.

    The direction is the sign of the largest departure after the edge from the
    mean level before it (so it is right for responses that settle and for
    ones that spike and decay back). The level after is the mean of the last
    tenth of the record.
    """
    n = values.size
    index = int(np.clip(np.searchsorted(time, edge_time), 1, n - 1))
    before = float(np.mean(values[:index]))
    departure = values[index:] - before
    k = int(np.argmax(np.abs(departure)))
    direction = 1 if departure[k] >= 0 else -1
    after = float(np.mean(values[max(index, n - max(1, (n - index) // 10)):]))
    return Edge(index, float(edge_time), direction, index - 1, before, after)


#: Two opposite edges closer than this multiple of a stated pulse width are one pulse.
PULSE_PAIRING = 1.5


def pulse_leading_edges(edges: Sequence[Edge], width: float) -> tuple[Edge, ...]:
    """The leading edge of each drive pulse of a stated ``width`` (s): an edge that follows a kept
    edge of the other direction within :data:`PULSE_PAIRING` widths is that pulse's trailing edge
    and is dropped, so both edges of a pulse fall in one window (the response to both)."""
    kept: list[Edge] = []
    for e in edges:
        if kept and e.direction != kept[-1].direction and e.time - kept[-1].time < PULSE_PAIRING * width:
            continue
        kept.append(e)
    return tuple(kept)
