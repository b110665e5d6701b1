"""The measured drive between its samples: a jump the samples do not resolve.

In measured-input mode the model draws the drive as straight lines between
its samples (:mod:`.measured_input`). When the drive's edge is faster than
the sampling (a generator's nanosecond edge on a scope decimating to 100 ns
a sample), the drive jumps somewhere inside one sample interval and the
samples do not say where, nor whether it jumped or moved smoothly. The
response to a jump at the interval's middle differs from the response to the
straight line by its sharpening: d (k_mid - k), where d is the jump, k the
line's superposition kernel (the step response averaged over each interval)
and k_mid the step response at each interval's middle; about
(dt^2 / 24) d s'' for step response s.

That difference is carried into the parameters by least-squares projection
(delta = (J^T W J)^-1 J^T W b, the fit's own Jacobian and weights) and added
to the covariance as a systematic term delta delta^T: either drive shape is
then inside the intervals. At ten samples a cycle of ringing, over a thousand
edges, it moved Q by 44 of the fit's standard errors (the joint fit's Q
interval had missed the truth, benchmarks/bench_speed.py --many-edges); at
forty samples per time constant it is far below a tenth of one and nothing
is added.

Where inside the interval the jump lies acts as a delay of up to half a
sample, unknown and different at each edge: uniform over the interval, a
shift of standard deviation dt / sqrt(12) of the middle (GUM, JCGM 100:2008,
4.3.7, the rectangular distribution). Each window's model change per unit
shift, g = -d s'(t - t_mid), is projected in the same way and added as a
random term (dt^2 / 12) sum_e delta_e delta_e^T, the windows independent.
As a worst-case systematic shift of half a sample it had widened every
interval of a capture whose drive does move along the line far beyond
95 %; as the variance of an unknown position it is the honest width when
the drive's edge is faster than the sampling, which a generator's is: the
board-check study's drive simulated 16 times finer than the scope's samples
held the truth in 67 % of measured-input cells without it.
"""

from __future__ import annotations

import math
from dataclasses import replace

import numpy as np
from scipy import sparse

from .least_squares import ModelFit
from .joint_model import JointModel
from .uncertainty import Correction

#: A window's largest drive move between two samples counts as an unresolved jump
#: when it is at least this share of the window's whole drive step.
JUMP_SHARE = 0.8
#: A systematic term below this share of every shape parameter's standard error is left out.
NEGLIGIBLE = 0.2


def drive_jump_terms(joint: JointModel, fit: ModelFit) -> tuple[np.ndarray, sparse.csc_matrix] | None:
    """(b, G) over all points (scaled volts): b the model's change from the straight-line
    drive to a jump at the middle of the one interval where the drive jumps; G one column
    per such window, its model change per unit of the jump's shift (scaled time) times the
    shift's standard deviation dt / sqrt(12). None when no window's drive jumps within one
    sample (or the windows are binned: their own correction applies)."""
    if not joint.measured_input:
        return None
    shape = joint.shape_scaled(fit.values)
    gain = fit.values.get("gain", 1.0)
    sharp, rows, cols, vals = [], [], [], []
    longest = max(d.y.size for d in joint.data)
    middles: dict[float, tuple[np.ndarray, np.ndarray]] = {}  # step response and slope at interval middles
    offset = 0
    for d in joint.data:
        n, start = d.y.size, offset
        b = np.zeros(n)
        sharp.append(b)
        offset += n
        if d.bin_size != 1 or d.u is None or n < 3:
            continue
        initial = d.u[0] if d.u_initial is None else d.u_initial
        du = np.diff(d.u, prepend=initial)
        j = int(np.argmax(np.abs(du)))
        total = float(d.u[-1] - initial)
        if total == 0.0 or abs(du[j]) < JUMP_SHARE * abs(total):
            continue
        if d.dt not in middles:
            # closed-form slopes where the form has them; differences a quarter sample wide,
            # off the edge's kink, where it has not
            x = (np.arange(1, longest + 1) - 0.5) * d.dt
            middles[d.dt] = joint.form.step_and_derivatives(x, 0.25 * d.dt, **shape)[:2]
        step_mid, slope = middles[d.dt]
        b[j:] = gain * du[j] * (step_mid[:n - j] - joint.kernel_for(shape, d.dt)[1:n - j + 1])
        rows.append(start + np.arange(j, n))
        vals.append(-gain * du[j] * slope[:n - j] * d.dt / math.sqrt(12.0))
        cols.append(np.full(n - j, len(cols)))
    if not rows:
        return None
    shift = sparse.csc_matrix((np.concatenate(vals), (np.concatenate(rows), np.concatenate(cols))),
                              shape=(offset, len(rows)))
    return np.concatenate(sharp), shift


def with_drive_between_samples(joint: JointModel, fit: ModelFit, correction: Correction
                               ) -> tuple[Correction, str]:
    """The correction with the drive's unresolved jumps added to its covariance (the
    shape term and the random position term, :func:`drive_jump_terms`), and a plain-words
    note ("" when nothing was added)."""
    terms = drive_jump_terms(joint, fit)
    if terms is None or fit.singular:
        return correction, ""
    term, shift = terms
    w = fit.weights
    jw = sparse.diags(w) @ fit.jacobian if sparse.issparse(fit.jacobian) else np.asarray(fit.jacobian) * w[:, None]
    with np.errstate(all="ignore"):
        normal = jw.T @ jw
        normal = normal.toarray() if sparse.issparse(normal) else np.asarray(normal)
        right = jw.T @ sparse.hstack([sparse.csc_matrix((term * w)[:, None]), sparse.diags(w) @ shift]).tocsc()
        right = right.toarray() if sparse.issparse(right) else np.asarray(right)
        try:
            projected = np.linalg.solve(normal, right)
        except np.linalg.LinAlgError:
            return correction, ""
    if not np.all(np.isfinite(projected)):
        return correction, ""
    delta, per_window = projected[:, 0], projected[:, 1:]
    added = np.outer(delta, delta) + per_window @ per_window.T
    cov = correction.covariance
    shape_idx = [k for k, name in enumerate(fit.names) if name.startswith("log_")]
    with np.errstate(all="ignore"):
        share = {fit.names[k][4:]: math.sqrt(added[k, k] / cov[k, k]) for k in shape_idx if cov[k, k] > 0}
    if not share or max(share.values()) < NEGLIGIBLE:
        return correction, ""
    total = cov + added
    with np.errstate(all="ignore"):
        widening = np.sqrt(np.diag(total) / np.diag(cov)) * correction.widening
    name = max(share, key=share.get)
    note = (f"the drive jumps between two of its samples at each edge, and how and where it moves inside that "
            f"sample interval is unknown: a jump rather than the straight line the model draws, anywhere in "
            f"the interval, would move {name} by {share[name]:.1f} of its standard errors, and the intervals "
            "include that")
    text = (correction.description if correction.applied else "output noise treated as white") + \
        "; plus the drive's unknown shape between its samples at each edge"
    return replace(correction, covariance=total, widening=np.where(np.isfinite(widening), widening, 1.0),
                   applied=True, description=text), note
