"""Generalised least squares under correlated noise: prewhitening by an AR model.

Band-limited scope noise makes neighbouring samples alike. Ordinary least
squares then stays unbiased but wastes information: it weights the slow,
strongly correlated part of the noise as if every sample were new. The
efficient estimate minimises ``e^T Sigma^-1 e`` (generalised least squares,
Aitken, Proc. R. Soc. Edinburgh 55 (1935) 42-48, from memory), with Sigma the noise
covariance. Sigma is not known, so it is estimated (feasible GLS): an
autoregressive model of the residuals of the first, ordinary fit

    e[t] = sum_k a_k e[t-k] + u[t],   u white,

gives a filter that turns the residuals into (nearly) white innovations u.
The fit is then repeated on the filtered problem: data and model pass through
the same linear filter, so the levels are still solved linearly (variable
projection on whitened columns) and the sum of squares of the innovations is
minimised. This is the prewhitening procedure of Cochrane & Orcutt, JASA 44
(1949) 32-61, for a model of any order, with the first p points of every
edge kept (not dropped): there the predictor of each lower order 0..p-1
(from the Levinson-Durbin recursion) is used and the innovation scaled to the
full-order variance, which makes the filter the exact Cholesky factor of the
inverse covariance of the AR(p) process (the treatment of the first
observation of Prais & Winsten, Cowles Commission Discussion Paper Stat. 383,
1954, from memory, extended to order p; the Durbin-Levinson recursion is in
Brockwell & Davis, Time Series: Theory and Methods, 2nd ed., Springer 1991,
section 5.2, from memory). The filter runs
within each edge's contiguous piece, never across pieces.

Applied only where it is valid: uniformly sampled, unbinned segments (bin
averages already average the noise), ideal-step mode (the measured input's
own noise is propagated separately in :mod:`.input_noise`, which assumes the
ordinary fit).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, replace
from functools import cached_property
from typing import Callable, Mapping, Sequence

import numpy as np
from scipy import linalg

from ..errors import FitError
from .block_jacobian import dense, weighted
from .least_squares import ModelFit, covariance_from_jacobian, model_fit_at
from .joint_model import JointModel
from .projection import least_squares_search, nonlinear_names
from .uncertainty import (AutoregressiveModel, Correction, autoregressive_model, correlated_residual_correction,
                          noise_autocovariance)

#: Highest autoregressive order tried for the whitening filter.
MAX_WHITENING_ORDER = 20
#: Fewest points (all edges together) for a whitened fit: with fewer, the AR
#: model of the residuals is too uncertain and the GLS intervals come out too
#: narrow (first-order step at 40 dB SNR, band-limited noise as in
#: benchmarks/_common.py, 300 captures each: coverage of the 95 % intervals of
#: tau 85 % at 80 points, 86 % at 104, 91 % at 122, 94 % at 144).
MIN_WHITENING_POINTS = 140
#: Fewest points of one edge's piece.
MIN_PIECE_POINTS = 16
#: White noise added to the noise model, as a fraction of its variance, before
#: the AR model is fitted: it bounds the filter's gain where the noise has
#: almost no power (a steep low-pass without a white floor), which would
#: otherwise make the fit hang on a few samples.
WHITE_LOADING = 0.01
#: A whitened fit whose shape parameters moved from the ordinary fit by more
#: than this many of the ordinary fit's (corrected) standard errors has found
#: another minimum and is not used. Both estimates are consistent, and the
#: variance of their difference is V_ordinary - V_GLS (Hausman, Econometrica
#: 46 (1978) 1251-1271), less than V_ordinary: 6 standard errors is no chance.
MAX_SHIFT = 6.0
#: The check on the whitened residuals is named in the output when it widens an
#: interval by more than this fraction.
LEFT_OVER_NOTED = 0.01
#: Most edges of a whitened fit. Its search runs over every edge's delay with
#: the shape (cost growing with the square of the edges); a joint fit of more
#: edges keeps the ordinary fit, with the sandwich covariance for its correlated
#: residuals (honest intervals, somewhat wider than generalised least squares').
MAX_WHITENED_EDGES = 12
#: Sample intervals may differ by this fraction of the median and still count as uniform.
UNIFORM_TOLERANCE = 1e-3


@dataclass(frozen=True)
class Whitener:
    """The prewhitening filter of an autoregressive noise model (see the module docstring).

    model: the AR model (Yule-Walker coefficients, lower-order predictors).
    lag1: lag-1 autocorrelation of the residuals the model was fitted to.
    autocorrelation: the autocorrelation (lags 0..order at least) the model was fitted to.
    record_samples: samples of the separate noise record the model comes from
        (:mod:`.noise_record`); None when it was fitted to the fit's own residuals.
    """

    model: AutoregressiveModel
    lag1: float
    autocorrelation: np.ndarray | None = None
    record_samples: int | None = None

    @property
    def order(self) -> int:
        return self.model.order

    def apply(self, x: np.ndarray, bounds: Sequence[int]) -> np.ndarray:
        """Whiten ``x`` (shape (n,) or (n, k), one column per series) piece by piece.

        ``bounds`` are the piece boundaries (0 = bounds[0] < ... < bounds[-1] = n);
        the filter never reaches across a boundary.
        """
        x = np.asarray(x, dtype=float)
        # the prediction-error filter over the whole array at once, then each
        # piece's first p points replaced by their own start map (the filter's
        # reach across a boundary is confined to those points)
        out = self._prediction_errors(x)
        p = self.model.order
        for lo, hi in zip(bounds[:-1], bounds[1:]):
            m = min(p, hi - lo)
            out[lo:lo + m] = self._start[:m, :m] @ x[lo:lo + m]
        return out

    @cached_property
    def _start(self) -> np.ndarray:
        """(p, p) lower-triangular map of a piece's first p points to their innovations:
        row t is the order-t predictor error, scaled to the full-order variance."""
        model = self.model
        p = model.order
        start = np.zeros((p, p))
        for t in range(p):
            scale = math.sqrt(model.innovation[p] / model.innovation[t])
            start[t, t] = scale
            start[t, :t] = -scale * model.partial[t][::-1]
        return start

    def _prediction_errors(self, x: np.ndarray) -> np.ndarray:
        """x[t] - sum_k a_k x[t - k] along axis 0 (samples before the start taken as 0):
        the FIR filter [1, -a_1, ..., -a_p], as scipy.signal.lfilter runs it, in numpy."""
        y = x.copy()
        for k, a in enumerate(self.model.coefficients, start=1):
            if k < x.shape[0]:
                y[k:] -= a * x[:-k]
        return y


def whitening_applies(joint: JointModel, min_points: int = MIN_WHITENING_POINTS) -> bool:
    """True when prewhitening is valid for this joint model: ideal-step mode,
    at most :data:`MAX_WHITENED_EDGES` edges, unbinned points, uniformly
    sampled segments, at least ``min_points`` points
    (the default is for a noise model fitted to the residuals; a separate
    noise record needs none)."""
    if joint.measured_input or joint.y.size < min_points or len(joint.segments) > MAX_WHITENED_EDGES:
        return False
    for seg, d in zip(joint.segments, joint.data):
        if d.bin_size != 1 or d.y.size < MIN_PIECE_POINTS:
            return False
        dt = np.diff(np.asarray(seg.time, dtype=float))
        step = float(seg.sample_interval)
        if not step > 0 or float(np.max(np.abs(dt - step))) > UNIFORM_TOLERANCE * step:
            return False
    return True


def whitener_for_fit(joint: JointModel, fit: ModelFit, max_order: int = MAX_WHITENING_ORDER) -> Whitener:
    """The whitening filter for the noise under an ordinary fit's residuals.

    The noise autocovariance is the residuals' with the projection bias added
    back (:func:`.uncertainty.noise_autocovariance`: the fit absorbs part of
    the slow noise, and a filter built from the bare residuals would whiten
    too little of it); its AR model (Yule-Walker, order by AIC, at most
    ``max_order``) gives the filter.
    """
    w = joint.weights
    pieces = joint.split(w * fit.residual)
    n = int(sum(len(r) for r in pieces))
    max_lag = max(1, min(n // 2, 2000, min(len(r) for r in pieces) - 2))
    noise = noise_autocovariance(weighted(fit.jacobian, w), pieces, list(joint.bounds), fit.covariance / fit.s2,
                                 max_lag)
    rho = noise.autocovariance / noise.autocovariance[0]
    rho[0] += WHITE_LOADING
    rho /= rho[0]
    model = autoregressive_model(rho, n, max_order=min(max_order, max_lag))
    return Whitener(model, float(noise.sample_rho[1]) if noise.sample_rho.size > 1 else 0.0, rho)


@dataclass(frozen=True)
class WhitenedProblem:
    """The whitened least-squares problem at a fit's optimum.

    jacobian: whitened Jacobian W J (n, p); residual: whitened residuals W r;
    covariance: s2 ((W J)^T (W J))^-1 with s2 = |W r|^2 / dof;
    dof: n - p - q, q the order of the AR model (its coefficients were
        fitted to the same residuals);
    singular: the whitened Jacobian is rank deficient.
    """

    jacobian: np.ndarray
    residual: np.ndarray
    covariance: np.ndarray
    s2: float
    dof: int
    singular: bool


def whitened_problem(joint: JointModel, fit: ModelFit, whitener: Whitener) -> WhitenedProblem:
    """Whitened Jacobian, residuals and GLS covariance of ``fit`` (see :class:`WhitenedProblem`)."""
    w = joint.weights
    jac = whitener.apply(dense(weighted(fit.jacobian, w)), joint.bounds)
    res = whitener.apply(w * fit.residual, joint.bounds)
    # the AR coefficients cost degrees of freedom when fitted to these residuals
    dof = fit.dof - (whitener.order if whitener.record_samples is None else 0)
    s2 = float(res @ res) / dof if dof > 0 else math.nan
    cov, singular, _ = covariance_from_jacobian(jac, s2)
    return WhitenedProblem(jac, res, cov, s2, dof, singular)


def fit_whitened(joint: JointModel, start: ModelFit, fixed: Mapping[str, float], whitener: Whitener, *,
                 project: bool, tol: float, max_nfev: int) -> ModelFit:
    """Refit from ``start`` minimising the whitened sum of squares.

    project: levels solved linearly on whitened columns (variable projection,
    ideal-step mode); otherwise every varied parameter is searched. Returns the
    :class:`ModelFit` at the new optimum in the ordinary (unwhitened) terms of
    :func:`.least_squares.model_fit_at`: model, residuals, Jacobian; the GLS covariance
    comes from :func:`whitened_problem`.
    """
    if joint.measured_input:
        raise FitError("a whitened fit needs ideal-step mode", hint="fit measured-input captures without whitening")
    w = joint.weights
    bounds = joint.bounds
    varied = tuple(n for n in joint.names if n not in fixed)
    names = tuple(n for n in nonlinear_names(joint) if n not in fixed) if project else varied
    y_w = whitener.apply(w * joint.y, bounds)
    ones_w = whitener.apply(w, bounds)

    def values_and_model(theta: np.ndarray) -> tuple[dict[str, float], np.ndarray]:
        """All parameter values and the whitened model for the searched ``theta``."""
        vals = dict(start.values)
        vals.update(fixed)
        vals.update(zip(names, (float(v) for v in theta)))
        if project:
            levels, model_w = _whitened_levels(joint, vals, whitener, y_w, ones_w)
            vals.update(levels)
            return vals, model_w
        return vals, whitener.apply(w * joint.evaluate(None, **vals), bounds)

    def residual(theta: np.ndarray) -> np.ndarray:
        return y_w - values_and_model(theta)[1]

    theta0 = np.array([float(start.values[n]) for n in names])
    theta0, converged, message, nfev = least_squares_search(residual, theta0, joint.y.shape, tol=tol,
                                                             max_nfev=max_nfev)
    return model_fit_at(joint.evaluate, values_and_model(theta0)[0], varied, None, joint.y, w,
                        converged=converged, message=message, nfev=nfev)


def _whitened_levels(joint: JointModel, values: Mapping[str, float], whitener: Whitener,
                     y_w: np.ndarray, ones_w: np.ndarray) -> tuple[dict[str, float], np.ndarray]:
    """baseline_i and step_i minimising the whitened sum of squares of each edge, for
    the shape and delays in ``values``, and the whitened model with them. The
    whitening filter is linear, so the model's columns 1 and f_i are whitened
    and the levels solved by linear least squares on them."""
    shape = joint.shape_scaled(values)
    out: dict[str, float] = {}
    model_w = np.empty_like(y_w)
    for i in range(len(joint.data)):
        lo, hi = joint.bounds[i], joint.bounds[i + 1]
        w = joint.weights[lo:hi]
        f = joint.unit_response(i, shape, values.get(f"t0_{i}", 0.0)) * w
        # the previous edge's tail is a known part of the model (as in projection.projected_model)
        tail_w = whitener.apply(np.broadcast_to(joint.previous_tail(i, shape, values), w.shape) * w, [0, hi - lo])
        cols = np.column_stack([ones_w[lo:hi], whitener.apply(f, [0, hi - lo])])
        coef, *_ = np.linalg.lstsq(cols, y_w[lo:hi] - tail_w, rcond=None)
        out[f"baseline_{i}"], out[f"step_{i}"] = float(coef[0]), float(coef[1])
        model_w[lo:hi] = cols @ coef + tail_w
    return out, model_w


def whitened_correction(fit: ModelFit, whitener: Whitener, problem: WhitenedProblem, left: Correction,
                        ordinary: Correction, noise_dof: float = math.inf) -> Correction:
    """The :class:`.uncertainty.Correction` of a whitened fit.

    fit: the whitened fit (ordinary terms, but its ``covariance`` is the whitened problem's).
    problem: the whitened problem at its optimum.
    left: the correlated-residual check on the whitened residuals (its covariance
        is the GLS one, widened by a sandwich if correlation is left).
    ordinary: the correction of the first, ordinary fit (its lag-1
        autocorrelation and long-run variance ratio describe the noise).
    noise_dof: degrees of freedom of the GLS variances given the uncertainty of
        the noise model (:func:`standard_error_dof`).

    The t quantile's degrees of freedom are the fewest of: the whitened
    problem's, the ordinary fit's effective ones (unless the noise model comes
    from a separate record), those of the check on the whitened residuals, and
    ``noise_dof``.
    """
    cov = left.covariance
    with np.errstate(all="ignore"):
        widening = np.sqrt(np.diag(cov) / np.diag(fit.covariance))
    source = "" if whitener.record_samples is None else f" of the noise record ({whitener.record_samples} samples)"
    text = (f"generalised least squares: residuals whitened by an order-{whitener.order} autoregressive "
            f"model{source} (lag-1 autocorrelation {ordinary.lag1:.2f} before whitening, {left.lag1:.2f} after)")
    if left.applied and float(np.max(left.widening, initial=1.0)) > 1.0 + LEFT_OVER_NOTED:
        text += "; for the correlation left after whitening, " + left.description
    else:
        text += "; no correlation left after whitening"
    # the ordinary fit's effective degrees of freedom bound those of a noise
    # model fitted to its residuals, not those of a separate record's
    ordinary_dof = ordinary.dof if whitener.record_samples is None else None
    dof = min(d for d in (left.dof, ordinary_dof, problem.dof, noise_dof) if d is not None)
    return Correction(cov, widening, ordinary.lag1, ordinary.correlation_lags, True, text,
                      ordinary.variance_ratio, dof)


def standard_error_dof(joint: JointModel, fit: ModelFit, whitener: Whitener, n_samples: int) -> np.ndarray:
    """Effective degrees of freedom of each GLS variance, from the uncertainty of the noise model.

    The GLS variance of a parameter, V_j = s2 [((W J)^T W J)^-1]_jj, depends on
    the AR coefficients phi behind the filter W; estimated from one record,
    phi has the sampling covariance (v / n) R^-1 (v: innovation variance over
    the series' variance, R: the p x p autocorrelation matrix; the asymptotic
    distribution of the Yule-Walker estimator, Brockwell & Davis, Time Series:
    Theory and Methods, 2nd ed., Springer 1991, section 8.1, from memory).
    By the delta method var(ln V_j) = g^T (v / n) R^-1 g with g = d ln V_j / d phi
    (central differences, re-whitening J and the residuals), and V_j is then
    treated as a scaled chi-square variable with 2 / var(ln V_j) degrees of
    freedom (Satterthwaite, Biometrics Bulletin 2 (1946) 110-114). Low-pass
    noise makes the filter's gain at low frequencies, and with it the
    variance of the slow parameters, uncertain: these few degrees of freedom
    then set the t quantile.
    Returns one value per varied parameter (inf where the variance does not depend on phi).
    """
    model = whitener.model
    p = model.order
    k = len(fit.names)
    rho = whitener.autocorrelation
    if p == 0 or k == 0 or rho is None or rho.size <= p:
        return np.full(k, math.inf)
    w = joint.weights
    jac = dense(weighted(fit.jacobian, w))
    stacked = np.column_stack([jac, w * fit.residual])

    def log_variances(phi: np.ndarray) -> np.ndarray:
        trial = Whitener(AutoregressiveModel(phi, model.partial, model.innovation), whitener.lag1)
        white = trial.apply(stacked, joint.bounds)
        jw, rw = white[:, :k], white[:, k]
        cov, singular, _ = covariance_from_jacobian(jw, float(rw @ rw))
        return np.log(np.diag(cov)) if not singular else np.full(k, np.nan)

    phi = model.coefficients
    step = 1e-4
    grad = np.empty((p, k))
    for i in range(p):
        up, dn = phi.copy(), phi.copy()
        up[i] += step
        dn[i] -= step
        grad[i] = (log_variances(up) - log_variances(dn)) / (2 * step)
    try:
        phi_cov = (model.innovation[p] / n_samples) * np.linalg.inv(linalg.toeplitz(rho[:p]))
    except np.linalg.LinAlgError:
        return np.full(k, math.inf)
    var_log = np.einsum("ij,ik,kj->j", grad, phi_cov, grad)
    with np.errstate(divide="ignore", invalid="ignore"):
        return np.where(np.isfinite(var_log) & (var_log > 0), 2.0 / var_log, math.inf)


class WhitenedJointModel:
    """A joint model seen through the whitening filter, for what follows a whitened fit.

    Everything is the underlying joint model's (segments, data, scaling,
    bounds, ...) except the least-squares objective: ``y`` and ``evaluate``
    are the data and the model passed through the filter, with unit
    ``weights``, so that ``weights * (y - evaluate(...))`` is the whitened
    residual. The filter is scaled so that at the optimum the whitened sum of
    squares equals the ordinary one: the fit's ``s2`` then holds for both, and
    the checks on the objective (its symmetry, the profile likelihood) work on
    the objective that was minimised.
    """

    def __init__(self, joint: JointModel, whitener: Whitener, scale: float) -> None:
        self.unwhitened = joint
        self.whitener = whitener
        self.scale = scale
        self.y = scale * whitener.apply(joint.weights * joint.y, joint.bounds)
        self.weights = np.ones_like(joint.y)

    def evaluate(self, _x: object = None, **values: float) -> np.ndarray:
        """Whitened model over all points (scaled volts)."""
        joint = self.unwhitened
        return self.scale * self.whitener.apply(joint.weights * joint.evaluate(None, **values), joint.bounds)

    def __getattr__(self, name: str):
        if name.startswith("__") or name == "unwhitened":  # e.g. while unpickling
            raise AttributeError(name)
        return getattr(self.unwhitened, name)


def whitened_fit(joint: JointModel, fit: ModelFit, fixed: Mapping[str, float], ordinary: Correction,
                 correlation: str, *, project: bool, tol: float, max_nfev: int,
                 canonical: Callable[[ModelFit], ModelFit] = lambda f: f,
                 whitener: Whitener | None = None
                 ) -> tuple[JointModel | WhitenedJointModel, ModelFit, Correction]:
    """Feasible generalised least squares after an ordinary fit with correlated residuals.

    Builds the whitening filter from ``fit``'s residuals, refits, and checks
    the whitened residuals for correlation left over (the sandwich of
    :func:`.uncertainty.correlated_residual_correction`, always computed: it
    never narrows). ``canonical`` puts a refit's parameters in the form's
    canonical order.

    Returns (joint, fit, correction) to use: the :class:`WhitenedJointModel`,
    the refit (model, residuals and sum of squares in ordinary terms; its
    ``covariance`` and ``stderr`` those of the whitened problem) and the
    correction (its ``widening`` relative to that covariance); or ``joint``,
    ``fit`` and ``ordinary`` when the refit fails, is singular or lands far
    from ``fit`` (:data:`MAX_SHIFT`; said in the correction text).
    """
    if whitener is None:
        whitener = whitener_for_fit(joint, fit)
    refit = fit_whitened(joint, fit, fixed, whitener, project=project, tol=tol, max_nfev=max_nfev)
    if not refit.converged:
        return joint, fit, ordinary
    refit = canonical(refit)
    problem = whitened_problem(joint, refit, whitener)
    if problem.singular or refit.singular or refit.names != fit.names:
        return joint, fit, ordinary
    shape = [i for i, name in enumerate(fit.names) if name.startswith("log_")]
    with np.errstate(all="ignore"):
        shift = np.array([abs(refit.values[fit.names[i]] - fit.values[fit.names[i]]) for i in shape]) \
            / np.sqrt(np.diag(ordinary.covariance)[shape])
    if not np.all(shift <= MAX_SHIFT):  # also catches NaN
        text = (ordinary.description + "; a fit with the residuals whitened was tried and not used "
                "(it moved the shape far from the ordinary fit)")
        return joint, fit, Correction(ordinary.covariance, ordinary.widening, ordinary.lag1,
                                      ordinary.correlation_lags, ordinary.applied, text,
                                      ordinary.variance_ratio, ordinary.dof)
    left = correlated_residual_correction(problem.jacobian, joint.split(problem.residual), list(joint.bounds),
                                          problem.covariance, problem.s2, "on" if correlation != "off" else "off")
    noise_dof = standard_error_dof(joint, refit, whitener, whitener.record_samples or refit.n)
    fewest = float(np.min(noise_dof[shape])) if shape else math.inf
    stderr = {n: math.sqrt(problem.covariance[i, i]) for i, n in enumerate(refit.names)}
    gls = replace(refit, covariance=problem.covariance, stderr=stderr)
    whitened_sum = float(problem.residual @ problem.residual)
    scale = math.sqrt(refit.rss / whitened_sum) if whitened_sum > 0 and refit.rss > 0 else 1.0
    return (WhitenedJointModel(joint, whitener, scale), gls,
            whitened_correction(gls, whitener, problem, left, ordinary, max(fewest, 1.0)))
