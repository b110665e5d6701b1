"""Reported parameters of a form fitted in internal coordinates: intervals from
the confidence region of the fit coordinates.

A form with ``Form.region_quantities`` (e.g. "two-real-pole", fitted as tau0
and Q <= 1/2, regular at equal poles, and reported as tau1 and tau2) gets
each reported quantity's 95 % interval as its range over the confidence
region of the fit coordinates within the form's bounds (:func:`bounded_region`,
:func:`region_ranges`), or, where a quantity is loosely determined, its
profile-likelihood interval (:mod:`.region_profile`).
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Mapping

import numpy as np

from ..forms.base import ParamSpec
from ..results import Estimate
from .form_fit import FormFit
from .region_profile import profile_interval, profile_wanted, shape_widening
from .uncertainty import MAX_LOG_STDERR


def interval_method_text(widen: float, base: str, measured_input: bool = False) -> str:
    if widen > 1.0 + 1e-9:
        why = "correlated residuals and the measured input's noise" if measured_input else "correlated residuals"
        return f"{base}, widened x{widen:.2f} for {why}"
    return base



#: A fit more than this many standard errors beyond its form's range (e.g. a
#: two-real-pole fit of a clearly ringing response) is outside the form: its
#: parameters are then not reported.
OUTSIDE_RANGE_SIGMAS = 5.0
#: Prefix of the interval method of estimates outside the form's range (selection reads it).
OUTSIDE_RANGE = "outside this form's range"
#: Points on the outline of the confidence region, and on each cut by a bound.
OUTLINE_POINTS = 1440
CUT_POINTS = 241


@dataclass(frozen=True)
class BoundedRegion:
    """The 95 % confidence region of a form's fit coordinates, within the form's bounds.

    In the internal coordinates theta (log of the scaled shape values) with
    covariance C (widened for correlated residuals), the region is

        {theta within the bounds : d(theta) <= d(point) + tq^2},
        d(theta) = (theta - centre)^T C^-1 (theta - centre),

    where ``point`` is the fit itself when it lies within the form's bounds,
    else the nearest point of the bounds in the metric of C (under the
    quadratic approximation of the sum of squares: the constrained best fit).
    The range of a quantity g over this region is its profile-likelihood
    interval under that quadratic approximation (the image of a connected
    region by a continuous g), with the likelihood ratio taken against the
    best fit within the form's range (the usual likelihood-ratio interval for
    a parameter on a bounded range). Unlike the delta method it stays honest
    where g is singular, e.g. tau1,2 = tau0 (1 +- sqrt(1 - 4Q^2))/(2Q) at
    Q = 1/2: benchmarks/bench_two_real_pole_coverage.py measures 93-98 %
    coverage for tau1 and tau2 at tau2/tau1 = 1, 0.9 and 0.5 (40 dB, white
    noise); exactly at equal poles tau1 sits slightly below nominal (about
    93-94 %), since there the likelihood ratio is not quite chi-square.
    The range is taken over the region's outline (and its cuts by the
    bounds), which assumes that g has no stationary point inside the region:
    true of the closed forms used (each strictly monotone in a coordinate).

    keys: internal names ("log_tau0", "log_Q"); specs: their ParamSpecs.
    centre, point: (k,) internal values; covariance: (k, k) (zeros for a held parameter).
    radius: sqrt(tq^2 + beyond^2).
    beyond: standard errors from the centre to ``point`` (0 within the range).
    bound: (name, physical bound) the fit lies beyond, or None.
    touches: names of the bounds the region reaches.
    determined: False when the covariance is unusable (each quantity's own
        range then decides whether it is determined, see :func:`region_ranges`).
    """

    keys: tuple[str, ...]
    specs: tuple[ParamSpec, ...]
    centre: np.ndarray
    point: np.ndarray
    covariance: np.ndarray
    radius: float
    beyond: float
    bound: tuple[str, float] | None
    touches: tuple[str, ...]
    determined: bool


def _internal_bounds(ff: FormFit) -> list[tuple[float, float]]:
    """(lower, upper) of each fit coordinate in internal (log scaled) units, +-inf when free."""
    sc = ff.joint.scaling
    out = []
    for spec in ff.form.shape:
        lo = sc.shape_to_log_scaled(spec, spec.lower) if spec.lower is not None and spec.lower > 0 else -math.inf
        hi = sc.shape_to_log_scaled(spec, spec.upper) if spec.upper is not None and spec.upper > 0 else math.inf
        out.append((lo, hi))
    return out


def bounded_region(ff: FormFit) -> BoundedRegion | None:
    """The confidence region of a two-coordinate form with ``region_quantities``, or None."""
    form = ff.form
    if getattr(form, "region_quantities", None) is None or len(form.shape) != 2:
        return None
    fit, cov_all = ff.fit, ff.correction.covariance
    names = list(fit.names)
    keys = tuple("log_" + p.name for p in form.shape)
    centre = np.array([fit.values[k] for k in keys], dtype=float)
    cov = np.zeros((2, 2))
    free = [i for i, k in enumerate(keys) if k in names]
    idx = [names.index(keys[i]) for i in free]
    if free:
        cov[np.ix_(free, free)] = cov_all[np.ix_(idx, idx)]
    usable = (not fit.singular) and bool(np.all(np.isfinite(cov))) and all(cov[i, i] > 0 for i in free)
    # Each reported quantity is judged by its own range (region_ranges): a
    # poorly determined coordinate does not make every quantity undetermined
    # (with tau2 << tau1, Q and tau0 are both loose while tau1 = tau0/Q is tight).
    determined = usable
    if not usable:
        cov = np.zeros((2, 2))
    bounds = _internal_bounds(ff)
    point, bound, beyond = centre.copy(), None, 0.0
    for j, (lo, hi) in enumerate(bounds):
        limit = hi if point[j] > hi else lo if point[j] < lo else None
        if limit is None:
            continue
        spec = form.shape[j]
        bound = (spec.name, spec.upper if limit == hi else spec.lower)
        if cov[j, j] > 0:
            # nearest point of the bound in the metric of C: the other coordinate
            # moves by its regression on this one
            shift = (limit - point[j]) * cov[:, j] / cov[j, j]
            beyond = math.hypot(beyond, (limit - centre[j]) / math.sqrt(cov[j, j]))
            point = point + shift
        else:
            beyond = math.inf
        point[j] = limit
    tq = ff.tq
    radius = math.sqrt(tq * tq + beyond * beyond) if math.isfinite(beyond) else math.inf
    touches = tuple(form.shape[j].name for j, (lo, hi) in enumerate(bounds)
                    if cov[j, j] > 0 and math.isfinite(radius)
                    and (centre[j] + radius * math.sqrt(cov[j, j]) >= hi
                         or centre[j] - radius * math.sqrt(cov[j, j]) <= lo))
    determined = determined and beyond <= OUTSIDE_RANGE_SIGMAS
    return BoundedRegion(keys, tuple(form.shape), centre, point, cov, radius, beyond, bound, touches, determined)


def region_outline(ff: FormFit, region: BoundedRegion) -> np.ndarray:
    """(m, 2) internal points whose quantities bound every range over the region: the
    ellipse's outline within the bounds, its cuts along each bound, and the reported point."""
    w, u = np.linalg.eigh(region.covariance)
    root = u * np.sqrt(np.clip(w, 0.0, None))
    phi = np.linspace(0.0, 2.0 * math.pi, OUTLINE_POINTS, endpoint=False)
    ring = region.centre + region.radius * (np.column_stack([np.cos(phi), np.sin(phi)]) @ root.T)
    pieces = [region.point[None, :], ring]
    inverse = np.linalg.pinv(region.covariance)
    for j, (lo, hi) in enumerate(_internal_bounds(ff)):
        for limit in (lo, hi):
            if not math.isfinite(limit):
                continue
            # points of the line theta_j = limit inside the ellipse: the other coordinate k
            # solves a quadratic d(theta) = radius^2
            k = 1 - j
            dj = limit - region.centre[j]
            a, b = inverse[k, k], 2.0 * inverse[j, k] * dj
            c = inverse[j, j] * dj * dj - region.radius ** 2
            disc = b * b - 4.0 * a * c
            if a <= 0 or disc < 0:
                continue
            ends = ((-b - math.sqrt(disc)) / (2 * a), (-b + math.sqrt(disc)) / (2 * a))
            cut = np.empty((CUT_POINTS, 2))
            cut[:, j] = limit
            cut[:, k] = region.centre[k] + np.linspace(ends[0], ends[1], CUT_POINTS)
            pieces.append(cut)
    points = np.vstack(pieces)
    inside = np.ones(len(points), dtype=bool)
    for j, (lo, hi) in enumerate(_internal_bounds(ff)):
        inside &= (points[:, j] >= lo - 1e-12) & (points[:, j] <= hi + 1e-12)
        points[:, j] = np.clip(points[:, j], lo, hi)
    return points[inside]


def region_ranges(ff: FormFit, region: BoundedRegion) -> dict[str, Estimate]:
    """Every quantity of the form's ``region_quantities``: the value at the reported point
    and the 95 % interval as its range over the region (see :class:`BoundedRegion`)."""
    form, sc = ff.form, ff.joint.scaling
    units = {**dict(form.derived_units), **{p.name: p.unit for p in form.reported_shape},
             **{p.name: p.unit for p in form.shape}}
    points = region_outline(ff, region)

    def physical(theta: np.ndarray) -> dict[str, np.ndarray]:
        return {spec.name: np.exp(theta[..., j]) * sc.shape_unit(spec) for j, spec in enumerate(region.specs)}

    with np.errstate(all="ignore"):
        at = {k: float(np.asarray(v)) for k, v in form.region_quantities(**physical(region.point)).items()}
        over = form.region_quantities(**physical(points))
    widen = float(max((ff.correction.widening[list(ff.fit.names).index(k)]
                       for k in region.keys if k in ff.fit.names), default=1.0))
    method = "range over the 95 % confidence region of " + " and ".join(p.name for p in region.specs)
    if region.touches or region.bound:
        method += " within " + ", ".join(_bound_text(p) for p in region.specs if p.lower or p.upper)
    held = [p.name for p, k in zip(region.specs, region.keys) if k not in ff.fit.names]
    if held:
        method += f" ({', '.join(held)} held fixed)"
    method = interval_method_text(widen, method, ff.joint.measured_input)
    out: dict[str, Estimate] = {}
    for name, value in at.items():
        unit = units.get(name, "")
        values = np.asarray(over[name], dtype=float)
        values = values[np.isfinite(values)]
        if not region.determined or values.size == 0 or not math.isfinite(value):
            why = "not determined"
            if region.beyond > OUTSIDE_RANGE_SIGMAS:
                why = f"{OUTSIDE_RANGE}: {_beyond_text(ff, region)}"
            out[name] = Estimate(name, value, None, None, unit, why, False)
            continue
        lo, hi = float(min(values.min(), value)), float(max(values.max(), value))
        if value > 0 and lo > 0:
            s_log = math.log(hi / lo) / (2.0 * ff.tq)
            ok = s_log <= MAX_LOG_STDERR
            se = value * s_log
        else:
            ok, se = True, (hi - lo) / (2.0 * ff.tq)
        out[name] = Estimate(name, value, se if ok else None, (lo, hi) if ok else None, unit,
                             method if ok else "not determined", ok)
    return out


def region_estimates(ff: FormFit, profile: bool = True) -> tuple[dict[str, Estimate], list[str]]:
    """The reported parameters (``Form.reported_shape``) of a form fitted in internal
    coordinates, from the confidence region, and plain-words warnings.

    profile: replace the region's range of a loosely determined parameter by its
    profile-likelihood interval (:mod:`.region_profile`); False for the quick
    look model selection takes at each candidate.
    """
    region = bounded_region(ff)
    assert region is not None
    ranged = region_ranges(ff, region)
    out = {p.name: ranged[p.name] for p in ff.form.reported_shape}
    warnings: list[str] = []
    if profile and region.beyond <= OUTSIDE_RANGE_SIGMAS:
        at = {name: est.value for name, est in out.items()}
        for name, est in list(out.items()):
            out[name] = _profiled(ff, est, at, region.bound is not None)
    reported = " = ".join(p.name for p in ff.form.reported_shape)
    if region.beyond > OUTSIDE_RANGE_SIGMAS:
        pass  # reported as not determined, outside the form's range (selection and the caller say so)
    elif region.bound is not None and region.beyond > ff.tq:
        warnings.append(f"{_beyond_text(ff, region)}: two real poles cannot ring, so the nearest pair, "
                        f"{reported}, is reported; the response is better described as underdamped")
    elif region.bound is not None:
        name, limit = region.bound
        warnings.append(f"the data cannot tell the two poles apart: the best fit has {name} at {limit:g} "
                        f"(equal poles), so {reported} is reported; f0, Q and tau0 are measured, and the "
                        f"intervals of {' and '.join(p.name for p in ff.form.reported_shape)} cover every "
                        "pair the data allow")
    elif region.touches and all(e.determined for e in out.values()) and _overlap(out):
        spec = next(p for p in region.specs if p.name == region.touches[0])
        limit = spec.upper if spec.upper is not None else spec.lower
        warnings.append(f"the data cannot rule out equal poles: the 95 % interval of {spec.name} reaches "
                        f"{limit:g}, so the intervals of {' and '.join(out)} overlap")
    for est in out.values():
        if est.ci95 is not None and est.ci95[0] == 0.0:
            warnings.append(f"the data cannot rule out a single pole: the 95 % interval of {est.name} reaches 0 "
                            "(a first-order fit may describe this response as well)")
    return out, warnings


def _overlap(estimates: Mapping[str, Estimate]) -> bool:
    """True when the 95 % intervals of the reported pair overlap (or one is missing)."""
    slow, fast = estimates.values()
    if slow.ci95 is None or fast.ci95 is None:
        return True
    return fast.ci95[1] >= slow.ci95[0]


def _profiled(ff: FormFit, est: Estimate, reported: Mapping[str, float], at_bound: bool) -> Estimate:
    """``est`` with its profile-likelihood interval where the region's range is
    not to be trusted (a loosely determined quantity, see :mod:`.region_profile`)."""
    log_se = None
    if est.determined and est.ci95 is not None and est.ci95[0] > 0:
        log_se = math.log(est.ci95[1] / est.ci95[0]) / (2.0 * ff.tq)
    if not profile_wanted(log_se, est.determined):
        return est
    half = ff.tq * log_se if log_se is not None else 0.5
    prof = profile_interval(ff, est.name, reported, half, at_bound)
    if prof is not None and not prof.closed:  # the data set no upper limit
        return Estimate(est.name, est.value, None, None, est.unit,
                        "not determined (the profile likelihood does not close above)", False)
    if prof is None or not prof.low <= est.value <= prof.high:
        return est
    widen = shape_widening(ff, est.name)
    pair = " and ".join(p.name for p in ff.form.reported_shape)
    if prof.one_sided:
        method = interval_method_text(widen, f"profile likelihood over {pair}; the data allow {est.name} down to 0 "
                                "(a single pole)", ff.joint.measured_input)
        return Estimate(est.name, est.value, None, (0.0, prof.high), est.unit, method, True)
    s_log = math.log(prof.high / prof.low) / (2.0 * ff.tq)
    method = interval_method_text(widen, f"profile likelihood over {pair}", ff.joint.measured_input)
    return Estimate(est.name, est.value, est.value * s_log, (prof.low, prof.high), est.unit, method, True)


def beyond_range_sigmas(ff: FormFit) -> float:
    """Standard errors by which the fit lies beyond its form's range (0 within it or for
    ordinary forms); e.g. how clearly a two-real-pole fit's Q exceeds 1/2 (ringing)."""
    region = bounded_region(ff)
    return 0.0 if region is None else region.beyond


def _bound_text(spec: ParamSpec) -> str:
    parts = []
    if spec.lower is not None:
        parts.append(f"{spec.name} >= {spec.lower:g}")
    if spec.upper is not None:
        parts.append(f"{spec.name} <= {spec.upper:g}")
    return ", ".join(parts)


def _beyond_text(ff: FormFit, region: BoundedRegion) -> str:
    assert region.bound is not None
    name, limit = region.bound
    j = [p.name for p in region.specs].index(name)
    value = ff.joint.scaling.shape_from_log_scaled(region.specs[j], float(region.centre[j]))
    side = "above" if region.specs[j].upper is not None and value > limit else "below"
    bound = "<=" if side == "above" else ">="
    return (f"the data's best point lies at {name} = {value:.3g}, {region.beyond:.1f} standard errors "
            f"{side} this form's range ({name} {bound} {limit:g})"
            + (" (the response rings)" if side == "above" and name == "Q" else ""))
