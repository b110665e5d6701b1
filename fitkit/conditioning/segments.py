"""Cutting a capture into one window per edge, measuring its levels, and averaging.

Window of edge k (sample indices of the capture, so samples keep their index):

* it starts a quarter of the interval to the previous edge before the edge
  (the last quarter of the previous half period, where the response to the
  previous edge has had the most time to settle; common practice, no
  source); the first edge's window reaches back as far as a quarter of the
  interval to the second edge, or to the start of a single-step record;
* it stops just before the next edge's onset (the last sample still at the
  old level), or at the end of the record.

Levels of a window (V):

* baseline: mean of the output from the window start to the edge's onset;
* final: mean of the last fifth of the samples after the edge;
* settled: the response has stopped moving at the end of the window, that is
  a straight line fitted to the post-edge samples from 60 % to 95 % of the
  window (the last 5 % left out: without an input channel the next edge's
  onset is only known to a few samples) changes by no more than the settling
  band (of the step) across that span, or the change is not significant
  (under 4 standard errors); common practice, no source;
* noise: spread of the pre-edge samples about a straight line (robust MAD
  spread, or the plain standard deviation for quantised traces) when there
  are at least 32 of them, which also counts correlated noise, in the quietest
  of up to four blocks (a record can begin while an earlier edge's response
  still moves); else the channel's estimate; never below the quantisation floor
  q / sqrt(12).

A response that comes back to its baseline (the output of a high-pass filter,
the voltage across an inductor) is recognised when its final level lies
within 30 % of its largest excursion from the baseline; its ``step_size`` is
then the input's step, or the output's peak excursion without an input.

Coherent averaging puts all edges of one direction on a common time axis
relative to their edge times, each by its nearest samples (no interpolation:
the noise stays white; an uneven time axis is interpolated, np.interp), and
averages them, which divides white noise by the square root of the number of
edges.
"""

from __future__ import annotations

import math
from dataclasses import replace
from typing import Sequence

import numpy as np

from .edges import Edge
from .noise import robust_sigma
from .levels import drifts
from .segment import RETURN_FRACTION, StepSegment, drive_returns

#: Part of the interval to the previous edge that a window reaches back.
PRE_EDGE_FRACTION = 0.25
#: Part of the post-edge samples averaged for the final level.
FINAL_FRACTION = 0.2
#: Part of the post-edge samples tested for a remaining drift: from .. to (fractions of the window).
TAIL_SPAN = (0.6, 0.95)
#: The pre-edge noise is measured in up to this many blocks of at least this many samples (the quietest counts).
NOISE_BLOCKS = 4
NOISE_BLOCK_SAMPLES = 256
NOISE_BLOCKS_DISAGREE = 2.0


def window_bounds(time: np.ndarray, edges: Sequence[Edge]) -> list[tuple[int, int]]:
    """(start, stop) sample indices of each edge's window (stop exclusive)."""
    n = time.size
    bounds = []
    for k, edge in enumerate(edges):
        if k == 0:
            start = 0
            if len(edges) > 1:
                reach = edge.time - PRE_EDGE_FRACTION * (edges[1].time - edge.time)
                start = min(int(np.searchsorted(time, reach)), edge.onset_index)
        else:
            previous = edges[k - 1]
            reach = edge.time - PRE_EDGE_FRACTION * (edge.time - previous.time)
            start = max(int(np.searchsorted(time, reach)), previous.index)
            start = min(start, edge.onset_index)
        stop = n if k == len(edges) - 1 else edges[k + 1].onset_index + 1
        stop = max(stop, edge.index + 1)
        bounds.append((start, stop))
    return bounds


def _tail_settled(t: np.ndarray, y: np.ndarray, tolerance: float) -> bool:
    """False when a line through (t, y) changes by more than ``tolerance`` significantly."""
    return y.size < 4 or not drifts(t, y, tolerance)


def _baseline_noise(t: np.ndarray, y: np.ndarray, quantised: bool, floor: float = 0.0) -> float:
    """Spread of the pre-edge samples about a straight line (V); NaN for under 32 samples.

    A window that starts at the capture's first sample can still hold the
    response to an edge before the record began (a ringing band-pass, a slow
    tail): signal, not noise, which would blind every comparison of residuals
    with the noise. So the pre-edge samples are also cut into up to
    :data:`NOISE_BLOCKS` blocks of at least :data:`NOISE_BLOCK_SAMPLES`; when
    the blocks' spreads differ by more than :data:`NOISE_BLOCKS_DISAGREE`
    times (stationary noise keeps them within about 20 % at this size), the
    quietest block's spread is the noise (common practice, no source). The
    first two thirds are measured on their own as well, and count when the
    whole is more than NOISE_BLOCKS_DISAGREE times noisier: the onset is known
    only to within 5 % of the step, so the last samples before it can hold the
    start of a slowly leaving response. A part stands in for the whole only
    down to ``floor`` (V: the channel's sample-to-sample estimate, which
    band-limited noise can only lower): a stretch of identical rounded values
    is not a measurement of the noise.
    """
    if y.size < 32:
        return float("nan")

    def spread(tb: np.ndarray, yb: np.ndarray) -> float:
        coef = np.polyfit(tb - tb[0], yb, 1)
        resid = yb - np.polyval(coef, tb - tb[0])
        return float(np.std(resid, ddof=2)) if quantised else robust_sigma(resid)

    # the last third can hold the start of the response itself (the onset is found to within 5 %
    # of the step, and a response of several poles leaves its baseline slowly)
    head = max(32, (2 * y.size) // 3)
    whole, first = spread(t, y), spread(t[:head], y[:head])
    if whole > NOISE_BLOCKS_DISAGREE * first:  # the last third moves: signal, not noise
        whole = max(first, floor)
    n_blocks = int(min(NOISE_BLOCKS, y.size // NOISE_BLOCK_SAMPLES))
    if n_blocks < 2:
        return whole
    spreads = [spread(t[b], y[b]) for b in np.array_split(np.arange(y.size), n_blocks)]
    quietest = min(spreads)
    return max(quietest, floor) if max(spreads) > NOISE_BLOCKS_DISAGREE * quietest else whole


def describe_window(time: np.ndarray, output: np.ndarray, input: np.ndarray | None,
                    start: int, stop: int, edge: Edge, *, channel_noise: float,
                    quantisation_step: float | None, settling_band: float,
                    averaged_edges: int = 1, sample_interval: float = math.nan) -> StepSegment:
    """A StepSegment for one edge's window capture[start:stop], with its levels measured.

    ``time``, ``output``, ``input`` are whole capture arrays (the segment holds
    views into them); ``edge`` indices are capture indices. ``channel_noise`` (V)
    is used when the pre-edge baseline is too short to measure the noise.
    ``sample_interval`` (s): the capture's, carried on the segment.
    """
    t, y = time[start:stop], output[start:stop]
    u = None if input is None else input[start:stop]
    pre_stop = max(1, edge.onset_index + 1 - start)  # samples [0, pre_stop) are before the edge
    post_start = min(max(edge.index - start, pre_stop), t.size - 1)
    baseline = float(np.mean(y[:pre_stop]))
    post_t, post_y = t[post_start:], y[post_start:]
    n_final = max(1, int(round(FINAL_FRACTION * post_y.size)))
    final = float(np.mean(post_y[-n_final:]))

    floor = channel_noise if math.isfinite(channel_noise) else 0.0
    noise = _baseline_noise(t[:pre_stop], y[:pre_stop], quantisation_step is not None, floor)
    on_baseline = bool(np.isfinite(noise))
    if not on_baseline:
        noise = channel_noise
    if quantisation_step is not None and not noise >= quantisation_step / math.sqrt(12.0):
        noise = quantisation_step / math.sqrt(12.0)

    input_before = input_after = None
    if u is not None:
        input_before = float(np.mean(u[:pre_stop]))
        input_after = float(np.mean(u[post_start:][-n_final:]))

    excursion = post_y - baseline
    k = int(np.argmax(np.abs(excursion)))
    peak_excursion = float(excursion[k])
    returns = (abs(final - baseline) < RETURN_FRACTION * abs(peak_excursion)
               and abs(peak_excursion) > 6 * (noise if np.isfinite(noise) else 0.0))
    # a drive that returns as well (a pulse inside the window) explains an output that does
    returns = returns and not drive_returns(u, input_before, input_after)
    if returns:
        if input_before is not None and input_after is not None and input_after != input_before:
            step_size, source = input_after - input_before, "input step"
        else:
            step_size, source = peak_excursion, "output peak excursion"
    else:
        step_size, source = final - baseline, "output levels"

    first, last = (int(round(f * post_y.size)) for f in TAIL_SPAN)
    first, last = min(first, max(post_y.size - 4, 0)), max(last, min(first + 4, post_y.size))
    settled = _tail_settled(post_t[first:last], post_y[first:last], settling_band * abs(step_size))
    if returns and not settled:
        final = baseline  # heading back to where it started
    return StepSegment(start=start, stop=stop, time=t, output=y, input=u, edge_time=edge.time,
                       direction=edge.direction, baseline=baseline, final=final,
                       input_before=input_before, input_after=input_after, noise_rms=noise,
                       noise_on_baseline=on_baseline,
                       quantisation_step=quantisation_step, averaged_edges=averaged_edges,
                       returns_to_baseline=bool(returns), step_size=float(step_size),
                       step_source=source, settled=bool(settled), sample_interval=sample_interval)


def cut_segments(time: np.ndarray, output: np.ndarray, input: np.ndarray | None,
                 edges: Sequence[Edge], *, channel_noise: float, quantisation_step: float | None,
                 settling_band: float, bounds: Sequence[tuple[int, int]] | None = None,
                 sample_interval: float = math.nan) -> tuple[StepSegment, ...]:
    """One StepSegment per edge (see the module docstring for the windows).

    ``bounds`` gives the (start, stop) of each window when already known.
    """
    if bounds is None:
        bounds = window_bounds(time, edges)
    return tuple(describe_window(time, output, input, start, stop, edge,
                                 channel_noise=channel_noise, quantisation_step=quantisation_step,
                                 settling_band=settling_band, sample_interval=sample_interval)
                 for edge, (start, stop) in zip(edges, bounds))


def average_segments(segments: Sequence[StepSegment], edges: Sequence[Edge], *,
                     sample_interval: float, settling_band: float) -> tuple[StepSegment, ...]:
    """Coherent averages of the segments, one per edge direction (rising first in time order).

    Segments whose span before or after the edge is under 90 % of the
    direction's median span (an edge cut short by the end of the record) are
    left out. The others are interpolated onto a common axis of whole sample
    intervals relative to their edge times, covering the span that all of
    them share (each raw window ending where the next one starts), and
    averaged. The averaged segment's ``time`` is that axis
    shifted to the first averaged edge's time; ``start``/``stop`` are the first
    averaged edge's window; ``noise_rms`` is the mean single-edge noise divided
    by the square root of the number of edges.
    """
    result = []
    for direction in (1, -1):
        group = [(s, e) for s, e in zip(segments, edges) if s.direction == direction]
        if not group:
            continue
        if len(group) == 1:
            result.append(group[0][0])
            continue
        pre = np.array([s.edge_time - s.time[0] for s, _ in group])
        post = np.array([s.time[-1] - s.edge_time for s, _ in group])
        keep = (pre >= 0.9 * np.median(pre)) & (post >= 0.9 * np.median(post))
        group = [g for g, k in zip(group, keep) if k]
        first_rel = max(float(s.time[0] - s.edge_time) for s, _ in group)
        last_rel = min(_window_end(s, segments, sample_interval) - s.edge_time for s, _ in group)
        onset_rel = min(float(s.time[e.onset_index - s.start] - s.edge_time) for s, e in group)
        k0 = math.ceil(first_rel / sample_interval - 1e-9)
        k1 = math.floor(last_rel / sample_interval + 1e-9)
        if k1 - k0 < 3:
            result.extend(s for s, _ in group)
            continue
        grid = sample_interval * np.arange(k0, k1 + 1)
        out_sum = np.zeros(grid.size)
        in_sum = None if group[0][0].input is None else np.zeros(grid.size)
        shifts = []
        for seg, _ in group:
            at = seg.edge_time + grid
            index, shift = _nearest_samples(seg, at, sample_interval)
            shifts.append(shift)
            out_sum += seg.output[index] if index is not None else np.interp(at, seg.time, seg.output)
            if in_sum is not None and seg.input is not None:
                in_sum += seg.input[index] if index is not None else np.interp(at, seg.time, seg.input)
        n = len(group)
        first_seg, first_edge = group[0]
        t_avg = first_seg.edge_time + grid
        onset_index = int(np.searchsorted(grid, onset_rel, side="right")) - 1
        index = int(np.searchsorted(grid, 0.0, side="right"))
        pseudo = Edge(index=index, time=first_seg.edge_time, direction=direction,
                      onset_index=max(onset_index, 0), level_before=first_edge.level_before,
                      level_after=first_edge.level_after)
        noise = float(np.nanmean([s.noise_rms for s, _ in group])) / math.sqrt(n)
        avg = describe_window(t_avg, out_sum / n, None if in_sum is None else in_sum / n,
                              0, grid.size, pseudo, channel_noise=noise,
                              quantisation_step=None, settling_band=settling_band,
                              averaged_edges=n, sample_interval=sample_interval)
        result.append(replace(avg, start=first_seg.start, stop=first_seg.stop,
                              noise_rms=noise, noise_on_baseline=all(s.noise_on_baseline for s, _ in group),
                              alignment_variance=alignment_variance(
                                  group, grid, out_sum / n, in_sum is not None, sample_interval, shifts),
                              previous_edges=_previous_edges([s for s, _ in group], segments)))
    result.sort(key=lambda s: s.edge_time)
    return tuple(result)


def _window_end(seg: StepSegment, segments: Sequence[StepSegment], sample_interval: float) -> float:
    """Time (s) of the last sample of raw ``seg`` that no later window holds: the
    sample before the next window's first when the two overlap (as the joint fit
    cuts consecutive windows, fitkit.fitting.edge_windows), else its own last.
    An average over the whole window would hold the next edge's onset at its end."""
    later = [s for s in segments if windows_touch(seg, s)]
    if not later:
        return float(seg.time[-1])
    nxt = min(later, key=lambda s: s.edge_time)
    return min(float(seg.time[-1]), float(nxt.time[0]) - sample_interval)


def windows_touch(earlier: StepSegment, later: StepSegment) -> bool:
    """Raw windows of one record, in time order, that touch or overlap: the
    later one starts before the earlier one stops."""
    return (earlier.averaged_edges == 1 and later.averaged_edges == 1 and not earlier.stop < later.start
            and earlier.edge_time < later.edge_time)


#: Most edges back whose still-settling responses are taken to reach a window.
MAX_REACHING_EDGES = 9


def reaching_edges(segments: Sequence[StepSegment], i: int) -> list[int]:
    """Indices of the raw edges before raw edge i whose responses still reach its
    window, nearest first: the previous edge when the two windows touch or
    overlap (one record), and each earlier one while the windows keep touching
    and the window after it is marked unsettled (its response still moving at
    its end); at most :data:`MAX_REACHING_EDGES`."""
    out: list[int] = []
    j = i - 1
    while j >= 0 and len(out) < MAX_REACHING_EDGES:
        earlier, later = segments[j], segments[j + 1]
        if not windows_touch(earlier, later) or (out and later.settled):
            break
        out.append(j)
        j -= 1
    return out


def _previous_edges(averaged: Sequence[StepSegment], segments: Sequence[StepSegment]
                    ) -> tuple[tuple[float, float, float], ...] | None:
    """For k = 1, 2, ...: (mean seconds from the k-th edge back, mean output step
    V, mean input step V or NaN) over the ``averaged`` raw segments, the edges
    back being those whose responses reach each one's window
    (:func:`reaching_edges`, as :mod:`fitkit.fitting.previous_tails` takes them
    for a raw edge); an edge without the k-th counts a step of 0. None when no
    averaged edge has a previous edge."""
    order = {id(seg): i for i, seg in enumerate(segments)}
    found = []
    for seg in averaged:
        i = order.get(id(seg), 0)
        found.append([(seg.edge_time - segments[j].edge_time, edge_step(segments, j),
                       input_step(segments, j)) for j in reaching_edges(segments, i)])
    depth = max((len(c) for c in found), default=0)
    if depth == 0:
        return None
    out = []
    for k in range(depth):
        have = [c[k] for c in found if len(c) > k]
        out.append((float(np.mean([h[0] for h in have])),
                    float(np.sum([h[1] for h in have])) / len(found),
                    float(np.sum([h[2] for h in have])) / len(found)))
    return tuple(out)


def edge_step(segments: Sequence[StepSegment], j: int) -> float:
    """The output step (V) of raw edge j: its measured step size, else final - baseline."""
    seg = segments[j]
    return seg.step_size if math.isfinite(seg.step_size) else seg.final - seg.baseline


def input_step(segments: Sequence[StepSegment], j: int) -> float:
    """The input step (V) of raw edge j: the input's level before the next edge less
    its level before this one; NaN when either is not measured or j is the last."""
    if j + 1 >= len(segments):
        return math.nan
    after, before = segments[j + 1].input_before, segments[j].input_before
    return after - before if after is not None and before is not None else math.nan


def _nearest_samples(seg: StepSegment, at: np.ndarray, sample_interval: float
                     ) -> tuple[np.ndarray | None, float]:
    """Indices of the samples of ``seg`` nearest to the times ``at`` (uniformly
    sampled, all inside the segment), and how far (in samples, -1/2 to 1/2) the
    edge sits from where they put it; (None, nan) when the segment is not
    uniformly sampled there (the average then interpolates)."""
    dt = sample_interval
    t = np.asarray(seg.time, dtype=float)
    if t.size < 2 or not dt > 0 or np.max(np.abs(np.diff(t) - dt)) > 1e-6 * dt:
        return None, math.nan
    position = (at[0] - t[0]) / dt
    first = int(np.rint(position))
    index = first + np.arange(at.size)
    if first < 0 or index[-1] >= t.size:
        return None, math.nan
    return index, position - first


def alignment_variance(group: Sequence[tuple[StepSegment, Edge]], grid: np.ndarray, average: np.ndarray,
                       located_on_input: bool, sample_interval: float, shifts: Sequence[float]) -> float:
    """Variance (s^2) of the kernel a coherent average smears the output with.

    Each edge is placed on the common axis by its nearest samples, a shift of
    r samples (|r| <= 1/2) from its exact edge time: the average is the
    response averaged over those shifts, a kernel of variance var(r) dt^2 (its
    mean is a common delay, which the fitted edge time takes up)
    (taking the samples as they are keeps the noise white; interpolating
    between them, as for an edge on an uneven time axis, smooths each edge by
    d (1 - d) dt^2 instead and correlates the noise). Edges located on the
    output's mid-level crossing (no input channel) also jitter by the noise
    over the slope there: an interpolated crossing between samples a fraction
    f apart has variance ((1 - f)^2 + f^2) sigma^2 / slope^2, 2/3 of
    sigma^2 / slope^2 over f spread evenly (first-order error propagation;
    common practice, no source). Edges located on a drive are taken as exact
    (the drive's steep edge); the model driven by the averaged drive then sees
    the same shifts as the output.
    """
    dt = sample_interval
    r = np.array(shifts, dtype=float)
    if np.all(np.isfinite(r)):
        variance = float(np.var(r)) * dt * dt  # their mean is a common delay, not a smear
    else:  # interpolated: the kernel [1 - d, d] of each edge
        offsets = np.array([((seg.edge_time - seg.time[0]) / dt) % 1.0 for seg, _ in group])
        variance = float(np.mean(offsets * (1.0 - offsets))) * dt * dt
    if located_on_input:
        return variance
    slope = _crossing_slope(grid, average)
    sigma = float(np.nanmean([seg.noise_rms for seg, _ in group]))
    if slope > 0 and math.isfinite(sigma):
        variance += (2.0 / 3.0) * sigma * sigma / (slope * slope)
    return variance


def _crossing_slope(grid: np.ndarray, average: np.ndarray) -> float:
    """|slope| (V/s) of the averaged output where it crosses its mid-level (grid
    time 0): a straight line through the samples between 30 % and 70 % of the way
    around that crossing (the two neighbours of the crossing when none lie there)."""
    k = int(np.searchsorted(grid, 0.0))
    if not 1 <= k < grid.size - 1:
        return 0.0
    lo, hi = float(np.median(average[:k])), float(np.median(average[k:]))
    frac = (average - lo) / (hi - lo) if hi != lo else np.zeros_like(average)
    inside = (frac > 0.3) & (frac < 0.7)
    first, last = k, k
    while first > 0 and inside[first - 1]:
        first -= 1
    while last < grid.size - 1 and inside[last + 1]:
        last += 1
    if last - first < 2:
        first, last = k - 1, k + 1
    return abs(float(np.polyfit(grid[first:last + 1], average[first:last + 1], 1)[0]))
