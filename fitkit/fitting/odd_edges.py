"""An edge that does not follow the shape the other edges share.

A joint fit shares one shape among the edges of a capture; an edge whose
response differs (a drifting part, a glitch, a different load) leaves larger
residuals than the others. It is named in the warnings, not averaged away.
"""

from __future__ import annotations

import math

import numpy as np

from .joint_model import JointModel
from .least_squares import ModelFit
from .uncertainty import Correction

#: An edge's residuals are named as unlike the others' when a chi-square test
#: against the typical edge's residual variance rejects at this level, shared
#: (Bonferroni) among the edges.
ODD_EDGE_LEVEL = 1e-3


def edges_unlike_the_others(joint: JointModel, fit: ModelFit, correction: Correction) -> list[str]:
    """Plain-words warnings naming each edge whose residuals are larger than the others'.

    A joint fit shares one shape among the edges; an edge whose response
    differs (a drifting part, a glitch, a different load) leaves larger
    residuals there. Each edge's weighted residual variance is compared with
    the median edge's: rss_i / median ~ chi-square(d_i) / d_i with d_i its
    points less its own parameters, divided by the residuals' variance ratio
    when they are correlated (fewer effective points); an edge is named when
    that exceeds the upper ODD_EDGE_LEVEL / m quantile. Needs three edges.
    """
    from scipy import special

    m = len(joint.segments)
    if m < 3 or not fit.rss > 0:
        return []
    w = joint.weights
    pieces = joint.split(w * (joint.y - fit.fitted))
    own = len(joint.level_names(0)) - (1 if joint.measured_input else 0)
    dof = np.array([max(len(r) - own, 1) for r in pieces], dtype=float)
    variance = np.array([float(r @ r) for r in pieces]) / dof
    typical = float(np.median(variance))
    if not typical > 0:
        return []
    effective = dof / max(correction.variance_ratio, 1.0)
    limit = special.chdtri(effective, ODD_EDGE_LEVEL / m) / effective
    out = []
    for i in np.flatnonzero(variance / typical > limit):
        seg = joint.segments[i]
        out.append(f"edge {i + 1} of {m} (at t = {seg.edge_time:.6g} s) does not follow the shared response: "
                   f"its residuals are {math.sqrt(variance[i] / typical):.2g} times those of a typical edge")
    return out
