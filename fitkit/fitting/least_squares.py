"""The least-squares core: one nonlinear fit of a model function, on lmfit.

Everything else in fitkit.fitting (step forms, joint fits of many edges,
circuit models fitted directly in component values) ends up here:

    fit_model(model, params, x, y) -> ModelFit

``model(x, **values) -> y_model`` is any vectorised function. The fit is
ordinary (optionally weighted) least squares by Levenberg-Marquardt (lmfit's
"leastsq", i.e. MINPACK lmdif) with tight tolerances, so it reproduces the NIST
StRD certified values. After convergence the Jacobian is recomputed by central
differences and the covariance is the textbook ``s^2 (J^T J)^-1`` with
``s^2 = RSS / (n - p)`` (the definition behind NIST's certified standard
deviations), computed through an SVD so a rank-deficient fit is detected
instead of producing nonsense.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import TYPE_CHECKING, Any, Callable, Mapping, Sequence

import numpy as np

from .block_jacobian import block_covariance, grouped_jacobian, is_sparse, weighted

if TYPE_CHECKING:
    import lmfit

#: Relative condition number of J above which the covariance is declared singular.
SINGULAR_CONDITION = 1e13
#: Below this condition number of J the covariance comes from J^T J directly.
GRAM_CONDITION = 1e4


@dataclass(frozen=True)
class ModelFit:
    """Outcome of one least-squares fit.

    Attributes
    ----------
    names: the varied parameters, in the order of the covariance matrix.
    values: best value of every parameter (varied and fixed), model units.
    stderr: covariance-based standard error of each varied parameter
        (NaN when the covariance is singular).
    covariance: s^2 (J^T J)^-1 over ``names`` (NaN-filled when singular).
    jacobian: d(model)/d(parameter) at the optimum, shape (n, p), unweighted.
    fitted: model at the optimum; residual = y - fitted.
    weights: per-point weights used in the fit (ones when unweighted).
    rss: weighted residual sum of squares; dof = n - p; s2 = rss / dof.
    converged: lmfit/MINPACK reported success and the result is finite.
    singular: J^T J is (numerically) singular: some parameter is not determined.
    message: lmfit's message; nfev: number of model evaluations.
    """

    names: tuple[str, ...]
    values: Mapping[str, float]
    stderr: Mapping[str, float]
    covariance: np.ndarray
    jacobian: np.ndarray
    fitted: np.ndarray
    residual: np.ndarray
    weights: np.ndarray
    rss: float
    n: int
    dof: int
    converged: bool
    singular: bool
    message: str
    nfev: int
    condition: float
    _lmfit: Any = field(default=None, repr=False, compare=False)

    @property
    def s2(self) -> float:
        """Residual variance estimate RSS / (n - p) (weighted units)."""
        return self.rss / self.dof if self.dof > 0 else float("nan")

    def to_dict(self) -> dict[str, Any]:
        return {"names": list(self.names), "values": dict(self.values), "stderr": dict(self.stderr),
                "rss": self.rss, "n": self.n, "dof": self.dof, "converged": self.converged,
                "singular": self.singular, "message": self.message, "nfev": self.nfev}


def numeric_jacobian(fun: Callable[[np.ndarray], np.ndarray], theta: np.ndarray,
                     rel_step: float = 1e-6) -> np.ndarray:
    """Central-difference Jacobian of ``fun`` (vector -> vector) at ``theta``, shape (n, p)."""
    theta = np.asarray(theta, dtype=float)
    cols = []
    for j in range(theta.size):
        h = rel_step * max(abs(theta[j]), 1e-3)
        up, dn = theta.copy(), theta.copy()
        up[j] += h
        dn[j] -= h
        cols.append((np.asarray(fun(up)) - np.asarray(fun(dn))) / (2.0 * h))
    return np.column_stack(cols) if cols else np.zeros((0, 0))


def covariance_from_jacobian(jac_w: np.ndarray, s2: float) -> tuple[np.ndarray, bool, float]:
    """``s2 (J^T J)^-1`` through an SVD of the weighted Jacobian.

    Returns (covariance, singular, condition number of J). Columns are
    equilibrated first so that parameters of very different size do not make
    a well-posed problem look singular.
    """
    p = jac_w.shape[1]
    norms = np.sqrt(np.sum(jac_w ** 2, axis=0))
    if p == 0:
        return np.zeros((0, 0)), False, 1.0
    if not np.all(np.isfinite(jac_w)) or np.all(norms == 0):
        return np.full((p, p), np.nan), True, math.inf
    if np.any(norms == 0):
        # a parameter the model no longer depends on (a dead time or a pole run to its floor):
        # not determined; the others' covariance holds it at its value
        alive = np.flatnonzero(norms > 0)
        sub, singular, cond = covariance_from_jacobian(jac_w[:, alive], s2)
        cov = np.full((p, p), np.nan)
        cov[np.ix_(alive, alive)] = sub
        return cov, singular, cond
    scaled = jac_w / norms
    # Fast path for a well-conditioned J: the eigen-decomposition of the small
    # p x p matrix J^T J (its eigenvalues are the squared singular values);
    # relative error about eps * cond^2, below 1e-8 for cond < 1e4. Otherwise
    # (e.g. the NIST problems) the SVD of J itself.
    gram = scaled.T @ scaled
    ev, vecs = np.linalg.eigh(gram)
    if ev[0] > 0 and ev[-1] / ev[0] < GRAM_CONDITION ** 2:
        sv, vt = np.sqrt(ev[::-1]), vecs[:, ::-1].T
    else:
        # the singular values of J are those of R in J = QR (Householder QR
        # first: much cheaper than the SVD of the tall J itself)
        r = np.linalg.qr(scaled, mode="r") if scaled.shape[0] > 2 * p else scaled
        _, sv, vt = np.linalg.svd(r, full_matrices=False)
    cond = float(sv[0] / sv[-1]) if sv[-1] > 0 else math.inf
    if cond > SINGULAR_CONDITION:
        return np.full((p, p), np.nan), True, cond
    inv = (vt.T / sv ** 2) @ vt
    cov = s2 * inv / np.outer(norms, norms)
    return cov, False, cond


def fit_model(model: Callable[..., np.ndarray], params: Mapping[str, float] | lmfit.Parameters,
              x: Any, y: np.ndarray, *, weights: np.ndarray | None = None,
              fixed: Mapping[str, float] | None = None, tol: float = 1e-12,
              max_nfev: int | None = None) -> ModelFit:
    """Least-squares fit of ``model(x, **values)`` to ``y``.

    Parameters
    ----------
    model: vectorised model function; keyword arguments are the parameters.
    params: starting values by name (or lmfit.Parameters, whose ``vary`` and
        bounds are honoured).
    x: the independent variable, passed to ``model`` unchanged (any object).
    y: data, same length as the model output.
    weights: optional per-point weights (residual = weights * (y - model)).
    fixed: parameters held at the given values (not fitted).
    tol: MINPACK ftol and xtol (relative).
    max_nfev: evaluation budget (default 2000 * (p + 1)).

    Returns a :class:`ModelFit`; never raises on non-convergence (the caller
    decides), only on malformed input.
    """
    import lmfit  # imported when used: the engine's projected fits do not need it (fast start-up)

    y = np.asarray(y, dtype=float)
    w = np.ones_like(y) if weights is None else np.asarray(weights, dtype=float)
    pars = _as_parameters(params, fixed)
    names = tuple(n for n, p in pars.items() if p.vary)

    def residual(p: lmfit.Parameters) -> np.ndarray:
        try:
            r = w * (y - np.asarray(model(x, **p.valuesdict()), dtype=float))
        except (ArithmeticError, ValueError):  # the model cannot be evaluated here: a wall
            return np.full(y.shape, 1e150)
        return np.where(np.isfinite(r), r, 1e150)

    minimizer = lmfit.Minimizer(residual, pars, nan_policy="propagate")
    budget = max_nfev or 2000 * (len(names) + 1)
    with np.errstate(all="ignore"):
        result = minimizer.minimize(method="leastsq", ftol=tol, xtol=tol, gtol=0.0, max_nfev=budget)
    return model_fit_at(model, dict(result.params.valuesdict()), names, x, y, w,
                        converged=bool(result.success), message=str(result.message),
                        nfev=int(result.nfev), lmfit_state=(minimizer, result))


def model_fit_at(model: Callable[..., np.ndarray], values: Mapping[str, float], names: tuple[str, ...],
                 x: Any, y: np.ndarray, weights: np.ndarray, *, converged: bool, message: str,
                 nfev: int, lmfit_state: Any = None, edge_bounds: Sequence[int] | None = None,
                 known_columns: Mapping[str, tuple[np.ndarray, np.ndarray]] | None = None) -> ModelFit:
    """The :class:`ModelFit` at given optimum ``values`` (varied ``names``, the rest fixed):
    central-difference Jacobian over ``names``, covariance, residuals.

    edge_bounds: the point ranges of a joint fit's edges; the Jacobian is then
    taken with the per-edge parameters grouped, and kept sparse with its
    covariance by blocks when there are many (:mod:`.block_jacobian`);
    known_columns: columns of it in closed form, {name: (rows, values)}."""
    values = dict(values)
    y = np.asarray(y, dtype=float)
    w = np.asarray(weights, dtype=float)
    const = {n: v for n, v in values.items() if n not in names}

    def model_of_vector(theta: np.ndarray) -> np.ndarray:
        vals = dict(const)
        vals.update(zip(names, theta))
        return np.asarray(model(x, **vals), dtype=float)

    theta = np.array([values[n] for n in names], dtype=float)
    with np.errstate(all="ignore"):
        fitted = model_of_vector(theta)
        if not names:
            jac = np.zeros((y.size, 0))
        elif edge_bounds is not None:
            jac = grouped_jacobian(model_of_vector, theta, names, edge_bounds, known=known_columns)
        else:
            jac = numeric_jacobian(model_of_vector, theta)
    resid = y - fitted
    rss = float(np.sum((w * resid) ** 2))
    dof = y.size - len(names)
    finite = bool(np.all(np.isfinite(fitted)) and np.isfinite(rss))
    s2 = rss / dof if dof > 0 else float("nan")
    if is_sparse(jac):
        cov, singular, cond = block_covariance(weighted(jac, w), names, s2)
    else:
        cov, singular, cond = covariance_from_jacobian(jac * w[:, None], s2)
    stderr = {n: float(math.sqrt(cov[i, i])) if np.isfinite(cov[i, i]) and cov[i, i] >= 0 else float("nan")
              for i, n in enumerate(names)}
    return ModelFit(names=names, values=values, stderr=stderr, covariance=cov, jacobian=jac,
                    fitted=fitted, residual=resid, weights=w, rss=rss, n=int(y.size), dof=int(dof),
                    converged=converged and finite, singular=singular,
                    message=message, nfev=nfev, condition=cond, _lmfit=lmfit_state)


def _as_parameters(params: Mapping[str, float] | lmfit.Parameters,
                   fixed: Mapping[str, float] | None) -> lmfit.Parameters:
    import lmfit

    if isinstance(params, lmfit.Parameters):
        pars = params.copy()
    else:
        pars = lmfit.Parameters()
        for name, value in params.items():
            pars.add(name, value=float(value))
    for name, value in (fixed or {}).items():
        if name in pars:
            pars[name].set(value=float(value), vary=False)
        else:
            pars.add(name, value=float(value), vary=False)
    return pars
