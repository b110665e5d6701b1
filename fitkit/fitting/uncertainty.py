"""Honest 95 % intervals: Student-t covariance intervals, a correction for
correlated residuals, profile-likelihood intervals where the objective is
asymmetric, and the delta method for derived quantities.

Correlated residuals (scope noise is band-limited and quantised) make the
plain covariance ``s^2 (J^T J)^-1`` too small. The correction used here is an
autocorrelation-consistent sandwich covariance

    V = B (sum_k w_k gamma(k) C(k)) B,   B = (J^T J)^-1,
    C(k) = sum_t J_t J_{t+k}^T (within each edge),

with gamma(k) the residual autocovariance (stationary noise assumed) taken
from an autoregressive model of the residuals fitted by Yule-Walker with its
order chosen by AIC, summed out to the lag where it has died away. (The
sandwich form is the heteroskedasticity-and-autocorrelation-consistent
covariance of Newey & West, Econometrica 55 (1987) 703-708; using an AR model
for the autocovariance instead of a truncated, kernel-weighted sample one is
the "VARHAC" approach of den Haan & Levin, Handbook of Statistics 15 (1997)
299-342, from memory.) It is applied only
when a Ljung-Box portmanteau test (Ljung & Box, Biometrika 65 (1978) 297-303)
finds the residuals correlated at the 1 % level, and it never narrows an
interval, so under white noise the intervals stay the textbook ones.

The autoregressive model (:func:`autoregressive_model`) and the noise
autocovariance with the projection bias added back
(:func:`noise_autocovariance`) also give the whitening filter of the
generalised least-squares refit in :mod:`.whitening`.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Callable, Mapping, Sequence

import numpy as np
from scipy import special

from .edge_blocks import EdgeBatch, edge_batches

#: Ljung-Box test level and number of lags.
LJUNG_BOX_ALPHA = 0.01
LJUNG_BOX_LAGS = 10
#: Passes of the projection-bias correction of the residual autocovariance.
PROJECTION_PASSES = 2
#: A positive quantity is "not determined" when the standard error of its log exceeds this.
MAX_LOG_STDERR = 1.0


def t_quantile(dof: int, level: float = 0.95) -> float:
    """Two-sided Student-t quantile for ``dof`` degrees of freedom (scipy.special.stdtrit,
    the inverse of the t distribution function; the same as scipy.stats.t.ppf)."""
    return float(special.stdtrit(max(int(dof), 1), 0.5 + level / 2.0))


@dataclass(frozen=True)
class Correction:
    """What was done about correlated residuals.

    covariance: the covariance to use (equal to the plain one when not applied).
    widening: per-parameter factor sqrt(V_jj / cov_jj) applied (>= 1).
    lag1: lag-1 autocorrelation of the residuals.
    correlation_lags: lag to which the modelled autocorrelation was summed.
    applied: whether the sandwich covariance replaced the plain one.
    description: plain words for FitDiagnostics.correction.
    variance_ratio: long-run variance of the residuals over their variance,
        1 + 2 sum_k rho(k) (>= 1): the factor n / n_effective.
    dof: effective degrees of freedom n_effective - p for the t quantile
        (None when not applied: use n - p).
    unevaluated: the residuals were found correlated but the sandwich could
        not be evaluated, so the plain covariance stands (not applied).
    """

    covariance: np.ndarray
    widening: np.ndarray
    lag1: float
    correlation_lags: int
    applied: bool
    description: str
    variance_ratio: float = 1.0
    dof: float | None = None
    unevaluated: bool = False


def residual_autocorrelation(pieces: Sequence[np.ndarray], max_lag: int) -> np.ndarray:
    """Pooled autocorrelation rho(0..max_lag) of residual pieces (lags within each piece).

    The lagged sums are taken by FFT (zero-padded, so no wrap-around): O(n log n).
    """
    pieces = [np.asarray(p, dtype=float) for p in pieces if len(p) > 1]
    rho = np.zeros(max_lag + 1)
    rho[0] = 1.0
    acc = np.zeros(max_lag + 1)
    for p in pieces:
        acc += _lagged_sums(p, max_lag)
    if not acc[0] > 0:
        return rho
    return acc / acc[0]


def _lagged_sums(x: np.ndarray, max_lag: int) -> np.ndarray:
    """sum_t x[t] x[t + k] for k = 0..max_lag (zero beyond the length), by FFT."""
    out = np.zeros(max_lag + 1)
    m = min(max_lag, x.size - 1) + 1
    size = 1 << int(math.ceil(math.log2(max(2 * x.size, 2))))
    spec = np.fft.rfft(x, size)
    out[:m] = np.fft.irfft(spec.real ** 2 + spec.imag ** 2, size)[:m]
    return out


def white_noise_shortfall(jacobian, bounds: Sequence[int], bread: np.ndarray, max_lag: int,
                          batches: Sequence[EdgeBatch] | None = None) -> np.ndarray:
    """How far below zero the pooled residual autocorrelation lies at lags
    0..min(max_lag, LJUNG_BOX_LAGS) when the noise is white, for the test of
    :func:`ljung_box_correlated` (zero beyond): residuals r = (I - P) e of
    white noise have E[sum_t r_t r_(t+k)] = -s^2 sum_t P[t, t+k] for k >= 1
    and s^2 (n - p) at k = 0, so a fit with many parameters per edge (a
    square wave's levels and delays) leaves its residuals slightly negatively
    correlated; the test would take that for correlated noise.
    """
    n, p = jacobian.shape
    lags = min(max_lag, LJUNG_BOX_LAGS)
    batches = edge_batches(jacobian, bounds) if batches is None else batches
    traces = sum((batch.hat_lag_sums(bread, lags) for batch in batches),
                 np.zeros(lags + 1))
    out = np.zeros(max_lag + 1)
    # sum_t P[t, t] is p for a well-conditioned fit; far from it, bread is not
    # its inverse to working precision and no shortfall is claimed
    if abs(traces[0] - p) <= 0.01 * p:
        out[1:lags + 1] = traces[1:] / max(n - p, 1)
    return out


def ljung_box_correlated(rho: np.ndarray, n: int, lags: int = LJUNG_BOX_LAGS,
                         alpha: float = LJUNG_BOX_ALPHA) -> bool:
    """Ljung-Box test: True when the residuals are autocorrelated at level ``alpha``."""
    m = min(lags, rho.size - 1, max(n // 5, 1))
    if m < 1:
        return False
    k = np.arange(1, m + 1)
    q = n * (n + 2) * np.sum(rho[1:m + 1] ** 2 / (n - k))
    return bool(q > special.chdtri(m, alpha))  # upper-tail chi-square quantile


@dataclass(frozen=True)
class AutoregressiveModel:
    """An autoregressive model x[t] = sum_k phi[k] x[t-1-k] + e[t] of a stationary series.

    coefficients: phi[0..p-1] of the chosen order p (Yule-Walker).
    partial: the Yule-Walker predictors of every lower order, ``partial[m]`` of
        length m for m = 0..p (``partial[p]`` equals ``coefficients``).
    innovation: innovation variance over the series' variance, for every order
        0..p (``innovation[0]`` = 1); decreasing.
    """

    coefficients: np.ndarray
    partial: tuple[np.ndarray, ...]
    innovation: np.ndarray

    @property
    def order(self) -> int:
        return int(self.coefficients.size)

    @property
    def stationary(self) -> bool:
        roots = np.roots(np.concatenate([[1.0], -self.coefficients]))
        return not (roots.size and np.max(np.abs(roots)) >= 0.999)


def autoregressive_model(rho: np.ndarray, n: int, max_order: int = 24) -> AutoregressiveModel:
    """The AR model of a series from its autocorrelation ``rho``: Yule-Walker
    coefficients, order 1..max_order (at most n // 10) chosen by AIC
    (n ln(innovation variance) + 2 order).

    The Yule-Walker equations of all orders are solved by the Levinson-Durbin
    recursion (Levinson, J. Math. Phys. 25 (1947) 261-278; Durbin, Rev. Inst.
    Int. Stat. 28 (1960) 233-244), which also gives the lower-order predictors
    that whitening needs at the start of a record.
    """
    max_order = int(max(1, min(max_order, rho.size - 1, n // 10)))
    partial = [np.zeros(0)]
    innovation = [1.0]
    best_aic, best_order = math.inf, 1
    phi = np.zeros(0)
    for order in range(1, max_order + 1):
        # reflection coefficient of the next order (Levinson-Durbin step)
        k = (rho[order] - float(phi @ rho[order - 1:0:-1])) / innovation[-1] if order > 1 else rho[1]
        if not abs(k) < 1.0:
            break
        phi = np.concatenate([phi - k * phi[::-1], [k]])
        v = innovation[-1] * (1.0 - k * k)
        if not v > 0:
            break
        partial.append(phi)
        innovation.append(v)
        aic = n * math.log(v) + 2 * order
        if aic < best_aic:
            best_aic, best_order = aic, order
    best_order = min(best_order, len(partial) - 1) or 1
    if len(partial) < 2:  # not even order 1 is admissible (|rho(1)| >= 1): a degenerate series
        return AutoregressiveModel(np.zeros(1), (np.zeros(0), np.zeros(1)), np.array([1.0, 1.0]))
    return AutoregressiveModel(partial[best_order], tuple(partial[:best_order + 1]),
                               np.array(innovation[:best_order + 1]))


def autoregressive_autocorrelation(rho: np.ndarray, n: int, max_order: int = 24,
                                   max_lag: int | None = None) -> tuple[np.ndarray, int]:
    """Autocorrelation implied by an AR model of the residuals, and the model order.

    The model is :func:`autoregressive_model` (Yule-Walker, order by AIC); the
    implied autocorrelation is computed from the model's impulse response out to
    ``max_lag``. This smooth, model-based autocorrelation replaces the noisy
    sample autocorrelation at long lags (the AR-based "VARHAC" idea of den Haan
    & Levin, Handbook of Statistics 15 (1997) 299-342, from memory).
    """
    model = autoregressive_model(rho, n, max_order)
    max_lag = max_lag or rho.size - 1
    if not model.stationary:  # not stationary: keep the sample estimate
        return rho.copy(), model.order
    acf = ar_autocovariance(model.coefficients, max_lag)
    return acf / acf[0], model.order


def ar_autocovariance(phi: np.ndarray, max_lag: int) -> np.ndarray:
    """sum_t h[t] h[t + k], k = 0..max_lag, of the impulse response h of the
    stationary model x[t] = e[t] + sum_i phi[i] x[t-1-i] (the autocovariance of
    x for unit innovations), as the inverse FFT of its power spectrum
    1 / |1 - sum_i phi[i] exp(-j w (i + 1))|^2 (Box & Jenkins, Time Series
    Analysis, 3rd ed., 1994, section 3.2, from memory). The FFT is long enough
    that the slowest pole's decay, r^N, is below 1e-16 of the sum (no aliasing)."""
    roots = np.roots(np.concatenate([[1.0], -phi])) if phi.size else np.zeros(0)
    r = float(np.max(np.abs(roots))) if roots.size else 0.0
    decay = math.log(1e-16 * (1.0 - r)) / math.log(r) if 0.0 < r < 1.0 else 0.0
    size = 1 << int(math.ceil(math.log2(max(2 * (max_lag + 1), max_lag + 1 + decay, 64))))
    spectrum = np.fft.rfft(np.concatenate([[1.0], -phi]), size)
    return np.fft.irfft(1.0 / (spectrum.real ** 2 + spectrum.imag ** 2), size)[:max_lag + 1]


def lagged_products(u: np.ndarray, v: np.ndarray, max_lag: int) -> np.ndarray:
    """D_k = sum_t sum_j u[t, j] v[t + k, j] for k = 0..max_lag (by FFT)."""
    n = u.shape[0]
    size = 1 << int(math.ceil(math.log2(max(2 * n, 2))))
    spec = np.conj(np.fft.rfft(u, size, axis=0)) * np.fft.rfft(v, size, axis=0)
    lagged = np.fft.irfft(spec, size, axis=0).sum(axis=1)
    out = np.zeros(max_lag + 1)
    m = min(max_lag, n - 1) + 1
    out[:m] = lagged[:m]
    return out


def projection_bias(gamma: np.ndarray, jacobian: np.ndarray, bounds: Sequence[int],
                    bread: np.ndarray, max_lag: int, batches: Sequence[EdgeBatch] | None = None) -> np.ndarray:
    """How much the pooled residual autocovariance falls short of the noise's.

    Residuals are r = (I - P) e with P = J (J^T J)^-1 J^T, so for noise of
    covariance Sigma, E[sum_t r_t r_{t+k}] = sum_t [(I-P) Sigma (I-P)]_{t,t+k}.
    Returns (1/n) sum_t [P Sigma + Sigma P - P Sigma P]_{t,t+k} for k = 0..max_lag,
    with Sigma the Toeplitz matrix of ``gamma`` within each edge: adding it to
    the residual autocovariance removes the bias the fit's own parameters
    cause (they absorb the slow part of the noise, which matters most here).
    """
    n, p = jacobian.shape
    # Edge by edge over the columns that move it (a sparse Jacobian of many
    # edges: a few per edge), edges of similar length in one batch
    # (:mod:`.edge_blocks`); with u = J bread and v = Sigma J, the terms are
    # sums over those columns only, and u w u^T = J (bread w bread) J^T.
    batches = edge_batches(jacobian, bounds) if batches is None else batches
    w = np.zeros((p, p))
    sigma_j = []
    for batch in batches:
        v = batch.toeplitz_times(gamma)
        batch.add_inner_products(v, w)
        sigma_j.append(v)
    q = bread @ w @ bread
    bias = np.zeros(max_lag + 1)
    for batch, v in zip(batches, sigma_j):
        u, v = batch.flat(batch.times_blocks(bread)), batch.flat(v)
        bias += lagged_products(u, v, max_lag) + lagged_products(v, u, max_lag) \
            - lagged_products(batch.flat(batch.times_blocks(q)), batch.flat(batch.blocks), max_lag)
    return bias / n


@dataclass(frozen=True)
class NoiseAutocovariance:
    """The noise's autocovariance as estimated from a fit's residuals.

    sample_rho: pooled sample autocorrelation of the residuals, lags 0..max_lag.
    autocovariance: the residual autocovariance with the projection bias added
        back (:func:`projection_bias`): the estimate of the noise's own.
    model_rho: autocorrelation of the AR model of ``autocovariance`` (order ``order``).
    model_autocovariance: model_rho scaled to the noise variance.
    """

    sample_rho: np.ndarray
    autocovariance: np.ndarray
    model_rho: np.ndarray
    order: int
    model_autocovariance: np.ndarray


def noise_autocovariance(jacobian: np.ndarray, residual_pieces: Sequence[np.ndarray], bounds: Sequence[int],
                         bread: np.ndarray, max_lag: int, batches: Sequence[EdgeBatch] | None = None
                         ) -> NoiseAutocovariance:
    """Autocovariance of the noise from the residuals of a least-squares fit.

    The residual autocovariance falls short of the noise's by the projection
    bias (the fit's parameters absorb part of the slow noise); it is added back
    in :data:`PROJECTION_PASSES` passes, each with the bias computed from the
    AR model of the previous estimate (:func:`autoregressive_autocorrelation`).
    jacobian: weighted Jacobian (n, p); bread: (J^T J)^-1; batches: its
    :func:`.edge_blocks.edge_batches` over ``bounds`` when already made.
    """
    batches = edge_batches(jacobian, bounds) if batches is None else batches
    n = int(sum(len(r) for r in residual_pieces))
    p = jacobian.shape[1]
    rho = residual_autocorrelation(residual_pieces, max_lag)
    gamma0 = sum(float(np.dot(r, r)) for r in residual_pieces) / n
    model_rho, order = autoregressive_autocorrelation(rho, n, max_lag=max_lag)
    gamma = model_rho * gamma0 * n / max(n - p, 1)
    acov = rho * gamma0
    for _ in range(PROJECTION_PASSES):
        bias = projection_bias(gamma, jacobian, bounds, bread, max_lag, batches)
        corrected_acov = rho * gamma0 + bias
        if not corrected_acov[0] > 0:
            break
        acov = corrected_acov
        model_rho, order = autoregressive_autocorrelation(acov / acov[0], n, max_lag=max_lag)
        gamma = model_rho * acov[0]
    return NoiseAutocovariance(rho, acov, model_rho, order, gamma)


#: How the description of a correction that could not be evaluated (Correction.unevaluated) begins.
NOT_EVALUATED = "none: the residuals are correlated"


def correlated_residual_correction(jacobian: np.ndarray, residual_pieces: Sequence[np.ndarray],
                                   jac_pieces_bounds: Sequence[int], covariance: np.ndarray,
                                   s2: float, mode: str = "auto") -> Correction:
    """Widen ``covariance`` for autocorrelated residuals (see module docstring).

    mode: "auto" (test, then correct when correlated), "on" (always compute the
    sandwich), "off" (never).
    """
    p = covariance.shape[0]
    ones = np.ones(p)
    n = int(sum(len(r) for r in residual_pieces))
    max_lag = max(1, min(n // 2, 2000, min(len(r) for r in residual_pieces) - 2))
    rho = residual_autocorrelation(residual_pieces, max_lag)
    lag1 = float(rho[1]) if rho.size > 1 else 0.0
    none = Correction(covariance, ones, lag1, 0, False, "none (residuals consistent with white noise)")
    # the residuals are correlated but the sandwich cannot be evaluated (a combination of parameters
    # the data do not determine leaves the bread without working precision): not "white noise"
    failed = Correction(covariance, ones, lag1, 0, False,
                        f"{NOT_EVALUATED} (lag-1 autocorrelation {lag1:.2f}): the sandwich covariance could "
                        "not be evaluated, so the intervals are not widened for it", unevaluated=True)
    if mode == "off":
        return Correction(covariance, ones, lag1, 0, False, "none (correction switched off)")
    if p == 0 or not np.all(np.isfinite(covariance)):
        return none
    bread = covariance / s2
    batches = edge_batches(jacobian, jac_pieces_bounds)  # once, for every sum over the edges below
    if mode == "auto" and not ljung_box_correlated(
            rho + white_noise_shortfall(jacobian, jac_pieces_bounds, bread, rho.size - 1, batches), n):
        return none
    noise = noise_autocovariance(jacobian, residual_pieces, jac_pieces_bounds, bread, max_lag, batches)
    model_rho, order, gamma = noise.model_rho, noise.order, noise.model_autocovariance
    # lags beyond which the model autocorrelation is negligible
    significant = np.nonzero(np.abs(model_rho) > 1e-3)[0]
    m_max = int(min(max_lag, significant[-1] if significant.size else 1))
    # meat = sum over edges of J^T Sigma J, Sigma the Toeplitz matrix of gamma
    # cut at m_max (= gamma_0 J^T J + sum_k gamma_k (C(k) + C(k)^T)), by FFT
    meat = np.zeros((p, p))
    for batch in batches:
        batch.add_inner_products(batch.toeplitz_times(gamma[:m_max + 1]), meat)
    meat = 0.5 * (meat + meat.T)
    variance_ratio = max(1.0, 1.0 + 2.0 * float(np.sum(model_rho[1:m_max + 1])))
    n_eff = n / variance_ratio
    dof = max(n_eff - p, 1.0)
    with np.errstate(all="ignore"):
        sandwich = bread @ meat @ bread
        ratio = np.diag(sandwich) / np.diag(covariance)
        if not np.all(np.isfinite(ratio)) or np.any(ratio <= 0):
            return failed
        # Never narrow: bring each variance up to at least the plain one.
        lift = np.sqrt(np.maximum(1.0, 1.0 / ratio))
        corrected = sandwich * np.outer(lift, lift)
        widening = np.sqrt(np.diag(corrected) / np.diag(covariance))
    if not np.all(np.isfinite(corrected)):
        return failed
    text = (f"autocorrelation-consistent sandwich covariance (residual autocorrelation from an "
            f"order-{order} autoregressive model, to lag {m_max}; lag-1 autocorrelation {lag1:.2f})")
    return Correction(corrected, widening, lag1, m_max, True, text, variance_ratio, dof)


def log_interval(value: float, log_stderr: float, tq: float) -> tuple[float, float]:
    """Interval of a positive quantity from the standard error of its natural log."""
    return value * math.exp(-tq * log_stderr), value * math.exp(tq * log_stderr)


def objective_is_asymmetric(rss_of: Callable[[np.ndarray], float], theta: np.ndarray,
                            covariance: np.ndarray, index: int, s2: float, tq: float,
                            tolerance: float = 0.25) -> bool:
    """Cheap check of the quadratic approximation along one parameter.

    Steps to theta +- tq * cov[:, j] / sigma_j (where the linearised profile
    of the sum of squares rises by tq^2 s^2) and compares the actual rise at
    both ends; True when either differs from the linear prediction by more
    than ``tolerance`` (relative).
    """
    sigma = math.sqrt(covariance[index, index])
    if not (math.isfinite(sigma) and sigma > 0):
        return False
    delta = tq * covariance[:, index] / sigma
    rss0 = rss_of(theta)
    expected = tq * tq * s2
    for sign in (1.0, -1.0):
        rise = (rss_of(theta + sign * delta) - rss0) / expected
        if not math.isfinite(rise) or abs(rise - 1.0) > tolerance:
            return True
    return False


def delta_method(func: Callable[[np.ndarray], Mapping[str, float]], theta: np.ndarray,
                 covariance: np.ndarray, rel_step: float = 1e-3
                 ) -> dict[str, tuple[float, float, np.ndarray]]:
    """Propagate ``covariance`` of ``theta`` through ``func`` (vector -> {name: value}).

    Returns {name: (value, variance, gradient)} using a central-difference
    gradient (keeps correlations: var = g Sigma g^T).
    """
    base = dict(func(theta))
    grads = {k: np.zeros(theta.size) for k in base}
    for j in range(theta.size):
        h = rel_step * max(abs(theta[j]), 1.0)
        up, dn = theta.copy(), theta.copy()
        up[j] += h
        dn[j] -= h
        fu, fd = func(up), func(dn)
        for k in base:
            grads[k][j] = (float(fu.get(k, math.nan)) - float(fd.get(k, math.nan))) / (2 * h)
    out = {}
    for k, v in base.items():
        g = grads[k]
        var = float(g @ covariance @ g) if np.all(np.isfinite(g)) else math.nan
        out[k] = (float(v), var, g)
    return out
