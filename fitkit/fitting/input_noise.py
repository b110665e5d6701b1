"""The measured input's own noise, carried into the covariance of a fit.

In measured-input mode the model is ``baseline + gain * L u``: a linear map
L (superposition of the form's step response, see :mod:`.measured_input`)
of the recorded input samples u. The recorded input carries the scope's
noise n (band-limited, quantised). The fit therefore sees the output noise
plus ``-gain * L n``. L is a low-pass of the circuit's own time scale, so
``L n`` is tiny in rms yet holds as much low-frequency power as the output's
own noise, and it is exactly the low frequencies that set the time constants
and the gain. The residuals cannot reveal it (it is buried under the output's
broadband noise), so it is added from a separate estimate of the input noise:

    V_input = gain^2 B M^T Sigma_n M B,   M = L^T W^2 J,   B = (J^T W^2 J)^-1

(first-order propagation of errors in the regressor, "errors in variables"),
with Sigma_n the Toeplitz covariance of the input noise within each edge.
The noise's autocovariance is estimated where the input rests (before each
edge, and late in its window), pooled over the edges of one direction, and
smoothed by an autoregressive model (Yule-Walker, order by AIC) so that its
long-run variance is stable; with no rest long enough the noise is taken as
white with the variance of the input's first differences / 2. Sigma_n M is computed by FFT
(scipy.linalg.matmul_toeplitz), L^T by the adjoint in :mod:`.measured_input`.
"""

from __future__ import annotations

import numpy as np
from scipy import linalg

from ..conditioning.noise import noise_from_differences
from .block_jacobian import by_rows, edge_columns
from .joint_model import JointModel, SegmentData
from .measured_input import superposition_adjoint
from .uncertainty import autoregressive_autocorrelation, residual_autocorrelation

#: Fewest points before the edge for a coloured (autoregressive) noise estimate.
MIN_PRE_EDGE_POINTS = 32
#: The window's second half counts as a rest of the drive when its range is under this share of
#: the edge's step (a pulse's return or a further edge inside it is not noise; common practice, no source).
SETTLED_SHARE = 0.2


def input_noise_autocovariances(joint: JointModel) -> list[np.ndarray]:
    """Autocovariance gamma(0..n_i-1) of the normalised input noise of every edge i, at the fit's resolution.

    The drive's noise is one process over the record (the generator's and the scope channel's),
    so it is estimated once for each group of edges of the same direction and bin width, from
    the rests of all of them together: their points before the edge, and (unbinned) the second
    half of each window where the drive rests there too (its range under SETTLED_SHARE of the
    edge's step; a straight line taken out of each). The larger long-run variance of the two
    pooled estimates is kept. One edge's rests hold a few hundred points, so an estimate per
    edge varied from edge to edge and the larger of two such overstated the noise; pooled, a
    square wave of hundreds of edges also needs one autoregressive model, not hundreds.

    The before and after rests are kept apart because a drive rounded to codes with noise below
    one code has noise that depends on where its level sits between two codes (a level near a
    code's middle rarely flickers, one near its edge often does), so the level before the edge
    can understate the noise at the level after it, which drives most of the window (Widrow &
    Kollar, Quantization Noise, Cambridge UP 2008, ch. 4, from memory: the rounding error is
    not independent of the signal when the noise is under a code). A group with no rest at all
    takes white noise from each edge's first differences.
    """
    groups: dict[tuple[float, int], list[int]] = {}
    rests = [_rests(joint.data[i]) for i in range(len(joint.data))]
    for i, d in enumerate(joint.data):
        groups.setdefault((rests[i][2], d.bin_size), []).append(i)
    out: list[np.ndarray] = [np.zeros(0)] * len(joint.data)
    for members in groups.values():
        n = max(joint.data[i].u.size for i in members)
        pooled = [_rest_autocovariance(pieces, n) for pieces in
                  ([rests[i][0] for i in members if rests[i][0] is not None],
                   [rests[i][1] for i in members if rests[i][1] is not None]) if pieces]
        if pooled:
            gamma = max(pooled, key=lambda g: g[0] + 2 * g[1:].sum())
            for i in members:
                out[i] = gamma[:joint.data[i].u.size]
            continue
        for i in members:  # white noise from the first differences (their median ignores the edge)
            gamma = np.zeros(joint.data[i].u.size)
            sigma = noise_from_differences(joint.data[i].u)
            if np.isfinite(sigma):
                gamma[0] = sigma ** 2
            out[i] = gamma
    return out


def _rests(d: SegmentData) -> tuple[np.ndarray | None, np.ndarray | None, float]:
    """One edge's rests of the drive, each None when it does not count as one: its points before
    the edge, and the second half of its window (unbinned) with a straight line taken out; and
    the sign of the edge's step."""
    n = d.u.size
    before = d.u[d.u_initial_weights > 0] if d.u_initial_weights is not None else np.zeros(0)
    late = d.u[n // 2:]
    initial = d.u_initial if d.u_initial is not None else float(d.u[0])
    step = float(np.mean(late)) - initial
    rest_after = None
    if d.bin_size == 1 and late.size >= MIN_PRE_EDGE_POINTS and float(np.ptp(late)) < SETTLED_SHARE * abs(step):
        # a slow drift of the level (a loaded generator settling) is not noise: a line is taken out
        k = np.arange(late.size, dtype=float)
        rest_after = late - np.polyval(np.polyfit(k, late, 1), k)
    return (before if before.size >= MIN_PRE_EDGE_POINTS else None), rest_after, float(np.sign(step))


def _rest_autocovariance(rests: list[np.ndarray], n: int) -> np.ndarray:
    """Autocovariance gamma(0..n-1) of the noise of stretches where the drive rests, pooled:
    their variance about each one's mean and an autoregressive model of their autocorrelation
    (Yule-Walker, order by AIC)."""
    gamma = np.zeros(n)
    centred = [r - r.mean() for r in rests]
    points = sum(e.size for e in centred)
    var = sum(float(e @ e) for e in centred) / max(points - len(centred), 1)
    max_lag = int(min(max(e.size for e in centred) // 4, 200))
    rho = residual_autocorrelation(centred, max_lag)
    model_rho, _ = autoregressive_autocorrelation(rho, points, max_lag=min(n - 1, 4 * max_lag) or 1)
    m = min(model_rho.size, n)
    gamma[:m] = var * model_rho[:m]
    return gamma


def input_noise_covariance(joint: JointModel, jacobian: np.ndarray, bread: np.ndarray,
                           values: dict[str, float]) -> np.ndarray:
    """V_input (see the module docstring) over the fit's varied parameters.

    jacobian: unweighted d(model)/d(parameter) at the optimum, (n, p).
    bread: (J^T W^2 J)^-1, (p, p). values: the fitted internal values.
    Returns a (p, p) covariance (zeros outside measured-input mode).
    """
    p = jacobian.shape[1]
    extra = np.zeros((p, p))
    if not joint.measured_input or p == 0:
        return extra
    gain = float(values.get("gain", 0.0))
    shape = joint.shape_scaled(values)
    dc = getattr(joint.form, "final_value", 1.0)
    w2 = joint.weights ** 2
    jacobian = by_rows(jacobian)
    gammas = input_noise_autocovariances(joint)
    for i, d in enumerate(joint.data):
        lo, hi = joint.bounds[i], joint.bounds[i + 1]
        n = hi - lo
        kernel = joint.kernel_for(shape, d.dt)  # the longest edge's: its first n + 1 values serve
        weights = d.u_initial_weights if d.u_initial_weights is not None else np.eye(1, n)[0]
        cols, block = edge_columns(jacobian, lo, hi)  # the columns that move this edge
        m = superposition_adjoint(kernel, dc, weights, w2[lo:hi, None] * block)
        gamma = gammas[i]
        if not np.any(gamma):
            continue
        sm = linalg.matmul_toeplitz(gamma, m, check_finite=False)
        extra[np.ix_(cols, cols)] += gain * gain * (m.T @ sm)
    return bread @ extra @ bread
