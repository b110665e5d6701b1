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
The noise's autocovariance is estimated from the input's points before the
edge (where the input is at rest), smoothed by an autoregressive model
(Yule-Walker, order by AIC) so that its long-run variance is stable; with
too few points before the edge the noise is taken as white with the variance
of the input's first differences / 2. Sigma_n M is computed by FFT
(scipy.linalg.matmul_toeplitz), L^T by the adjoint in :mod:`.measured_input`.
"""

from __future__ import annotations

import numpy as np
from scipy import linalg

from ..conditioning.noise import noise_from_differences
from .block_jacobian import by_rows, edge_columns
from .joint_model import JointModel
from .measured_input import superposition_adjoint
from .uncertainty import autoregressive_autocorrelation, residual_autocorrelation

#: Fewest points before the edge for a coloured (autoregressive) noise estimate.
MIN_PRE_EDGE_POINTS = 32
#: The window's second half counts as a rest of the drive when its range is under this share of
#: the edge's step (a pulse's return or a further edge inside it is not noise; common practice, no source).
SETTLED_SHARE = 0.2


def input_noise_autocovariance(joint: JointModel, i: int) -> np.ndarray:
    """Autocovariance gamma(0..n-1) of the normalised input noise of edge i at the fit's resolution.

    Estimated where the drive rests: before the edge, and (unbinned) over the second half of
    the window when the drive rests there too (its range under SETTLED_SHARE of the edge's
    step; a straight line taken out); the larger long-run variance of the two is kept. A
    drive rounded to codes with noise below one code has noise that depends on where its
    level sits between two codes (a level near a code's middle rarely flickers, one near
    its edge often does), so the level before the edge can understate the noise at the
    level after it, which drives most of the window (Widrow & Kollar, Quantization Noise, Cambridge UP 2008, ch. 4, from memory:
    the rounding error is not independent of the signal when the noise is under a code).
    """
    d = joint.data[i]
    n = d.u.size
    before = d.u[d.u_initial_weights > 0] if d.u_initial_weights is not None else np.zeros(0)
    rests = [before] if before.size >= MIN_PRE_EDGE_POINTS else []
    after = d.u[n // 2:] if d.bin_size == 1 else np.zeros(0)
    initial = d.u_initial if d.u_initial is not None else (float(d.u[0]) if n else 0.0)
    step = abs(float(np.mean(after)) - initial) if after.size else 0.0
    if after.size >= MIN_PRE_EDGE_POINTS and float(np.ptp(after)) < SETTLED_SHARE * step:
        # a slow drift of the level (a loaded generator settling) is not noise: a line is taken out
        k = np.arange(after.size, dtype=float)
        rests.append(after - np.polyval(np.polyfit(k, after, 1), k))
    if rests:
        return max((_rest_autocovariance(rest, n) for rest in rests), key=lambda g: g[0] + 2 * g[1:].sum())
    gamma = np.zeros(n)
    # white noise from the first differences (the one estimator; its median ignores the edge itself)
    sigma = noise_from_differences(d.u)
    if np.isfinite(sigma):
        gamma[0] = sigma ** 2
    return gamma


def _rest_autocovariance(rest: np.ndarray, n: int) -> np.ndarray:
    """Autocovariance gamma(0..n-1) of the noise of a stretch where the drive rests: its
    variance and an autoregressive model of its autocorrelation (Yule-Walker, order by AIC)."""
    gamma = np.zeros(n)
    e = rest - rest.mean()
    var = float(e @ e) / max(e.size - 1, 1)
    max_lag = int(min(e.size // 4, 200))
    rho = residual_autocorrelation([e], max_lag)
    model_rho, _ = autoregressive_autocorrelation(rho, e.size, max_lag=min(n - 1, 4 * max_lag) or 1)
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
    for i, d in enumerate(joint.data):
        lo, hi = joint.bounds[i], joint.bounds[i + 1]
        n = hi - lo
        kernel = joint.kernel_for(shape, d.dt)  # the longest edge's: its first n + 1 values serve
        weights = d.u_initial_weights if d.u_initial_weights is not None else np.eye(1, n)[0]
        cols, block = edge_columns(jacobian, lo, hi)  # the columns that move this edge
        m = superposition_adjoint(kernel, dc, weights, w2[lo:hi, None] * block)
        gamma = input_noise_autocovariance(joint, i)
        if not np.any(gamma):
            continue
        sm = linalg.matmul_toeplitz(gamma, m, check_finite=False)
        extra[np.ix_(cols, cols)] += gain * gain * (m.T @ sm)
    return bread @ extra @ bread
