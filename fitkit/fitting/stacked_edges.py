"""Every edge of a joint fit in one array: its points stacked for evaluating all
edges in one call, and the weighted per-edge sums over them (ideal-step mode).

Built once per :class:`.joint_model.JointModel` (its ``stacked`` and
``edge_sums`` properties), used by the model evaluation, the per-edge delay
solve (:mod:`.edge_delays`) and the measured-input levels (:mod:`.projection`).
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import TYPE_CHECKING

import numpy as np

if TYPE_CHECKING:
    from .joint_model import JointModel


@dataclass(frozen=True)
class StackedEdges:
    """Every edge's points in one array (ideal-step mode), see :meth:`JointModel.stacked`.

    t_nodes, node_weights: (n, k) nodes and weights of all points (segments
        with fewer nodes are padded with zero-weight nodes);
    edge_of_point: (n,) the edge each point belongs to;
    t_point: (n,) representative scaled time of each point;
    tail_steps, tail_deltas: per edge, the previous edge's step and the time since
        it (:attr:`JointModel.previous_steps`; step 0 where there is none), or
        None when no edge has a previous tail;
    tail_follows_delay: per edge, 1.0 when its tail moves with the previous
        edge's fitted delay (:meth:`JointModel.follows_previous_delay`), else 0.0;
    earlier_tails: (point, step, scaled time since that edge) for every point
        and every edge before the previous one still reaching it
        (:attr:`JointModel.earlier_steps`), or None when there are none.
    """

    t_nodes: np.ndarray
    node_weights: np.ndarray
    edge_of_point: np.ndarray
    t_point: np.ndarray
    tail_steps: np.ndarray | None
    tail_deltas: np.ndarray | None
    tail_follows_delay: np.ndarray | None = None
    earlier_tails: tuple[np.ndarray, np.ndarray, np.ndarray] | None = None

    @property
    def active(self) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
        """The nodes of non-zero weight, flattened: (times, weights, point, edge).

        A bin of one sample has one node that counts and two of weight 0 (and the
        padding nodes have weight 0): evaluating only the others saves up to
        two thirds of the work of an evaluation."""
        cached = self.__dict__.get("_active")
        if cached is None:
            k = self.t_nodes.shape[1]
            keep = np.flatnonzero(self.node_weights.ravel() != 0.0)
            point = keep // k
            cached = (self.t_nodes.ravel()[keep], self.node_weights.ravel()[keep], point,
                      self.edge_of_point[point])
            object.__setattr__(self, "_active", cached)
        return cached

    @classmethod
    def of(cls, joint: "JointModel") -> "StackedEdges":
        k = max(d.t_nodes.shape[1] for d in joint.data)
        nodes, weights = [], []
        for d in joint.data:
            t = d.t_nodes
            w = np.broadcast_to(d.node_weights, t.shape)
            if t.shape[1] < k:  # pad with copies of the first node at zero weight
                t = np.column_stack([t] + [t[:, :1]] * (k - t.shape[1]))
                w = np.column_stack([w] + [np.zeros((t.shape[0], 1))] * (k - w.shape[1]))
            nodes.append(t)
            weights.append(w)
        edge_of_point = np.repeat(np.arange(len(joint.data)), [d.y.size for d in joint.data])
        prev = joint.previous_steps
        steps = deltas = follows = None
        if any(p is not None for p in prev):
            steps = np.array([0.0 if p is None else p[1] for p in prev])
            deltas = np.array([0.0 if p is None else p[0] for p in prev])
            follows = np.array([float(joint.follows_previous_delay(i)) for i in range(len(prev))])
        t_point = np.concatenate([d.t_point for d in joint.data])
        points, earlier_steps, earlier_times = [], [], []
        for i, pairs in enumerate(joint.earlier_steps):
            own = np.arange(joint.bounds[i], joint.bounds[i + 1])
            for delta, step in pairs:
                points.append(own)
                earlier_steps.append(np.full(own.size, step))
                earlier_times.append(t_point[own] + delta)
        earlier = (np.concatenate(points), np.concatenate(earlier_steps), np.concatenate(earlier_times)) \
            if points else None
        return cls(np.vstack(nodes), np.vstack(weights), edge_of_point, t_point, steps, deltas, follows, earlier)


class EdgeSums:
    """Weighted per-edge sums over the stacked points of a joint model (weights =
    samples per point): the per-edge means and centring that the delay search
    (:mod:`.edge_delays`) and the measured-input levels (:mod:`.projection`) use."""

    def __init__(self, joint: JointModel) -> None:
        self.edge = joint.stacked.edge_of_point
        self.m = len(joint.data)
        self.starts = np.asarray(joint.bounds[:-1])  # every edge has points (at least 4)
        self.w2 = np.concatenate([d.counts for d in joint.data]).astype(float)
        self.total = self.sum(np.ones_like(self.w2))

    def sum(self, x: np.ndarray) -> np.ndarray:
        return np.add.reduceat(self.w2 * x, self.starts)

    def mean(self, x: np.ndarray) -> np.ndarray:
        """The weighted mean of x over each edge."""
        return self.sum(x) / self.total

    def centred(self, x: np.ndarray) -> np.ndarray:
        """x minus its weighted mean over each edge."""
        return x - self.mean(x)[self.edge]
