"""Maximum likelihood for a trace rounded to ADC codes, when the noise is below one code.

Least squares treats the rounding error as extra white noise of variance
q^2/12 (q the code step). That holds once the noise spans a code or more
(Widrow & Kollar, Quantization Noise, Cambridge UP 2008, ch. 4, from memory);
with less, the rounding error follows the signal instead of averaging out,
and least squares is biased by more than its intervals show
(benchmarks/bench_accuracy.py: Q of a Q = 5 response at 60 dB SNR with
8 bits, bias 0.2 %, 2.6 standard errors).

Here the observation model is the physical one: Gaussian noise of rms sigma
added to the response m_k, then rounded to the nearest code, so sample y_k
was observed with probability

    P_k = Phi((y_k + q/2 - m_k) / sigma) - Phi((y_k - q/2 - m_k) / sigma),

and the estimate maximises sum_k ln P_k over the model's parameters and
sigma together (the likelihood of interval-censored Gaussian data; Kay,
Fundamentals of Statistical Signal Processing: Estimation Theory, 1993,
ch. 7, for maximum likelihood and its Fisher information, from memory). The
search is quasi-Newton (BFGS, scipy.optimize.minimize) over the parameters
and ln sigma together, with the exact gradient of the log-likelihood, from
the least-squares fit. The covariance is the inverse of the
expected Fisher information of the parameters and sigma together.

The likelihood takes the samples as independent. Scope noise is band-limited,
so neighbouring samples are not: the estimate is then a quasi-likelihood
one, still consistent, but the inverse information understates its
variance (a 3 mV noise through a second-order low-pass at a fifth of the
Nyquist frequency, 0.3 codes of an 8-bit scale: covering 80 % instead of
95 %). Its covariance is therefore the sandwich A^-1 B A^-1 (Huber, Proc.
Fifth Berkeley Symp. 1 (1967) 221-233; White, Econometrica 50 (1982) 1-25),
A the expected information, B the long-run covariance of the samples'
scores: each sample's score d ln P_k / d m_k divided by the square root of
its own information I_k has unit variance and, under independent noise,
no correlation, so its autocorrelation is the noise's. The engine's
correlated-residual correction (uncertainty.correlated_residual_correction:
Ljung-Box test, autoregressive model of that series, projection bias,
never narrowing) is applied to the standardised scores with the Jacobian
of the mean scaled by sqrt(I_k), whose J^T J is the parameters' information:
the same sandwich as for least squares, with the parameters' block of the
inverse information (ln sigma estimated with them) as its bread. Under independent noise the test passes
and the intervals are the inverse information's. A fit whitened by a
separate noise record is left as it is.
Applied to ideal-step fits on one code lattice whose least-squares residual
rms is under half a code (noise under about 0.4 codes), sample by sample
(a fit that binned long edges is refitted over every sample, up to
MAX_SAMPLES).
"""

from __future__ import annotations

import math
from dataclasses import replace

import numpy as np
from scipy import optimize, special

from .block_jacobian import dense
from .least_squares import ModelFit, covariance_from_jacobian, model_fit_at
from .form_fit import FormFit
from .joint_model import JointModel
from .uncertainty import Correction, correlated_residual_correction, t_quantile

#: FormFit.objective of a fit made here.
ROUNDED_GAUSSIAN = "rounded Gaussian"
#: Applied when the least-squares residual rms is below this fraction of a code.
RESIDUAL_CODES = 0.5
#: Most samples refitted one by one (a binned fit of a longer capture keeps least squares).
MAX_SAMPLES = 200_000
#: Samples must lie on the code lattice to this fraction of a code.
LATTICE_TOLERANCE = 0.02
#: Quasi-Newton iterations at most, per parameter; the search has converged
#: when the scoring decrement at its end is below DECREMENT_TOLERANCE
#: (statistically nothing: a 95 % interval's ends lie 1.92 below the maximum).
MAX_ITERATIONS = 60
DECREMENT_TOLERANCE = 1e-4
#: Relative step of the forward differences of the mean.
FORWARD_STEP = 1e-7
#: Codes on each side of a sample's own summed over for the expected information.
CODE_SPAN_SIGMAS = 8.0


def _log_interval_probability(lower: np.ndarray, upper: np.ndarray) -> np.ndarray:
    """ln(Phi(upper) - Phi(lower)) for lower < upper, accurate in both tails."""
    # mirror intervals above zero into the lower tail, where log_ndtr is exact
    flip = lower > 0
    lo = np.where(flip, -upper, lower)
    hi = np.where(flip, -lower, upper)
    log_hi = special.log_ndtr(hi)
    log_lo = special.log_ndtr(lo)
    with np.errstate(divide="ignore", invalid="ignore"):
        return log_hi + np.log1p(-np.exp(np.minimum(log_lo - log_hi, 0.0)))


def log_likelihood(y: np.ndarray, mean: np.ndarray, sigma: float, step: float) -> float:
    """sum_k ln P_k of samples ``y`` rounded to codes of ``step`` around ``mean``
    with Gaussian noise ``sigma`` (all in the same units)."""
    lower = (y - 0.5 * step - mean) / sigma
    upper = (y + 0.5 * step - mean) / sigma
    return float(np.sum(_log_interval_probability(lower, upper)))


def sample_information(mean: np.ndarray, sigma: float, step: float, origin: float = 0.0
                       ) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Expected Fisher information of each rounded sample about (its mean, ln sigma):
    the per-sample entries I_mm, I_ms, I_ss, summed over the codes it may fall in.

    The codes are ``origin + k * step`` (k whole): in the engine's scaled volts
    they sit wherever the scaling put them, so ``origin`` is one observed code.
    """
    span = int(math.ceil(CODE_SPAN_SIGMAS * sigma / step)) + 2
    codes = origin + step * (np.round((mean - origin) / step)[:, None] + np.arange(-span, span + 1)[None, :])
    lower = (codes - 0.5 * step - mean[:, None]) / sigma
    upper = (codes + 0.5 * step - mean[:, None]) / sigma
    prob = special.ndtr(upper) - special.ndtr(lower)
    pdf_lo, pdf_hi = np.exp(-0.5 * lower**2), np.exp(-0.5 * upper**2)
    root = math.sqrt(2.0 * math.pi)
    d_mean = (pdf_lo - pdf_hi) / (root * sigma)
    # d/d ln sigma of Phi((a - m)/sigma) is -((a - m)/sigma) phi((a - m)/sigma)
    d_log_sigma = (lower * np.where(np.isfinite(lower), pdf_lo, 0.0)
                   - upper * np.where(np.isfinite(upper), pdf_hi, 0.0)) / root
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):  # a subnormal prob: not used
        inv = np.where(prob > 1e-300, 1.0 / prob, 0.0)
    return ((d_mean**2 * inv).sum(axis=1), (d_mean * d_log_sigma * inv).sum(axis=1),
            (d_log_sigma**2 * inv).sum(axis=1))


def _scores(y: np.ndarray, mean: np.ndarray, sigma: float, step: float) -> tuple[np.ndarray, np.ndarray]:
    """d ln P_k / d m_k and d ln P_k / d ln sigma for each sample."""
    lower = (y - 0.5 * step - mean) / sigma
    upper = (y + 0.5 * step - mean) / sigma
    log_p = _log_interval_probability(lower, upper)
    root = math.sqrt(2.0 * math.pi)
    with np.errstate(over="ignore", invalid="ignore"):
        at_lower = np.exp(-0.5 * lower**2 - log_p) / root
        at_upper = np.exp(-0.5 * upper**2 - log_p) / root
        d_mean = (at_lower - at_upper) / sigma
        d_log_sigma = np.where(np.isfinite(lower), lower * at_lower, 0.0) - np.where(np.isfinite(upper),
                                                                                    upper * at_upper, 0.0)
    return (np.where(np.isfinite(d_mean), d_mean, 0.0), np.where(np.isfinite(d_log_sigma), d_log_sigma, 0.0))


def _information(jac: np.ndarray, mean: np.ndarray, sigma: float, step: float, origin: float) -> np.ndarray:
    """Expected Fisher information (k + 1, k + 1) of the parameters (Jacobian ``jac``
    of the mean) and ln sigma together, codes at ``origin + k * step``."""
    info_mm, info_ms, info_ss = sample_information(mean, sigma, step, origin)
    k = jac.shape[1]
    full = np.empty((k + 1, k + 1))
    full[:k, :k] = jac.T @ (info_mm[:, None] * jac)
    full[:k, k] = full[k, :k] = jac.T @ info_ms
    full[k, k] = float(info_ss.sum())
    return full


def sample_model(ff: FormFit) -> JointModel | None:
    """The joint model of ``ff`` over every sample (rebuilt unbinned when the fit
    binned long edges, up to :data:`MAX_SAMPLES`), or None beyond that."""
    joint = getattr(ff.joint, "unwhitened", ff.joint)
    if all(d.bin_size == 1 for d in joint.data):
        return joint
    total = sum(s.n_points for s in joint.segments)
    if total > MAX_SAMPLES:
        return None
    return JointModel(joint.form, joint.segments, joint.scaling, measured_input=joint.measured_input,
                      free_t0=joint.free_t0, max_points=total)


def code_step(ff: FormFit, joint: JointModel) -> float | None:
    """The code step (scaled volts) when the quantised likelihood applies to ``ff``
    over the samples of ``joint``, else None."""
    q = _lattice_step(joint)
    if q is None or joint.measured_input or not ff.converged:
        return None
    residual = joint.y - joint.evaluate(None, **ff.fit.values)
    if not math.sqrt(float(np.mean(residual**2))) < RESIDUAL_CODES * q:
        return None
    offset = (joint.y - joint.y[0]) / q
    if float(np.max(np.abs(offset - np.round(offset)))) > LATTICE_TOLERANCE:
        return None
    return q


def _noise_many_codes(ff: FormFit) -> bool:
    """True when the fit's own noise estimate (per sample, scaled volts) is
    beyond twice the residual limit of :func:`code_step` in codes, or there is
    no single code step: the refit cannot apply (the margin covers the
    difference between a binned fit's estimate and the rms over every sample)."""
    q = _lattice_step(getattr(ff.joint, "unwhitened", ff.joint))
    return q is None or (math.isfinite(ff.fit.s2) and math.sqrt(ff.fit.s2) >= 2.0 * RESIDUAL_CODES * q)


def _lattice_step(joint: JointModel) -> float | None:
    """The one code step (scaled volts) that every segment of ``joint`` is
    quantised to, or None when they have none, several, or a zero one."""
    steps = {s.quantisation_step for s in joint.segments}
    if len(steps) != 1 or None in steps:
        return None
    q = float(next(iter(steps))) / joint.scaling.volt_unit
    return q if q > 0 else None


def quantised_refit(ff: FormFit, correlation: str = "auto") -> FormFit | None:
    """``ff`` refitted by maximum likelihood for rounding to codes (module docstring),
    or None when it does not apply or does not converge.

    correlation: "auto", "on" or "off", the engine's correlated-residual correction
    applied to the standardised scores (module docstring).
    """
    whitener = getattr(ff.joint, "whitener", None)
    if whitener is not None and whitener.record_samples is not None:
        return None  # the user's noise record says the noise is correlated: keep its GLS fit
    if _noise_many_codes(ff):
        return None  # (told before the fit is rebuilt over every sample)
    joint = sample_model(ff)
    q = None if joint is None else code_step(ff, joint)
    if q is None:
        return None
    names = tuple(ff.fit.names)
    y = joint.y
    values = dict(ff.fit.values)
    with np.errstate(all="ignore"):
        start_mean = joint.evaluate(None, **values)
    # the start's noise: what the least-squares residuals hold beyond rounding,
    # refined by maximising the likelihood over sigma alone
    sigma = math.sqrt(max(float(np.mean((y - start_mean) ** 2)) - q * q / 12.0, (0.05 * q) ** 2))
    found = optimize.minimize_scalar(lambda ls: -log_likelihood(y, start_mean, math.exp(ls), q),
                                     bounds=(math.log(1e-3 * q), math.log(2.0 * q)), method="bounded",
                                     options={"xatol": 1e-6})
    if found.success:
        sigma = math.exp(found.x)
    theta0 = np.array([values[n] for n in names] + [math.log(sigma)])

    def model_of(theta: np.ndarray) -> np.ndarray:
        trial = dict(values)
        trial.update(zip(names, (float(v) for v in theta[:-1])))
        with np.errstate(all="ignore"):
            return joint.evaluate(None, **trial)

    def negative_log_likelihood(theta: np.ndarray) -> tuple[float, np.ndarray]:
        """-ln L and its gradient (the Jacobian of the mean by forward differences)."""
        mean = model_of(theta)
        if not np.all(np.isfinite(mean)) or not abs(theta[-1]) < 700:
            return math.inf, np.zeros_like(theta)
        sig = math.exp(theta[-1])
        d_mean, d_log_sigma = _scores(y, mean, sig, q)
        grad = np.empty_like(theta)
        for i in range(theta.size - 1):
            h = FORWARD_STEP * max(1.0, abs(theta[i]))
            shifted = theta.copy()
            shifted[i] += h
            grad[i] = -float(d_mean @ ((model_of(shifted) - mean) / h))
        grad[-1] = -float(d_log_sigma.sum())
        return -log_likelihood(y, mean, sig, q), grad

    with np.errstate(all="ignore"):
        found = optimize.minimize(negative_log_likelihood, theta0, jac=True, method="BFGS",
                                  options={"gtol": 1e-8, "maxiter": MAX_ITERATIONS * (theta0.size + 1)})
    theta = found.x
    values = dict(values)
    values.update(zip(names, (float(v) for v in theta[:-1])))
    sigma = math.exp(float(theta[-1]))
    current = model_fit_at(joint.evaluate, values, names, None, y, np.ones_like(y), converged=True,
                           message="", nfev=0)
    # converged when the scoring decrement g^T F^-1 g (twice the rise in
    # log-likelihood a further step promises) is statistically nothing
    d_mean, d_log_sigma = _scores(y, current.fitted, sigma, q)
    gradient = np.concatenate([current.jacobian.T @ d_mean, [float(d_log_sigma.sum())]])
    try:
        decrement = float(gradient @ np.linalg.solve(
            _information(dense(current.jacobian), current.fitted, sigma, q, float(y[0])), gradient))
    except np.linalg.LinAlgError:
        return None
    converged = math.isfinite(found.fun) and decrement < DECREMENT_TOLERANCE
    if not converged:
        return None
    return _as_form_fit(ff, joint, current, sigma, q, correlation)


def _as_form_fit(ff: FormFit, joint, fit: ModelFit, sigma: float, q: float,
                 correlation: str = "auto") -> FormFit | None:
    """The FormFit of the maximum-likelihood estimate: covariance from the expected
    information of the parameters and ln sigma together (the parameters' block of its
    inverse), widened for correlated noise by the sandwich of :func:`score_correction`."""
    jacobian = dense(fit.jacobian)
    full = _information(jacobian, fit.fitted, sigma, q, float(joint.y[0]))
    k = fit.jacobian.shape[1]
    # through the SVD of a square root of the information, as for least squares
    w, v = np.linalg.eigh(full)
    if not (np.all(np.isfinite(w)) and w[0] > 0):
        return None
    root = (v * np.sqrt(w)) @ v.T
    covariance, singular, _ = covariance_from_jacobian(root, 1.0)
    if singular:
        return None
    cov = covariance[:k, :k]
    text = (f"maximum likelihood for rounding to codes of {q * joint.scaling.volt_unit:.3g} V with "
            f"Gaussian noise of {sigma * joint.scaling.volt_unit:.3g} V rms ({sigma / q:.2f} codes) estimated with "
            "it: the noise is below one code, where least squares is biased")
    scores = score_correction(joint, jacobian, fit.fitted, sigma, q, cov, correlation)
    if scores.applied:
        text += "; " + scores.description.replace("autocorrelation-consistent sandwich covariance",
                                                   "sandwich covariance for correlated noise") \
            .replace("residual autocorrelation", "autocorrelation of the standardised scores")
        cov = scores.covariance
    else:
        text += "; noise consistent with independent samples"
    stderr = {n: math.sqrt(cov[i, i]) for i, n in enumerate(fit.names)}
    refit = replace(fit, covariance=cov, stderr=stderr, converged=True,
                    message="maximum likelihood for a trace rounded to codes")
    correction = Correction(cov, scores.widening, ff.correction.lag1, scores.correlation_lags, True, text,
                            scores.variance_ratio, scores.dof)
    dof = scores.dof if scores.applied and scores.dof is not None else max(fit.n - k - 1, 1)
    return FormFit(ff.form, joint, refit, correction, t_quantile(int(round(dof))), ff.notes,
                   unseen_edges=ff.unseen_edges, objective=ROUNDED_GAUSSIAN)


def score_correction(joint, jacobian: np.ndarray, mean: np.ndarray, sigma: float, q: float,
                     covariance: np.ndarray, correlation: str = "auto") -> Correction:
    """The engine's correlated-residual correction of the maximum-likelihood
    ``covariance`` (parameters' block, scaled units), from the samples' scores.

    Each sample's score about its mean, u_k = d ln P_k / d m_k, has variance
    I_k (its expected information); z_k = u_k / sqrt(I_k) and the Jacobian rows
    scaled by sqrt(I_k) make the parameters' information J~^T J~, so the
    least-squares sandwich of uncertainty.correlated_residual_correction (s^2 = 1,
    ``covariance`` as its bread) is the quasi-likelihood sandwich A^-1 B A^-1
    (module docstring). Samples that
    carry no information (I_k ~ 0, deep inside one code) are left out of both.
    """
    info_mm, _, _ = sample_information(mean, sigma, q, float(joint.y[0]))
    d_mean, _ = _scores(joint.y, mean, sigma, q)
    informative = info_mm > 1e-12 * max(float(np.max(info_mm)), 1e-300)
    root = np.sqrt(np.where(informative, info_mm, 0.0))
    with np.errstate(divide="ignore", invalid="ignore"):
        standardised = np.where(informative, d_mean / np.where(informative, root, 1.0), 0.0)
    return correlated_residual_correction(jacobian * root[:, None], joint.split(standardised),
                                          list(joint.bounds), covariance, 1.0, correlation)
