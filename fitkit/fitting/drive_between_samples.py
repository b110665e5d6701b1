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
sample. Over edges sampled out of step with the drive it averages out; for
edges sampled in step with it, it is a dead time, which the dead-time form
measures (:func:`.further_forms.with_dead_time`). It is not added here: as a
systematic term it widened every interval of a capture whose drive moves
linearly between its samples far beyond their 95 % (coverage 100 % where
90-97.5 % holds, tests/test_fitting_measured_input.py).
"""

from __future__ import annotations

import math
from dataclasses import replace

import numpy as np
from scipy import sparse
from scipy.sparse import linalg as sparse_linalg

from .least_squares import ModelFit
from .joint_model import JointModel
from .uncertainty import Correction

#: A window's largest drive move between two samples counts as an unresolved jump
#: when it is at least this share of the window's whole drive step.
JUMP_SHARE = 0.8
#: A systematic term below this share of every shape parameter's standard error is left out.
NEGLIGIBLE = 0.2


def drive_jump_term(joint: JointModel, fit: ModelFit) -> np.ndarray | None:
    """b over all points (scaled volts): the model's change from the straight-line
    drive to a jump at the middle of the one interval where the drive jumps; None
    when no window's drive jumps within one sample (or the windows are binned:
    their own correction applies)."""
    if not joint.measured_input:
        return None
    shape = joint.shape_scaled(fit.values)
    gain = fit.values.get("gain", 1.0)
    sharp, found = [], False
    longest = max(d.y.size for d in joint.data)
    middles: dict[float, np.ndarray] = {}  # step response at each interval's middle, per sample interval
    for d in joint.data:
        n = d.y.size
        b = np.zeros(n)
        sharp.append(b)
        if d.bin_size != 1 or d.u is None or n < 3:
            continue
        initial = d.u[0] if d.u_initial is None else d.u_initial
        du = np.diff(d.u, prepend=initial)
        j = int(np.argmax(np.abs(du)))
        total = float(d.u[-1] - initial)
        if total == 0.0 or abs(du[j]) < JUMP_SHARE * abs(total):
            continue
        found = True
        if d.dt not in middles:
            middles[d.dt] = joint.form.unit_step((np.arange(1, longest + 1) - 0.5) * d.dt, **shape)
        b[j:] = gain * du[j] * (middles[d.dt][:n - j] - joint.kernel_for(shape, d.dt)[1:n - j + 1])
    return np.concatenate(sharp) if found else None


def with_drive_between_samples(joint: JointModel, fit: ModelFit, correction: Correction
                               ) -> tuple[Correction, str]:
    """The correction with the unresolved drive jump's systematic term added to
    its covariance, and a plain-words note ("" when nothing was added)."""
    term = drive_jump_term(joint, fit)
    if term is None or fit.singular:
        return correction, ""
    w = fit.weights
    jac = fit.jacobian
    with np.errstate(all="ignore"):
        if sparse.issparse(jac):
            delta = sparse_linalg.lsqr(sparse.diags(w) @ jac, term * w, atol=1e-12, btol=1e-12)[0]
        else:
            delta = np.linalg.lstsq(np.asarray(jac) * w[:, None], term * w, rcond=None)[0]
    if not np.all(np.isfinite(delta)):
        return correction, ""
    added = np.outer(delta, delta)
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
    note = (f"the drive jumps between two of its samples at each edge, and how it moves inside that sample "
            f"interval is unknown: a jump rather than the straight line the model draws would move {name} "
            f"by {share[name]:.1f} of its standard errors, and the intervals include that")
    text = (correction.description if correction.applied else "output noise treated as white") + \
        "; plus the drive's unknown shape between its samples at each edge"
    return replace(correction, covariance=total, widening=np.where(np.isfinite(widening), widening, 1.0),
                   applied=True, description=text), note
