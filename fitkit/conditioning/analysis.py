"""The top-level step conditioning of a capture: channels, edges, segments, metrics, flags.

``analyse_steps(capture)`` does what an engineer does at the scope before
fitting anything: decide which channel is the drive and which the response,
find every edge with its time, direction and levels, cut one window per edge
(or average the edges of each direction), measure noise and quantisation, the
model-free metrics, and say what in the capture limits what can be learnt
from it. Every choice made without being told is written in ``decisions``.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, replace
from typing import Any

import numpy as np

from ..capture import Capture, Channel
from ..errors import ConditioningError, OptionError
from ..results import json_number
from ..units import format_value
from .edges import (Edge, EdgeSearch, detect_edges, edge_sharpness, forced_edge, is_two_level,
                    pulse_leading_edges)
from .glitches import lone_spikes, repaired
from .levels import StateLevels, state_levels
from .metrics import StepMetrics, step_metrics
from .noise import NoiseEstimate, estimate_noise
from .roles import assign_roles
from .quality import MAX_CLIPPED_SHARE, clipped_error, clipped_runs, clipped_share, no_edge_error, segment_flags
from .segment import StepSegment
from .record_ends import record_ends, rest_band
from .segments import average_segments, cut_segments, window_bounds


#: How the warning of noise below one quantisation code begins (the fit, which
#: then refits by maximum likelihood for rounding, replaces it).
BELOW_ONE_CODE = "the output noise is below one quantisation code"


@dataclass(frozen=True)
class StepAnalysis:
    """What conditioning found in a capture.

    input_channel: name of the drive channel, or None when there is none.
    output_channel: name of the response channel.
    edge_channel: the channel the edges were found in.
    decisions: plain-words notes on each choice made without being told.
    edges: every edge found (before any averaging).
    edge_method: plain words on how the edges were found.
    segments: one StepSegment per edge, or one per direction when averaged.
    metrics: one StepMetrics per segment, same order.
    levels: state levels of the edge channel (V).
    noise_rms: output noise standard deviation (V), whole trace.
    noise_method: how noise_rms was estimated.
    quantisation_step: output code step (V), or None.
    sample_interval: median sample interval (s).
    flags: plain-language quality warnings (capture-wide, then per segment).
    """

    input_channel: str | None
    output_channel: str
    edge_channel: str
    decisions: tuple[str, ...]
    edges: tuple[Edge, ...]
    edge_method: str
    segments: tuple[StepSegment, ...]
    metrics: tuple[StepMetrics, ...]
    levels: StateLevels
    noise_rms: float
    noise_method: str
    quantisation_step: float | None
    sample_interval: float
    flags: tuple[str, ...]
    file: str = ""
    averaged: bool = False
    #: other (input, output) channel assignments worth trying, best first (fitkit.conditioning.roles)
    alternatives: tuple[tuple[str | None, str], ...] = ()

    def to_dict(self) -> dict[str, Any]:
        return {
            "file": self.file,
            "input_channel": self.input_channel,
            "output_channel": self.output_channel,
            "edge_channel": self.edge_channel,
            "decisions": list(self.decisions),
            "edge_method": self.edge_method,
            "edges": [e.to_dict() for e in self.edges],
            "levels": self.levels.to_dict(),
            "noise_rms": json_number(self.noise_rms),
            "noise_method": self.noise_method,
            "quantisation_step": json_number(self.quantisation_step),
            "sample_interval": json_number(self.sample_interval),
            "averaged": self.averaged,
            "segments": [{**s.to_dict(), "metrics": m.to_dict()} for s, m in zip(self.segments, self.metrics)],
            "flags": list(self.flags),
        }


def choose_channels(capture: Capture, input: str | int | None, output: str | int | None
                    ) -> tuple[Channel | None, Channel, list[str]]:
    """(input channel or None, output channel, decisions): see fitkit.conditioning.roles."""
    roles = assign_roles(capture, input, output)
    return roles.input, roles.output, list(roles.decisions)


def _without_clipped(segments, metrics, runs: np.ndarray, out_ch: Channel, capture: Capture,
                     decisions: list[str]):
    """The segments (and their metrics) whose response is not clipped for more than
    MAX_CLIPPED_SHARE of the samples after the edge; a ConditioningError when none is left."""
    shares = [clipped_share(s, runs) for s in segments]
    keep = [i for i, (share, _) in enumerate(shares) if share <= MAX_CLIPPED_SHARE]
    if len(keep) == len(segments):
        return tuple(segments), tuple(metrics)
    if not keep:
        start = float(capture.time[int(runs[:, 0].min())]) if runs.size else float(capture.time[0])
        level = float(out_ch.values[int(runs[0, 0])]) if runs.size else float("nan")
        count = sum(c for _, c in shares)
        total = sum(int(round(c / sh)) if sh > 0 else 0 for sh, c in shares)
        raise clipped_error(out_ch.name, level, out_ch.unit, count, total, start, capture.provenance.path)
    decisions.append(f"{len(segments) - len(keep)} edge(s) not fitted: the response runs into the trace's clip "
                     "level after them (the level it settles to is not observed)")
    return tuple(segments[i] for i in keep), tuple(metrics[i] for i in keep)


def _neighbours(found: tuple[Edge, ...], forced: Edge) -> list[Edge]:
    """The detected edges just before and just after a forced edge (not the forced edge itself)."""
    others = [e for e in found if not (e.onset_index - 2 <= forced.index <= e.index + 2)]
    before = [e for e in others if e.time < forced.time]
    after = [e for e in others if e.time > forced.time]
    return ([before[-1]] if before else []) + ([after[0]] if after else [])


def _edge_search(capture: Capture, channel: Channel, noise: NoiseEstimate, edge_time: float | None,
                 edge_alone: bool = False) -> tuple[EdgeSearch, StateLevels, list[Edge]]:
    """(edges, state levels, detected neighbours of a forced edge) of the edge channel; no
    neighbours when ``edge_alone``."""
    time, values = capture.time, channel.values
    levels = state_levels(values, quantisation_step=noise.quantisation_step)
    if edge_time is not None:
        if not (time[0] < edge_time < time[-1]):
            raise ConditioningError(
                f"the forced edge time {format_value(edge_time, 's')} lies outside the capture "
                f"({format_value(time[0], 's')} to {format_value(time[-1], 's')})",
                path=capture.provenance.path or None, hint="give an --edge-time inside the record")
        edge = forced_edge(time, values, edge_time)
        neighbours = [] if edge_alone else _neighbours(detect_edges(time, values, levels, noise.rms).edges, edge)
        return EdgeSearch((edge,), f"edge time forced at {format_value(edge_time, 's')}"), levels, neighbours
    search = detect_edges(time, values, levels, noise.rms)
    if not search.edges:
        raise no_edge_error(channel.name, search.method, capture.provenance.path)
    return search, levels, []


def find_edges(capture: Capture, channel: str | int | None = None) -> tuple[Edge, ...]:
    """The edges of one channel (default: the drive channel chosen as in analyse_steps).

    Raises ConditioningError when there is none.
    """
    if channel is None:
        in_ch, out_ch, _ = choose_channels(capture, None, None)
        chosen = in_ch or out_ch
    else:
        chosen = capture.channel(channel)
    return _edge_search(capture, chosen, estimate_noise(chosen.values), None)[0].edges


def analyse_steps(capture: Capture, *, input: str | int | None = None, output: str | int | None = None,
                  edge_time: float | None = None, average: bool = False,
                  reference_levels: tuple[float, float] = (0.1, 0.9),
                  settling_band: float = 0.02, pulse_width: float | None = None,
                  edge_alone: bool = False) -> StepAnalysis:
    """Condition a capture: channels, edges, segments, noise, metrics and quality flags.

    input, output: channel names or 1-based positions (None: chosen from the data;
        input "none": no drive channel).
    edge_time: force a single edge at this time (s) instead of searching.
    edge_alone: with ``edge_time``, the forced edge's window runs to the ends of the record
        (edges found elsewhere in the trace are taken as the response's own swings) instead
        of ending at the edges found around it.
    average: coherently average the edges of each direction into one segment.
    reference_levels: (low, high) fractions of the step for rise/fall times.
    settling_band: half-width of the settling band as a fraction of the step.
    pulse_width: the drive is a train of pulses of this width (s): both edges of a pulse are
        one segment (the window of its leading edge, until the next pulse).
    Raises ConditioningError when no edge is found, OptionError on bad options.
    """
    lo_ref, hi_ref = (float(x) for x in reference_levels)
    if not 0.0 <= lo_ref < hi_ref <= 1.0:
        raise OptionError(f"reference levels {reference_levels} must satisfy 0 <= low < high <= 1",
                          hint="for example 0.1,0.9 or 0.2,0.8")
    if not 0.0 < settling_band < 1.0:
        raise OptionError(f"settling band {settling_band} must lie between 0 and 1 (a fraction of the step)",
                          hint="for example 0.02 for 2 %")
    if capture.n_points < 8:
        raise ConditioningError(f"the capture has only {capture.n_points} samples, too few to find a step",
                                path=capture.provenance.path or None, hint="capture a longer record")
    steps = np.diff(capture.time)
    if not np.all(steps >= 0):
        raise ConditioningError("the time axis goes backwards", path=capture.provenance.path or None,
                                hint="check the time column of the file")
    repeated = int(np.count_nonzero(steps == 0))
    del steps
    roles = assign_roles(capture, input, output)
    in_ch, out_ch, decisions = roles.input, roles.output, list(roles.decisions)
    edge_ch = in_ch or out_ch
    for ch in (out_ch,) if in_ch is None else (in_ch, out_ch):
        bad = int(ch.values.size - np.count_nonzero(np.isfinite(ch.values)))
        if bad:
            raise ConditioningError(f"channel {ch.name!r} has {bad} samples that are not finite numbers",
                                    path=capture.provenance.path or None,
                                    hint="remove or crop the rows with gaps before conditioning")
    out_noise = estimate_noise(out_ch.values)
    spikes = lone_spikes(out_ch.values, out_noise.rms)
    spike_note = ""
    if spikes.size:
        out_ch = replace(out_ch, values=repaired(out_ch.values, spikes))
        if edge_ch.name == out_ch.name:
            edge_ch = out_ch
        at = ", ".join(format_value(float(capture.time[i]), "s") for i in spikes[:5])
        spike_note = (f"{spikes.size} lone one-sample spike(s) in {out_ch.name!r} (at {at}) replaced by the "
                      "mean of their neighbours: a glitch, not a response")
        decisions.append(spike_note)
    edge_noise = out_noise if edge_ch is out_ch else estimate_noise(edge_ch.values)
    search, levels, neighbours = _edge_search(capture, edge_ch, edge_noise, edge_time, edge_alone)
    edges = search.edges
    if in_ch is None and edge_time is None:
        decisions.append("no input channel: edge times are the output's own 50 % crossings, which come "
                         "later than the drive's edges by the response's delay; the delay is not measured")
    if edge_time is None:
        decisions.append(f"{len(edges)} edge(s) found in {edge_ch.name!r} by {search.method}")
    if pulse_width is not None:
        leading = pulse_leading_edges(edges, pulse_width)
        decisions.append(f"drive pulses of {format_value(pulse_width, 's')}: {len(leading)} pulse(s), each one "
                         f"window holding the response to both of its edges ({len(edges) - len(leading)} "
                         "trailing edge(s) inside them)")
        edges = leading

    time = capture.time
    in_values = None if in_ch is None else in_ch.values
    dt = capture.sample_interval if not repeated else capture.duration / (capture.n_points - 1)
    bounds = None
    if neighbours:  # a forced edge's window ends at the detected edges around it
        context = sorted(neighbours + list(edges), key=lambda e: e.time)
        bounds = [window_bounds(time, context)[context.index(edges[0])]]
        decisions.append(f"the window of the forced edge is bounded by {len(neighbours)} other edge(s) "
                         "found in the record")
    if bounds is None:
        bounds = window_bounds(time, edges)
    ends = record_ends(time, out_ch.values, edges, bounds[0][0],
                       rest_band(out_ch.values, out_noise.rms, out_noise.quantisation_step),
                       edges_in_output=edge_ch is out_ch and search.by_levels and pulse_width is None)
    bounds = [(ends.first_start, bounds[0][1]), *bounds[1:]]
    bounds[-1] = (bounds[-1][0], min(bounds[-1][1], ends.last_stop))
    segments = cut_segments(time, out_ch.values, in_values, edges, channel_noise=out_noise.rms,
                            quantisation_step=out_noise.quantisation_step, settling_band=settling_band,
                            bounds=bounds, sample_interval=dt)
    if average and len(edges) > 1:
        segments = average_segments(segments, edges, sample_interval=dt, settling_band=settling_band)
        counts = ", ".join(f"{s.averaged_edges} {'rising' if s.direction > 0 else 'falling'}" for s in segments)
        decisions.append(f"edges of each direction averaged coherently on their sub-sample edge times ({counts})")
    delay_defined = in_ch is not None or edge_time is not None
    metrics = tuple(step_metrics(s, reference_levels=(lo_ref, hi_ref), settling_band=settling_band,
                                 delay_defined=delay_defined) for s in segments)
    clipped = {out_ch.name: clipped_runs(out_ch.values, out_noise.rms, out_noise.quantisation_step)}
    if in_ch is not None:
        clipped[in_ch.name] = clipped_runs(in_ch.values, edge_noise.rms, edge_noise.quantisation_step)
    segments, metrics = _without_clipped(segments, metrics, clipped[out_ch.name], out_ch, capture, decisions)
    pulses = pulse_width is not None
    segments = tuple(replace(s, flags=s.flags + segment_flags(s, m, clipped=clipped, pulse=pulses,
                                                             first=i == 0 and s.averaged_edges == 1))
                     for i, (s, m) in enumerate(zip(segments, metrics)))
    flags: list[str] = [note for note in (spike_note, ends.start_note, ends.stop_note) if note]
    if repeated:
        flags.append(f"{repeated} samples repeat the previous time stamp (times rounded in the file?); "
                     "edge and metric times are only as fine as the printed times")
    if math.isfinite(out_noise.rms) and levels.amplitude > 0 and edge_ch is out_ch \
            and out_noise.rms > 0.1 * levels.amplitude:
        flags.append(f"the output noise ({format_value(out_noise.rms, out_ch.unit)} rms) is more than a tenth "
                     "of the step; averaging several edges (average option) would help")
    if out_noise.below_one_code:
        # with noise well under a code the rounding error follows the signal
        # instead of averaging out (Widrow & Kollar, Quantization Noise, CUP
        # 2008, ch. 4, from memory: the additive-noise model needs noise of about a code or more)
        flags.append(f"{BELOW_ONE_CODE} "
                     f"({format_value(out_noise.quantisation_step, out_ch.unit)}): rounding errors then do "
                     "not average out and estimates can be biased by more than their intervals show; "
                     "use a finer vertical scale or the scope's high-resolution (averaging) acquisition")
    for s in segments:
        flags.extend(f for f in s.flags if f not in flags)
    return StepAnalysis(input_channel=None if in_ch is None else in_ch.name, output_channel=out_ch.name,
                        edge_channel=edge_ch.name, decisions=tuple(decisions), edges=edges,
                        edge_method=search.method, segments=segments, metrics=metrics, levels=levels,
                        noise_rms=out_noise.rms, noise_method=out_noise.method,
                        quantisation_step=out_noise.quantisation_step, sample_interval=dt,
                        flags=tuple(flags), file=capture.provenance.path,
                        averaged=bool(average and len(edges) > 1), alternatives=roles.alternatives)
