"""From a fitted form (internal units) to physical Estimates with 95 % intervals.

Shape parameters were fitted as logs, so their intervals are built on the log
scale (never negative, asymmetric in linear terms) and, where the sum of
squares is visibly non-quadratic, by profile likelihood through lmfit's
``conf_interval`` (an F-test profile, equivalent to a t interval in the
quadratic case). Derived quantities carry the full covariance of the shape
parameters through the form's ``derived`` function (delta method).

Forms fitted in internal coordinates (``Form.region_quantities``, e.g.
"two-real-pole", fitted as tau0 and Q and reported as tau1 and tau2) get
their reported parameters from the confidence region instead: see
:func:`bounded_region` and :func:`region_estimates`.
"""

from __future__ import annotations

import math
import warnings
from typing import Mapping

import numpy as np

from ..results import Estimate
from .form_fit import FormFit
from .region_estimates import bounded_region, interval_method_text, region_estimates, region_ranges
from .uncertainty import MAX_LOG_STDERR, delta_method, log_interval, objective_is_asymmetric

#: Derived quantities that may be zero or negative (linear intervals).
SIGNED_DERIVED = {"overshoot", "overshoot_pct", "step", "baseline", "gain"}


def shape_estimates(ff: FormFit, intervals: str = "auto") -> tuple[dict[str, Estimate], list[str]]:
    """Physical estimates of the form's shape parameters, and warnings.

    For a form with ``reported_shape`` these are the reported parameters (e.g.
    tau1 and tau2) with intervals from the confidence region of the fit
    coordinates, or their profile likelihood where they are loosely determined
    (:func:`region_estimates`; "covariance" skips the profile).
    """
    if getattr(ff.form, "region_quantities", None) is not None and getattr(ff.form, "reported_shape", ()):
        return region_estimates(ff, profile=intervals != "covariance" and ff.objective == "least squares")
    fit, sc, cov = ff.fit, ff.joint.scaling, ff.correction.covariance
    names = list(fit.names)
    theta = np.array([fit.values[n] for n in names])
    out: dict[str, Estimate] = {}
    warnings: list[str] = []
    for spec in ff.form.shape:
        key = "log_" + spec.name
        value = sc.shape_from_log_scaled(spec, fit.values[key])
        if key not in names:  # held fixed
            out[spec.name] = Estimate(spec.name, value, 0.0, (value, value), spec.unit, "held fixed")
            continue
        j = names.index(key)
        widen = float(ff.correction.widening[j])
        s_log = math.sqrt(cov[j, j]) if np.isfinite(cov[j, j]) and cov[j, j] >= 0 else math.nan
        determined = (not fit.singular) and math.isfinite(s_log) and s_log <= MAX_LOG_STDERR
        if not determined:
            out[spec.name] = Estimate(spec.name, value, None, None, spec.unit, "not determined", False)
            continue
        lo, hi = log_interval(value, s_log, ff.tq)
        method = interval_method_text(widen, "covariance (log scale)", ff.joint.measured_input)
        want_profile = ff.objective == "least squares" and intervals == "profile" or (
            ff.objective == "least squares" and intervals == "auto" and objective_is_asymmetric(
                lambda th: _rss(ff, names, th), theta, fit.covariance, j, fit.s2, ff.tq))
        if want_profile and intervals != "covariance":
            prof = _profile_interval(ff, key, fit.values[key], math.sqrt(fit.covariance[j, j]))
            if prof is not None:
                lo_l, hi_l = prof
                c = fit.values[key]
                lo = sc.shape_from_log_scaled(spec, c - widen * (c - lo_l))
                hi = sc.shape_from_log_scaled(spec, c + widen * (hi_l - c))
                method = interval_method_text(widen, "profile likelihood", ff.joint.measured_input)
            else:
                warnings.append(f"profile interval of {spec.name} failed; covariance interval shown")
        out[spec.name] = Estimate(spec.name, value, value * s_log, (lo, hi), spec.unit, method, True)
    return out, warnings


def level_estimates(ff: FormFit, edge: int = 0) -> dict[str, Estimate]:
    """baseline, step (or gain) and t0 of one edge, in volts and seconds."""
    fit, sc, cov = ff.fit, ff.joint.scaling, ff.correction.covariance
    names = list(fit.names)
    seg = ff.joint.segments[edge]
    out: dict[str, Estimate] = {}

    def make(name: str, key: str, to_phys_scale: float, offset: float, unit: str) -> None:
        value = offset + fit.values[key] * to_phys_scale
        if edge in ff.unseen_edges:  # the record does not hold them (.unseen_edges)
            out[name] = Estimate(name, value, None, None, unit, "not determined: the edge came before the record "
                                 "began", False)
            return
        if key not in names:
            out[name] = Estimate(name, value, 0.0, (value, value), unit, "held fixed")
            return
        j = names.index(key)
        se = math.sqrt(cov[j, j]) * abs(to_phys_scale) if cov[j, j] >= 0 else math.nan
        # "not determined": an interval wider than the quantity's own scale
        # (the step size for levels, ten time units for the edge time)
        limit = (10.0 if unit == "s" else 1.0) * abs(to_phys_scale)
        ok = math.isfinite(se) and not fit.singular and se <= limit
        ci = (value - ff.tq * se, value + ff.tq * se) if ok else None
        method = (interval_method_text(float(ff.correction.widening[j]), "covariance", ff.joint.measured_input)
                  if ok else "not determined")
        out[name] = Estimate(name, value, se if ok else None, ci, unit, method, ok)

    make("baseline", f"baseline_{edge}", sc.volt_unit, sc.volt_origin, "V")
    if ff.joint.measured_input:
        make("gain", "gain", sc.volt_unit / sc.input_unit, 0.0, "")
    else:
        make("step", f"step_{edge}", sc.volt_unit, 0.0, "V")
        if f"t0_{edge}" in fit.values:
            make("t0", f"t0_{edge}", sc.time_unit, seg.edge_time, "s")
    return out


def derived_estimates(ff: FormFit) -> dict[str, Estimate]:
    """The form's derived quantities with delta-method intervals (correlations kept)."""
    fit, sc = ff.fit, ff.joint.scaling
    names = list(fit.names)
    keys = ["log_" + p.name for p in ff.form.shape]
    idx = [names.index(k) if k in names else None for k in keys]
    free = [i for i in idx if i is not None]
    cov = ff.correction.covariance[np.ix_(free, free)] if free else np.zeros((0, 0))
    widen = float(max((ff.correction.widening[i] for i in free), default=1.0))

    def derived_of(vec: np.ndarray) -> Mapping[str, float]:
        shape, it = {}, iter(vec)
        for spec, i in zip(ff.form.shape, idx):
            log_v = next(it) if i is not None else fit.values["log_" + spec.name]
            shape[spec.name] = sc.shape_from_log_scaled(spec, log_v)
        try:
            return ff.form.derived(**shape)
        except (ValueError, ArithmeticError, RuntimeError):
            return {}  # a quantity the form cannot compute here is left out

    theta = np.array([fit.values[names[i]] for i in free])
    region = bounded_region(ff)
    if region is not None:  # evaluate at the reported point (the nearest point of the form's range)
        theta = np.array([region.point[region.keys.index(names[i])] for i in free])
    units = ff.form.derived_units
    shapes_ok = not fit.singular and all(
        math.isfinite(cov[k, k]) and math.sqrt(max(cov[k, k], 0)) <= MAX_LOG_STDERR for k in range(len(free)))
    out: dict[str, Estimate] = {}
    for name, (value, var, grad) in delta_method(derived_of, theta, cov).items():
        unit = units.get(name, "")
        se = math.sqrt(var) if math.isfinite(var) and var >= 0 else math.nan
        if not (math.isfinite(value) and math.isfinite(se)):
            out[name] = Estimate(name, value, None, None, unit, "not determined", False)
            continue
        depends = bool(np.any(np.abs(grad) > 0))
        if value > 0 and name not in SIGNED_DERIVED:
            s_log = se / value
            ok = shapes_ok and s_log <= MAX_LOG_STDERR
            ci = log_interval(value, s_log, ff.tq) if ok else None
            method = interval_method_text(widen, "delta method (log scale)", ff.joint.measured_input)
        else:
            ok = shapes_ok or not depends
            ci = (value - ff.tq * se, value + ff.tq * se) if ok else None
            method = interval_method_text(widen, "delta method", ff.joint.measured_input)
        out[name] = Estimate(name, value, se if ok else None, ci, unit, method if ok else "not determined", ok)
    if region is not None:
        ranged = region_ranges(ff, region)
        out.update({k: v for k, v in ranged.items() if k in out or k in units})
    return out


def _rss(ff: FormFit, names: list[str], theta: np.ndarray) -> float:
    vals = dict(ff.fit.values)
    vals.update(zip(names, theta))
    with np.errstate(all="ignore"):
        r = ff.joint.weights * (ff.joint.y - ff.joint.evaluate(None, **vals))
    return float(np.sum(r * r))


def _profile_interval(ff: FormFit, key: str, centre: float, sigma: float) -> tuple[float, float] | None:
    """95 % profile-likelihood interval of one internal parameter via lmfit.conf_interval."""
    import lmfit  # imported when a profile is needed (start-up time)

    if ff.fit._lmfit is None:  # a projected fit: restart the full problem at its optimum
        from .least_squares import fit_model
        fixed = {k: v for k, v in ff.fit.values.items() if k not in ff.fit.names}
        full = fit_model(ff.joint.evaluate, {n: ff.fit.values[n] for n in ff.fit.names}, None, ff.joint.y,
                         weights=ff.joint.weights, fixed=fixed, tol=1e-10)
        if not full.converged or full._lmfit is None:
            return None
        minimizer, result = full._lmfit
    else:
        minimizer, result = ff.fit._lmfit
    for n in ff.fit.names:
        result.params[n].stderr = float(ff.fit.stderr.get(n, sigma)) or sigma
    try:
        with np.errstate(all="ignore"), warnings.catch_warnings():
            warnings.simplefilter("ignore")  # lmfit warns when the profile does not close; handled below
            ci = lmfit.conf_interval(minimizer, result, p_names=[key], sigmas=[0.95], maxiter=200)
    except Exception:  # lmfit raises assorted errors when the profile does not close
        return None
    rows = ci.get(key)
    if not rows:
        return None
    lo, hi = rows[0][1], rows[-1][1]
    if not (math.isfinite(lo) and math.isfinite(hi)) or not lo <= centre <= hi:
        return None
    return float(lo), float(hi)
