"""A record that begins or ends inside a transition.

A scope record starts and stops wherever its trigger and time base put it.
Its first samples can still hold the response to an edge before the record
(the output still moving toward the level that the first edge leaves), and
its last samples can hold the start of an edge that the record cuts off (the
trace leaving the last edge's final level before it reaches another one).
Neither is described by the step response of the edges inside the record,
and a fit that takes them as a flat baseline or a settled tail is biased or
refused. So (common practice, no source):

* the first window starts where the output has come to rest at its level
  before the first edge: the first run of ``REST_RUN`` samples within the
  rest band of that level. It moves only when the record's first samples lie
  clearly off that level (``OFF_LEVEL``) and a rest of that length exists
  before the edge;
* the last window stops at the onset of a transition cut off by the end of
  the record: the trace's last samples lie clearly off the last edge's final
  level (``OFF_LEVEL``), toward the level it left, after resting at its final
  level for ``REST_RUN`` samples and for longer than the part that follows
  (a band-pass response cut short decays back toward its old level after
  passing its final level only briefly: it is not cut). Only for
  edges found in the output itself (with a drive channel, a cut-off drive
  edge is an edge of its own).

The rest band of a level is four noise sigma, one code, or
``BAND_FRACTION`` of the trace's span, whichever is widest (V).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..units import format_value
from .edges import Edge

#: Samples in a row within the rest band that count as resting at a level.
REST_RUN = 8
#: Share of the trace's span (1st to 99th percentile) that the rest band is at least.
BAND_FRACTION = 0.02
#: The record's first (last) samples are off a level when their median lies this many rest bands from it.
OFF_LEVEL = 3.0
#: Samples whose median stands for the trace at each end of the record.
END_SAMPLES = 3


@dataclass(frozen=True)
class RecordEnds:
    """Where the edges' windows may reach: ``first_start`` (the first window's first sample) and
    ``last_stop`` (one past the last window's last sample), with a plain-words note for each
    end that moved ("" when it did not)."""

    first_start: int
    last_stop: int
    start_note: str = ""
    stop_note: str = ""


def rest_band(values: np.ndarray, noise_rms: float, quantisation_step: float | None) -> float:
    """Half-width of the band about a level in which the trace counts as resting there (V)."""
    span = float(np.percentile(values, 99) - np.percentile(values, 1)) if values.size else 0.0
    noise = noise_rms if np.isfinite(noise_rms) else 0.0
    return max(4.0 * noise, quantisation_step or 0.0, BAND_FRACTION * span)


def _first_rest(inside: np.ndarray) -> int | None:
    """Index of the first run of ``REST_RUN`` True values, or None."""
    if inside.size < REST_RUN:
        return None
    runs = np.convolve(inside.astype(np.int32), np.ones(REST_RUN, dtype=np.int32), mode="valid")
    hits = np.flatnonzero(runs == REST_RUN)
    return int(hits[0]) if hits.size else None


def settled_start(output: np.ndarray, start: int, onset: int, band: float) -> int:
    """The first window's start: ``start``, or the first sample of the output's first rest at
    its level before the edge when the record begins off that level (see the module)."""
    if onset - start < 2 * REST_RUN:
        return start
    level = float(np.median(output[onset - REST_RUN + 1:onset + 1]))
    head = float(np.median(output[start:start + END_SAMPLES]))
    if abs(head - level) <= OFF_LEVEL * band:
        return start
    first = _first_rest(np.abs(output[start:onset + 1] - level) <= band)
    if first is None or onset - (start + first) < REST_RUN:
        return start
    return start + first


def cut_off_onset(values: np.ndarray, last: Edge, band: float) -> int | None:
    """Index of the last sample at the last edge's final level before a transition that the
    record's end cuts off, or None when the record ends at rest (see the module)."""
    n = values.size
    step = last.level_after - last.level_before
    if n - last.index < 2 * REST_RUN or step == 0:
        return None
    tail = float(np.median(values[n - END_SAMPLES:]))
    if (last.level_after - tail) * np.sign(step) <= OFF_LEVEL * band:
        return None
    inside = np.abs(values[last.index:] - last.level_after) <= band
    rest = np.flatnonzero(inside)
    if rest.size == 0:
        return None
    onset = int(rest[-1])
    away = np.flatnonzero(~inside[:onset + 1])
    rested = onset - (int(away[-1]) if away.size else -1)
    # a response that decays back toward the old level (a band-pass cut short) passes its
    # final level only briefly: the rest must outlast what follows it
    if rested < max(REST_RUN, inside.size - 1 - onset):
        return None
    return last.index + onset


def record_ends(time: np.ndarray, output: np.ndarray, edges: tuple[Edge, ...], first_start: int,
                band: float, edges_in_output: bool) -> RecordEnds:
    """Where the windows of ``edges`` may start and stop in a record of ``output`` (V) on
    ``time`` (s), the first window being due to start at ``first_start``."""
    n = output.size
    start = settled_start(output, first_start, edges[0].onset_index, band) if edges else first_start
    start_note = ""
    if start != first_start:
        start_note = (f"the record begins while the output still moves toward its level before the first "
                      f"edge (the response to an edge before the record): the first window starts at "
                      f"{format_value(float(time[start]), 's')}, where the output has come to rest")
    cut = cut_off_onset(output, edges[-1], band) if edges and edges_in_output else None
    stop_note = ""
    if cut is not None:
        stop_note = (f"the record ends during an edge that leaves the last level after "
                     f"{format_value(float(time[cut]), 's')}: that edge is cut off and not fitted; the last "
                     "window stops at its onset")
    return RecordEnds(start, n if cut is None else cut + 1, start_note, stop_note)
