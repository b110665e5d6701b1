"""One model over all the edges of a capture, in scaled units.

The parameters of a joint fit of m edges with a form are

* the form's shape parameters, shared by every edge, as ``log_<name>`` (the
  natural log of the value in scaled units, see :mod:`.scaling`);
* per edge ``baseline_<i>`` and ``step_<i>`` (scaled volts), in ideal-step mode;
* per edge ``t0_<i>`` (scaled time relative to the measured edge), in
  ideal-step mode without an input channel;
* in measured-input mode (an input channel is present): per edge
  ``baseline_<i>`` and one shared ``gain`` (output volts per input volt, scaled);
  the edge time is then whatever the measured input says.

Long segments are averaged into bins before the fit (the bin mean of the
data against the mean of the model over the same samples, the latter by a
3-point rule exact for the discrete mean, :func:`.binning.discrete_mean_nodes`): narrow bins around the edge, wider ones where the response is slow (see
:func:`.binning.variable_bins`). This keeps the estimate efficient for a smooth
response while cutting the cost; each bin is weighted by the square root of
its sample count, so the residual variance is that of one sample and the
covariance accounts for the averaging. In measured-input
mode the input is bin-averaged too and simulated at the bin resolution, with
bins kept below 1/30 of the time scale (model error of order 1e-4 of the step);
the level the input had before the record is the mean of its points before
the edge (:func:`.binning.pre_edge_weights`), not its noisy, quantised first sample.
Prepared segments are cached, so model selection (one fit per candidate
form, same units) bins each segment once.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Mapping, Sequence

import numpy as np

from ..conditioning.segment import StepSegment
from ..errors import FitError
from ..forms.base import Form
from .binning import discrete_mean_nodes, pre_edge_weights, variable_bins
from .measured_input import fft_convolve, response_by_superposition, superposition_kernel, uniform_step
from .scaling import RUNAWAY_LOG, Scaling
from .previous_tails import earlier_steps, previous_step
from .stacked_edges import EdgeSums, StackedEdges

#: Segments longer than this are bin-averaged before the nonlinear fit.
MAX_POINTS_PER_SEGMENT = 4000
#: ... and all segments together are brought below this many points (not below
#: MIN_POINTS_PER_SEGMENT each).
MAX_TOTAL_POINTS = 12000
MIN_POINTS_PER_SEGMENT = 400
#: In measured-input mode a bin is at most 1/this of the first time-scale guess.
MEASURED_INPUT_BINS_PER_UNIT = 30


@dataclass(frozen=True)
class SegmentData:
    """One edge prepared for the fit (scaled units).

    t_nodes: (n, k) node times relative to the edge, scaled; the model value of a
        point is the weighted sum over its nodes (k = 1 unbinned, 3 when binned).
    node_weights: (k,) or (n, k) weights of the nodes, summing to 1 per point
        (see :func:`.binning.discrete_mean_nodes`).
    y: data (bin means when binned), scaled volts.
    u: normalised input (measured-input mode; bin means when binned), else None.
    bin_size: largest number of samples in one point (1 = unbinned).
    counts: samples averaged into each point (the fit weights each point by sqrt(count)).
    dt: scaled sample interval of the full-resolution data (of the bins in
        measured-input mode).
    """

    t_nodes: np.ndarray
    node_weights: np.ndarray
    y: np.ndarray
    u: np.ndarray | None
    bin_size: int
    dt: float
    t_point: np.ndarray  # representative scaled time of each point (bin centre)
    counts: np.ndarray
    #: measured-input mode: weights a (summing to 1) forming the level the input
    #: had before the record from its points, initial = a @ u (the pre-edge mean)
    u_initial_weights: np.ndarray | None = None

    @property
    def u_initial(self) -> float | None:
        """The level the input had always had before the record (normalised), or None."""
        if self.u is None or self.u_initial_weights is None:
            return None
        return float(self.u_initial_weights @ self.u)


#: Central-difference step (scaled time) of a form without closed-form time derivatives
#: (Form.step_derivatives) in the delay columns of the Jacobian.
DELAY_DIFFERENCE = 1e-5
#: Ideal-step joint models of at least this many edges evaluate all edges in one call.
STACKED_FROM_EDGES = 2


#: Prepared segments kept for reuse (oldest dropped first).
PREPARED_CACHE_SIZE = 32
_PREPARED: dict[tuple, tuple[StepSegment, "SegmentData"]] = {}


class JointModel:
    """The model function and parameter bookkeeping of a joint fit."""

    def __init__(self, form: Form, segments: Sequence[StepSegment], scaling: Scaling, *,
                 measured_input: bool, free_t0: bool,
                 max_points: int = MAX_POINTS_PER_SEGMENT) -> None:
        self.form = form
        self.segments = tuple(segments)
        self.scaling = scaling
        self.measured_input = measured_input
        self.free_t0 = free_t0 and not measured_input
        self.max_points = max_points
        per_segment = min(max_points, max(MIN_POINTS_PER_SEGMENT, MAX_TOTAL_POINTS // len(self.segments)))
        self.data = tuple(self._prepared(s, per_segment) for s in self.segments)
        self.y = np.concatenate([d.y for d in self.data])
        #: least-squares weights: a bin mean of k samples has 1/k of the variance
        self.weights = np.sqrt(np.concatenate([d.counts for d in self.data]).astype(float))
        self.bounds = np.cumsum([0] + [d.y.size for d in self.data])
        #: per edge, (time since the previous edge, its step), scaled, or None
        #: (:func:`.previous_tails.previous_step`)
        self.previous_steps = tuple(previous_step(self.segments, i, self.scaling, self.measured_input)
                                    for i in range(len(self.segments)))
        #: per edge, the (time since, step) of the edges before the previous one
        #: whose tails still reach its window (:func:`.previous_tails.earlier_steps`)
        self.earlier_steps = tuple(earlier_steps(self.segments, i, self.scaling, self.measured_input)
                                   for i in range(len(self.segments)))

    def with_segments(self, segments: Sequence[StepSegment]) -> "JointModel":
        """The same model (form, units, mode, point budget) over other segments."""
        return JointModel(self.form, segments, self.scaling, measured_input=self.measured_input,
                          free_t0=self.free_t0, max_points=self.max_points)

    # -- parameter names ----------------------------------------------------
    @property
    def shape_names(self) -> tuple[str, ...]:
        return tuple("log_" + p.name for p in self.form.shape)

    def level_names(self, i: int) -> tuple[str, ...]:
        if self.measured_input:
            return (f"baseline_{i}",)
        names = (f"baseline_{i}", f"step_{i}")
        return names + ((f"t0_{i}",) if self.free_t0 else ())

    @property
    def names(self) -> tuple[str, ...]:
        out = list(self.shape_names)
        if self.measured_input:
            out.append("gain")
        for i in range(len(self.segments)):
            out.extend(self.level_names(i))
        return tuple(out)

    # -- evaluation ---------------------------------------------------------------
    def shape_scaled(self, values: Mapping[str, float]) -> dict[str, float]:
        """Shape parameters in scaled units (not logs) from internal values."""
        # clipped: a log beyond +-60 means the fit has run away (handled as not determined)
        return {p.name: math.exp(min(max(values["log_" + p.name], -RUNAWAY_LOG), RUNAWAY_LOG))
                for p in self.form.shape}

    def unit_response(self, i: int, shape: Mapping[str, float], t0: float = 0.0) -> np.ndarray:
        """Normalised response of edge i (per point, scaled): step or measured-input response."""
        d = self.data[i]
        if self.measured_input:
            # d.u and d.dt are at the fitted resolution (bin means when binned)
            y = response_by_superposition(lambda t: self.form.unit_step(t, **shape), d.u, d.dt,
                                          getattr(self.form, "final_value", 1.0), initial=d.u_initial,
                                          kernel=self.kernel_for(shape, d.dt))
            if d.bin_size > 1 and y.size > 2:
                # The bins' means of the input, joined by straight lines, smooth the
                # drive by a further K^2 / 12 of variance (K the bin width) beyond
                # what the bin means of the output have, so the simulated response
                # is y + K^2 y'' / 12 against bin means y + K^2 y'' / 24 ... minus
                # the input's own K^2 / 24: net K^2 y'' / 12. Removed with the
                # second difference (Taylor expansion; common practice, no source):
                # 100-300x smaller model error for a smooth drive, 3.5x for a step
                # inside a bin (tests/test_fitting_recovery.py).
                y[1:-1] -= (y[2:] - 2.0 * y[1:-1] + y[:-2]) / 12.0
            return y
        # weights (k,) or (n, k): either broadcasts against the (n, k) node values
        return (self.form.unit_step(d.t_nodes - t0, **shape) * d.node_weights).sum(axis=1)

    # -- the previous edge's tail ------------------------------------------------
    def follows_previous_delay(self, i: int) -> bool:
        """Whether edge i's tail moves with the fitted delay of edge i - 1 (a raw
        edge after a raw edge, ideal-step mode); an average's previous edges are
        not among the fitted ones, and their tail is placed by the recorded times."""
        return (not self.measured_input and i > 0 and self.segments[i].averaged_edges == 1
                and self.segments[i - 1].averaged_edges == 1)

    def previous_tail(self, i: int, shape: Mapping[str, float], values: Mapping[str, float]) -> np.ndarray | float:
        """The previous edges' still-settling responses over edge i's points (see
        :mod:`.previous_tails`): scaled volts in ideal-step mode, normalised input
        units (times the gain) in measured-input mode; 0.0 when there is none.
        ``values``: the internal parameter values, for the previous edge's fitted
        delay (scaled, from its reported time) when delays are free."""
        previous_t0 = values.get(f"t0_{i - 1}", 0.0)
        prev = self.previous_steps[i]
        if prev is None:
            return 0.0
        delta, step = prev
        d = self.data[i]
        final = getattr(self.form, "final_value", 1.0)
        # The tail is the smooth late part of a step response, so each point's
        # value at its mean time stands for its mean: in a bin of width w the
        # error is w^2 s'' / 24, under 1 % of the (already small) tail for the
        # widest bins (half a time unit), and the model costs one evaluation per
        # point instead of three.
        shift = delta - previous_t0 if self.follows_previous_delay(i) else delta
        tail = step * (self.form.unit_step(d.t_point + shift, **shape) - final)
        for earlier_delta, earlier_step in self.earlier_steps[i]:
            tail = tail + earlier_step * (self.form.unit_step(d.t_point + earlier_delta, **shape) - final)
        return tail

    def kernel_for(self, shape: Mapping[str, float], dt: float) -> np.ndarray:
        """Superposition kernel for the longest edge, computed once per shape and
        bin width (the edges of one evaluation share it; edges binned at other
        widths keep theirs while the shape stays)."""
        shape_key = tuple(sorted(shape.items()))
        cached = getattr(self, "_kernel_cache", None)
        if cached is None or cached[0] != shape_key:
            cached = self._kernel_cache = (shape_key, {})
        kernel = cached[1].get(dt)
        if kernel is None:
            n = max(d.u.size for d in self.data if d.u is not None)
            kernel = cached[1][dt] = superposition_kernel(lambda t: self.form.unit_step(t, **shape), n, dt)
        return kernel

    # -- every edge at once (ideal-step mode) ------------------------------------------
    @property
    def stacked(self) -> StackedEdges:
        """The points of every edge in one array (built once), for evaluating
        all edges in one call instead of one call per edge."""
        cached = getattr(self, "_stacked", None)
        if cached is None:
            cached = self._stacked = StackedEdges.of(self)
        return cached

    @property
    def edge_sums(self) -> EdgeSums:
        """The weighted per-edge sums over the stacked points (built once)."""
        cached = getattr(self, "_edge_sums", None)
        if cached is None:
            cached = self._edge_sums = EdgeSums(self)
        return cached

    def delays_of(self, values: Mapping[str, float]) -> np.ndarray:
        """The edge delays t0_i (scaled) in ``values``, zero where absent."""
        return np.array([values.get(f"t0_{i}", 0.0) for i in range(len(self.segments))])

    def stacked_responses(self, shape: Mapping[str, float], delays: np.ndarray) -> np.ndarray:
        """Unit responses of every edge (ideal step) at the given delays, all points."""
        st = self.stacked
        t, w, point, edge = st.active
        return np.bincount(point, weights=self.form.unit_step(t - delays[edge], **shape) * w,
                           minlength=st.t_point.size)

    def stacked_responses_and_slopes(self, shape: Mapping[str, float], delays: np.ndarray, difference_step: float
                                     ) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """:meth:`stacked_responses` with its first and second derivatives in each
        edge's delay (scaled units), from one evaluation of the form where it has
        closed-form derivatives (else central differences of ``difference_step``)."""
        st = self.stacked
        t, w, point, edge = st.active
        f, d1, d2 = self.form.step_and_derivatives(t - delays[edge], difference_step, **shape)
        size = st.t_point.size
        return (np.bincount(point, weights=f * w, minlength=size), np.bincount(point, weights=-d1 * w, minlength=size),
                np.bincount(point, weights=d2 * w, minlength=size))

    def level_columns(self, values: Mapping[str, float]) -> dict[str, tuple[np.ndarray, np.ndarray]] | None:
        """The Jacobian columns of every edge's baseline, step and delay, in closed
        form: {name: (points, d model / d value)} over the points each one moves
        (the delay also moves the next edge's points, through its tail); in
        measured-input mode every edge's baseline and the common gain. At least
        STACKED_FROM_EDGES edges only; None otherwise."""
        if len(self.data) < STACKED_FROM_EDGES:
            return None
        if self.measured_input:  # the model is baseline_i + gain * (the input's response)
            response = self.input_responses(self.shape_scaled(values))
            columns = {"gain": (np.arange(response.size), response)}
            for i, (lo, hi) in enumerate(zip(self.bounds[:-1], self.bounds[1:])):
                columns[f"baseline_{i}"] = (np.arange(lo, hi), np.ones(hi - lo))
            return columns
        st = self.stacked
        delays = self.delays_of(values)
        shape = self.shape_scaled(values)
        f, slope, _ = self.stacked_responses_and_slopes(shape, delays, DELAY_DIFFERENCE)
        tail_slope = np.zeros(f.size)
        tail = self._tail_points(delays)
        if tail is not None:
            has, step, t = tail
            _, d1, _ = self.form.step_and_derivatives(t, DELAY_DIFFERENCE, **shape)
            # d tail / d (previous edge's delay), where the tail follows that delay
            tail_slope[has] = -step * d1 * st.tail_follows_delay[st.edge_of_point[has]]
        out: dict[str, tuple[np.ndarray, np.ndarray]] = {}
        for i, (lo, hi) in enumerate(zip(self.bounds[:-1], self.bounds[1:])):
            points = np.arange(lo, hi)
            out[f"baseline_{i}"] = (points, np.ones(hi - lo))
            out[f"step_{i}"] = (points, f[lo:hi])
            if self.free_t0:
                t0 = values[f"step_{i}"] * slope[lo:hi]
                if i + 1 < len(self.data):
                    after = np.arange(hi, self.bounds[i + 2])
                    points, t0 = np.concatenate([points, after]), np.concatenate([t0, tail_slope[hi:self.bounds[i + 2]]])
                out[f"t0_{i}"] = (points, t0)
        return out

    def stacked_tails(self, shape: Mapping[str, float], delays: np.ndarray) -> np.ndarray | float:
        """:meth:`previous_tail` of every edge (ideal step), all points (0.0 when none has one)."""
        tail = self._tail_points(delays)
        if tail is None:
            return 0.0
        has, step, t = tail
        final = getattr(self.form, "final_value", 1.0)
        out = np.zeros(self.stacked.t_point.size)
        out[has] = step * (self.form.unit_step(t, **shape) - final)
        earlier = self.stacked.earlier_tails
        if earlier is not None:
            points, earlier_step, earlier_t = earlier
            out += np.bincount(points, weights=earlier_step * (self.form.unit_step(earlier_t, **shape) - final),
                               minlength=out.size)
        return out

    def _tail_points(self, delays: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray] | None:
        """(the points that carry a previous edge's tail, that edge's step on each,
        the time since it at each, scaled), or None when no edge has a tail."""
        st = self.stacked
        if st.tail_steps is None:
            return None
        e = st.edge_of_point
        previous = np.concatenate([[0.0], delays[:-1]]) * st.tail_follows_delay
        step = st.tail_steps[e]
        has = step != 0.0
        return has, step[has], st.t_point[has] + (st.tail_deltas[e] - previous[e])[has]

    def input_responses(self, shape: Mapping[str, float]) -> np.ndarray:
        """Measured-input mode: every edge's response to its own measured input,
        previous edge's tail included (normalised input units), all points: the
        per-edge :meth:`unit_response` plus :meth:`previous_tail`, computed for
        all edges at once (one FFT convolution of the edges' inputs side by side,
        sharing the kernel; one per bin width when the edges were binned differently)."""
        out = np.empty(self.y.size)
        final = getattr(self.form, "final_value", 1.0)
        for layout in self._input_layouts:
            lengths = layout["lengths"]
            n = int(lengths.max())
            kernel = self.kernel_for(shape, layout["dt"])
            initial = layout["initial"]
            du = np.diff(layout["inputs"], axis=0, prepend=initial[None, :])
            y = initial[None, :] * final + fft_convolve(du, kernel[1:n + 1], n)
            binned = layout["binned"]
            if np.any(binned) and n > 2:
                # the bin-mean correction of unit_response, on each binned edge's own rows
                corr = np.zeros_like(y)
                corr[1:-1] = (y[2:] - 2.0 * y[1:-1] + y[:-2]) / 12.0
                keep = (np.arange(n)[:, None] < (lengths - 1)[None, :]) & binned[None, :] & (lengths > 2)[None, :]
                y -= np.where(keep, corr, 0.0)
            out[layout["points"]] = y[layout["rows"], layout["cols"]]
        return out + self.stacked_tails(shape, np.zeros(len(self.data)))

    @property
    def _input_layouts(self) -> list[dict[str, np.ndarray]]:
        """Per bin width, its edges' inputs side by side (padded with each one's
        last value), their initial levels, where each point sits in that array
        and among all points (built once)."""
        cached = getattr(self, "_input_layout_cache", None)
        if cached is None:
            cached = self._input_layout_cache = []
            for dt in sorted({d.dt for d in self.data}):
                members = [i for i, d in enumerate(self.data) if d.dt == dt]
                data = [self.data[i] for i in members]
                lengths = np.array([d.u.size for d in data])
                inputs = np.empty((int(lengths.max()), len(data)))
                for j, d in enumerate(data):
                    inputs[:d.u.size, j] = d.u
                    inputs[d.u.size:, j] = d.u[-1]
                cached.append({
                    "dt": dt, "lengths": lengths, "inputs": inputs,
                    "initial": np.array([d.u[0] if d.u_initial is None else d.u_initial for d in data]),
                    "rows": np.concatenate([np.arange(k) for k in lengths]),
                    "cols": np.repeat(np.arange(len(data)), lengths),
                    "points": np.concatenate([np.arange(self.bounds[i], self.bounds[i + 1]) for i in members]),
                    "binned": np.array([d.bin_size > 1 for d in data])})
        return cached

    def evaluate(self, _x: object = None, **values: float) -> np.ndarray:
        """Model over all points (scaled volts), for the least-squares core."""
        shape = self.shape_scaled(values)
        if self.measured_input:
            e = self.stacked.edge_of_point
            baselines = np.array([values[f"baseline_{i}"] for i in range(len(self.data))])
            return baselines[e] + values["gain"] * self.input_responses(shape)
        if not self.measured_input and len(self.data) >= STACKED_FROM_EDGES:
            st = self.stacked
            delays = self.delays_of(values)
            levels = np.array([[values[f"baseline_{i}"], values[f"step_{i}"]] for i in range(len(self.data))])
            e = st.edge_of_point
            return (levels[e, 0] + levels[e, 1] * self.stacked_responses(shape, delays)
                    + self.stacked_tails(shape, delays))
        parts = []
        for i in range(len(self.data)):
            tail = self.previous_tail(i, shape, values)
            if self.measured_input:
                parts.append(values[f"baseline_{i}"] + values["gain"] * (self.unit_response(i, shape) + tail))
            else:
                t0 = values.get(f"t0_{i}", 0.0)  # present when free or held fixed
                parts.append(values[f"baseline_{i}"] + values[f"step_{i}"] * self.unit_response(i, shape, t0)
                             + tail)
        return np.concatenate(parts)

    def split(self, vector: np.ndarray) -> list[np.ndarray]:
        """Cut a concatenated per-point vector back into per-segment pieces."""
        return [vector[self.bounds[i]:self.bounds[i + 1]] for i in range(len(self.data))]

    # -- preparation ----------------------------------------------------------------
    def _prepared(self, seg: StepSegment, max_points: int) -> SegmentData:
        """The binned data of one segment, reused while the same segment is fitted
        with another form in the same units (model selection fits several)."""
        key = (id(seg), self.scaling, self.measured_input, max_points)
        hit = _PREPARED.get(key)
        if hit is not None and hit[0] is seg:
            return hit[1]
        data = self._prepare(seg, max_points)
        if len(_PREPARED) >= PREPARED_CACHE_SIZE:
            _PREPARED.pop(next(iter(_PREPARED)))
        _PREPARED[key] = (seg, data)  # the segment is kept, so its id is not reused
        return data

    def _prepare(self, seg: StepSegment, max_points: int) -> SegmentData:
        sc = self.scaling
        t_rel = (np.asarray(seg.time, dtype=float) - seg.edge_time) / sc.time_unit
        y = (np.asarray(seg.output, dtype=float) - sc.volt_origin) / sc.volt_unit
        if t_rel.size < 4:
            raise FitError(f"a segment at t = {seg.edge_time:g} s has only {t_rel.size} samples; too few to fit",
                           hint="capture more samples per edge")
        u = None
        dt = float(np.median(np.diff(t_rel)))
        if self.measured_input:
            if seg.input is None or seg.input_before is None:
                raise FitError("measured-input mode needs an input channel on every segment")
            dt = uniform_step(t_rel)
            u = (np.asarray(seg.input, dtype=float) - seg.input_before) / sc.input_unit
        ones = np.ones(t_rel.size)
        if u is not None:
            # the measured input is simulated at the bin resolution on a uniform
            # grid: uniform bins kept short against the time scale (model error
            # of order (bin / tau)^2 / 24)
            k = int(math.ceil(t_rel.size / max_points))
            k = max(1, min(k, int(1.0 / (MEASURED_INPUT_BINS_PER_UNIT * dt))))
            if k == 1:
                return SegmentData(t_rel[:, None], np.ones(1), y, u, 1, dt, t_rel, ones,
                                   pre_edge_weights(t_rel, dt))
            n = (t_rel.size // k) * k
            tb = t_rel[:n].reshape(-1, k).mean(axis=1)
            return SegmentData(tb[:, None], np.ones(1), y[:n].reshape(-1, k).mean(axis=1),
                               u[:n].reshape(-1, k).mean(axis=1), k, k * dt, tb, np.full(tb.size, k),
                               pre_edge_weights(tb, k * dt))
        if t_rel.size <= max_points:
            return SegmentData(t_rel[:, None], np.ones(1), y, u, 1, dt, t_rel, ones)
        starts = variable_bins(t_rel, dt, max_points)
        counts = np.diff(np.append(starts, t_rel.size))
        yb = np.add.reduceat(y, starts) / counts
        tb = np.add.reduceat(t_rel, starts) / counts
        nodes, weights = discrete_mean_nodes(tb, counts, dt)
        return SegmentData(nodes, weights, yb, None, int(counts.max()), dt, tb, counts)
