"""How far a coherent average of edges located from the output alone is smeared.

Without a drive channel each edge is located where the output crosses its
mid-level. Noise moves that crossing by about sigma / |slope| (the first-order
error of a level-crossing time; common practice, no source), and the linear
interpolation onto the average's common grid smooths each edge by a kernel
[1 - d, d] of variance d (1 - d) dt^2 for a sub-sample offset d, dt^2 / 6 on
average over offsets spread evenly. The average is then the response
convolved with a kernel of variance s^2 = sigma_t^2 + dt^2 / 6, which to
second order (Taylor expansion of the convolution) is

    y_avg(t) = f(t) + (s^2 / 2) f''(t).

That term moves the fitted parameters by its least-squares projection,
delta = (J^T W J)^-1 J^T W b with b = (s^2 / 2) f'' (the fit's own Jacobian
and weights). Reported as a multiple of each shape parameter's standard
error: when it is a sizeable part of the interval, the average's intervals
do not hold and every edge has to be fitted jointly instead. With a drive
channel the edges are located on the drive and the same shift and smoothing
apply to the averaged drive: the model driven by it stays exact.
"""

from __future__ import annotations

import math

import numpy as np

from .block_jacobian import dense
from .form_fit import FormFit

#: Bias of a shape parameter, in its standard errors, from which an average is not used.
SMEAR_LIMIT = 0.5
#: Central-difference step (scaled time units) of the second derivative.
STEP = 1e-3


def smear_bias(ff: FormFit) -> dict[str, float]:
    """|bias| / standard error of each shape parameter of a fit to averaged
    segments (see the module docstring and
    :func:`fitkit.conditioning.segments.alignment_variance`); empty when it
    does not apply: a model driven by the measured (averaged) input, raw
    edges, a singular fit, or a form that jumps at the edge (the expansion
    needs a response smooth across the edge's time)."""
    joint, fit = ff.joint, ff.fit
    segments = joint.segments
    if (joint.measured_input or ff.form.edge_jumps or fit.singular
            or all(s.alignment_variance <= 0 for s in segments)):
        return {}
    shape = joint.shape_scaled(fit.values)
    b = []
    for i, seg in enumerate(segments):
        t0 = fit.values.get(f"t0_{i}", 0.0)
        step = fit.values.get(f"step_{i}", 0.0)
        variance = seg.alignment_variance / (joint.scaling.time_unit ** 2)
        curve = (joint.unit_response(i, shape, t0 + STEP) - 2.0 * joint.unit_response(i, shape, t0)
                 + joint.unit_response(i, shape, t0 - STEP)) / (STEP * STEP)
        b.append(0.5 * variance * step * curve)
    bias_model = np.concatenate(b)
    w = fit.weights
    with np.errstate(all="ignore"):
        delta = np.linalg.lstsq(dense(fit.jacobian) * w[:, None], bias_model * w, rcond=None)[0]
        se = np.sqrt(np.diag(ff.correction.covariance))
    out = {}
    for j, name in enumerate(fit.names):
        if name.startswith("log_") and math.isfinite(delta[j]) and se[j] > 0:
            out[name[4:]] = abs(float(delta[j])) / float(se[j])
    return out
