"""Profile-likelihood intervals of a region form's reported time constants.

A form fitted in internal coordinates (two real poles: fitted as tau0 and Q,
reported as tau1 >= tau2) gets its reported parameters' intervals as ranges
over the confidence region of the fit coordinates (:mod:`.region_estimates`). That
region is the quadratic approximation of the sum of squares, good while a
quantity is well determined. A barely determined second pole (relative error
of tens of per cent) is another matter: as tau2 -> 0 the response tends to a
single pole with a delay, the sum of squares flattens into a plateau, and the
quadratic region's range undercovers (benchmarks/bench_accuracy.py measured
81-87 % for tau2/tau1 = 0.02 at 40 dB).

Here each such quantity q gets the profile-likelihood interval

    {v : S_p(v) - S_best <= tq^2 s^2 w^2},   S_p(v) = min S over everything with q = v,

where S is the weighted sum of squares, s^2 the fit's residual variance, tq
the t quantile the covariance intervals use and w the widening for correlated
residuals (Venzon & Moolgavkar, Appl. Statist. 37 (1988) 87-94; Bates & Watts,
Nonlinear Regression Analysis and Its Applications, 1988, sec. 6.1 - section
from memory). In the quadratic case it is the same interval as the region's
range. Levels are solved linearly inside S (variable projection, as the
search does) and free edge delays are searched with the other time constant.

Where the profile does not reach the threshold before q reaches zero (the
data allow a single pole), the interval is one-sided, (0, v_hi]: an honest
"tau2 is at most v_hi". Where it does not close upwards within
:data:`PROFILE_REACH` (a factor e^20, 5e8), the quantity stays "not determined".
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Callable, Mapping

import numpy as np
from scipy import optimize

from .form_fit import FormFit, sample_interval
from .projection import least_squares_search, nonlinear_names, projected_model

#: Reported quantities whose linearised log standard error exceeds this get a
#: profile-likelihood interval (below it the quadratic region is accurate).
PROFILE_ABOVE_LOG_STDERR = 0.05
#: First step (natural-log units, 5 %) of the outward search of the profile.
FIRST_OFFSET = 0.05
#: How far (natural-log units) from its value a quantity's profile is followed.
PROFILE_REACH = 20.0
#: Accuracy of the interval ends, natural-log units (0.1 %).
END_TOLERANCE = 1e-3
#: The reference sum of squares is lowered to a better fit the profile finds
#: when it is lower by more than this fraction of the threshold.
REFERENCE_SLACK = 0.01
#: A time constant below this fraction of the sample interval counts as zero.
ZERO_FRACTION = 1e-3
#: The other time constant is held within this factor (natural-log units) of the profiled one.
OTHER_SPAN = 20.0
#: Evaluations allowed to each inner search (other time constant and delays).
INNER_EVALUATIONS = 200


@dataclass(frozen=True)
class ProfileInterval:
    """A profile-likelihood interval of one reported quantity (SI units).

    low is 0.0 when the data allow the quantity to vanish (one-sided);
    closed: False when the profile did not reach the threshold upwards (then
    the quantity is not determined).
    """

    name: str
    low: float
    high: float
    closed: bool

    @property
    def one_sided(self) -> bool:
        return self.low == 0.0


def _level_solver(ff: FormFit) -> Callable[[dict[str, float]], np.ndarray] | None:
    """residual(values) with the levels solved linearly for the shape and delays in
    ``values`` (internal units), in the terms of the fit's own objective; None
    when the levels cannot be projected out (a level held fixed)."""
    joint = ff.joint
    fixed_levels = [n for n in ff.fit.values if n not in ff.fit.names
                    and (n.startswith("baseline_") or n.startswith("step_") or n == "gain")]
    if fixed_levels:
        return None
    whitener = getattr(joint, "whitener", None)
    if whitener is None:
        w = joint.weights

        def residual(values: dict[str, float]) -> np.ndarray:
            return w * (joint.y - projected_model(joint, values)[1])
        return residual
    from .whitening import _whitened_levels  # the whitened fit's own level solve

    base = joint.unwhitened
    if base.measured_input:
        return None
    y_w = whitener.apply(base.weights * base.y, base.bounds)
    ones_w = whitener.apply(base.weights, base.bounds)
    scale = joint.scale

    def whitened_residual(values: dict[str, float]) -> np.ndarray:
        return scale * (y_w - _whitened_levels(base, values, whitener, y_w, ones_w)[1])
    return whitened_residual


class _Profile:
    """S_p(v) for one reported quantity, with warm starts along the way."""

    def __init__(self, ff: FormFit, index: int, residual: Callable[[dict[str, float]], np.ndarray],
                 reported: Mapping[str, float]) -> None:
        self.ff, self.index, self.residual = ff, index, residual
        form, sc = ff.form, ff.joint.scaling
        self.reported = form.reported_shape
        self.to_fit = form.fit_coordinates
        self.unit = sc.shape_unit(self.reported[index])
        self.fit_units = [sc.shape_unit(p) for p in form.shape]
        self.fit_keys = ["log_" + p.name for p in form.shape]
        self.delays = [n for n in nonlinear_names(ff.joint) if n in ff.fit.names and n not in self.fit_keys]
        self.best_logs = [math.log(float(reported[p.name]) / self.unit) for p in self.reported]
        self.base = dict(ff.fit.values)
        self.starts: list[tuple[float, np.ndarray]] = []

    def values_at(self, logs: tuple[float, float], delays: np.ndarray) -> dict[str, float]:
        """Internal values for the reported pair (log scaled) and the delays."""
        pair = {p.name: math.exp(v) * self.unit for p, v in zip(self.reported, logs)}
        fit = self.to_fit(**pair)
        vals = dict(self.base)
        for key, p, u in zip(self.fit_keys, self.ff.form.shape, self.fit_units):
            vals[key] = math.log(fit[p.name] / u)
        vals.update(zip(self.delays, (float(d) for d in delays)))
        return vals

    def _pair(self, v: float, other: float) -> tuple[float, float]:
        """(slower, faster) logs; the other constant is kept within a factor
        e^OTHER_SPAN of v (beyond it the pole no longer shows, and the fit
        coordinates would leave the range the model evaluates faithfully)."""
        if self.index == 0:
            return v, max(other, v - OTHER_SPAN)
        return min(other, v + OTHER_SPAN), v

    def rss(self, v: float) -> float:
        """Smallest sum of squares with the quantity at exp(v) (scaled units)."""
        k = self.index
        near = min(self.starts, key=lambda s: abs(s[0] - v))[1] if self.starts else \
            np.array([self.best_logs[1 - k]] + [self.base[d] for d in self.delays])

        def res(theta: np.ndarray) -> np.ndarray:
            return self.residual(self.values_at(self._pair(v, float(theta[0])), theta[1:]))

        theta, _, _, _ = least_squares_search(res, near.copy(), self.ff.joint.y.shape, tol=1e-8,
                                              max_nfev=INNER_EVALUATIONS)
        # the slower constant stays the slower: beyond the crossing the best
        # point of the ordered pair is on the equal-pole line (S is symmetric)
        crossed = theta[0] < v if k == 1 else theta[0] > v
        if crossed:
            theta = theta.copy()
            theta[0] = v
            if self.delays:
                def res_delays(d: np.ndarray) -> np.ndarray:
                    return self.residual(self.values_at((v, v), d))
                d, _, _, _ = least_squares_search(res_delays, theta[1:], self.ff.joint.y.shape, tol=1e-8,
                                                  max_nfev=INNER_EVALUATIONS)
                theta[1:] = d
        with np.errstate(all="ignore"):
            r = res(theta)
            s = float(r @ r)
        if math.isfinite(s):
            self.starts.append((v, theta))
        return s if math.isfinite(s) else math.inf


def _outward_offsets(reach: float) -> list[float]:
    """Distances (log units) at which the profile is tried outwards: doubling from
    :data:`FIRST_OFFSET` up to ``reach``, which is always the last (none when
    ``reach`` is not positive). Starting small finds the rise of the profile
    next to the fit even when the linearised interval was far too wide (the
    likelihood of a slow ramp under low-pass noise can dip below the threshold
    again far away; the interval is the stretch around the fit)."""
    if not reach > 0:
        return []
    offsets, step = [], min(FIRST_OFFSET, reach)
    while step < reach:
        offsets.append(step)
        step *= 2.0
    return offsets + [reach]


def profile_interval(ff: FormFit, name: str, reported: Mapping[str, float], half_width_log: float,
                     at_bound: bool = False) -> ProfileInterval | None:
    """The profile-likelihood interval of reported quantity ``name`` (see module
    docstring), or None when it cannot be computed (the caller keeps the region's
    range).

    reported: the reported pair at the reported point (SI), where the profile starts.
    half_width_log: the linearised interval's half-width in log units (where to
        look for the best fit within the range when ``at_bound``).
    at_bound: the fit lies beyond the form's range (e.g. Q > 1/2); the reference
        sum of squares is then the best within the range, found along the profile.
    """
    form = ff.form
    names = [p.name for p in form.reported_shape]
    if getattr(form, "fit_coordinates", None) is None or name not in names or len(names) != 2:
        return None
    if not (ff.fit.converged and math.isfinite(ff.fit.s2) and ff.fit.s2 > 0):
        return None
    if not all(math.isfinite(reported.get(n, math.nan)) and reported[n] > 0 for n in names):
        return None
    residual = _level_solver(ff)
    if residual is None:
        return None
    profile = _Profile(ff, names.index(name), residual, reported)
    centre = profile.best_logs[names.index(name)]
    # Downwards the profile is followed to a thousandth of the sample interval:
    # a time constant that short is a step within one sample, no different
    # from zero (common practice, no source), and the model's closed forms lose
    # accuracy far below it; a fit that ran further down starts from there.
    dt = sample_interval(ff.joint.segments)
    floor = math.log(ZERO_FRACTION * dt / profile.unit) if dt > 0 else centre - PROFILE_REACH
    centre = max(centre, floor)
    if at_bound:
        # the best fit within the range lies on the bound, near the reported point
        span = min(max(half_width_log, 0.05), 1.0)
        found = optimize.minimize_scalar(profile.rss, bounds=(centre - span, centre + span), method="bounded",
                                         options={"xatol": END_TOLERANCE})
        if found.success and math.isfinite(found.fun):
            centre = float(found.x)
        best = profile.rss(centre)
    else:
        with np.errstate(all="ignore"):
            r0 = residual(dict(ff.fit.values))
        best = float(r0 @ r0)
    if not math.isfinite(best):
        return None
    threshold = ff.tq ** 2 * ff.fit.s2 * shape_widening(ff, name) ** 2
    ends, lowest = _ends(profile, centre, floor, best, threshold)
    if ends is not None and lowest < best - REFERENCE_SLACK * threshold:
        # the profile found a better fit than the reported one (a search that
        # stopped in a flat valley): the likelihood ratio is taken against it
        ends, _ = _ends(profile, centre, floor, lowest, threshold)
    if ends is None:  # the inner search cannot reproduce the fit: keep the region's range
        return None
    low_end, high_end = ends
    low = 0.0 if low_end is None else math.exp(low_end) * profile.unit
    high = math.inf if high_end is None else math.exp(high_end) * profile.unit
    return ProfileInterval(name, low, high, high_end is not None)


def _ends(profile: _Profile, centre: float, floor: float, best: float, threshold: float
          ) -> tuple[tuple[float | None, float | None] | None, float]:
    """(low end, high end) of {v : S_p(v) - best <= threshold} in log scaled units
    (None for an end not reached: below the floor, or beyond PROFILE_REACH), and
    the smallest S_p seen; (None, lowest) when the profile at ``centre`` is
    already above the threshold."""
    seen: dict[float, float] = {}

    def excess(v: float) -> float:
        """S_p(v) - best - threshold; each v evaluated once, so that the bracket's
        signs stay as found (the inner search's warm start depends on the path)."""
        if v not in seen:
            seen[v] = profile.rss(v) - best - threshold
        return seen[v]

    if not excess(centre) < 0:
        return None, best
    ends: list[float | None] = []
    for side, reach in ((-1.0, centre - floor), (1.0, PROFILE_REACH)):
        inside, outside = centre, None
        for offset in _outward_offsets(reach):
            trial = centre + side * offset
            if excess(trial) > 0:
                outside = trial
                break
            inside = trial
        if outside is None:
            ends.append(None)
            continue
        lo, hi = sorted((inside, outside))
        ends.append(optimize.brentq(excess, lo, hi, xtol=END_TOLERANCE))
    lowest = min(seen.values()) + best + threshold
    return (ends[0], ends[1]), lowest


def shape_widening(ff: FormFit, name: str) -> float:
    """The widening for correlated residuals of reported quantity ``name`` (>= 1):
    sqrt(g^T V g / g^T C g) with g the gradient of its log over the fit
    coordinates, V the corrected and C the plain covariance. Per coordinate the
    ratio is ill-defined along a direction the data barely determine (tau2 -> 0
    makes log tau0 and log Q nearly collinear, and each may read x400 while
    log tau1 = log tau0 - log Q reads x3), and where even the quantity's own
    ratio exceeds every other parameter's, the largest of those is used.
    Where the gradient cannot be taken, the smallest coordinate's widening."""
    names = list(ff.fit.names)
    keys = [k for k in names if k.startswith("log_")]
    factors = [float(ff.correction.widening[names.index(k)]) for k in keys]
    finite = [f for f in factors if math.isfinite(f)]
    fallback = max(1.0, min(finite)) if finite else 1.0
    form = ff.form
    if form.region_quantities is None or len(keys) != len(form.shape):
        return fallback
    sc = ff.joint.scaling
    idx = [names.index("log_" + p.name) for p in form.shape]
    theta = np.array([ff.fit.values["log_" + p.name] for p in form.shape])

    def log_quantity(th: np.ndarray) -> float:
        physical = {p.name: math.exp(v) * sc.shape_unit(p) for p, v in zip(form.shape, th)}
        with np.errstate(all="ignore"):
            value = float(np.asarray(form.region_quantities(**physical)[name]))
        return math.log(value) if value > 0 else math.nan

    h = 1e-5
    grad = np.array([(log_quantity(theta + h * e) - log_quantity(theta - h * e)) / (2 * h)
                     for e in np.eye(theta.size)])
    plain = ff.fit.covariance[np.ix_(idx, idx)]
    corrected = ff.correction.covariance[np.ix_(idx, idx)]
    with np.errstate(all="ignore"):
        top, bottom = float(grad @ corrected @ grad), float(grad @ plain @ grad)
    if not (math.isfinite(top) and math.isfinite(bottom) and top > 0 and bottom > 0):
        return fallback
    ratio = math.sqrt(top / bottom)
    # a shape block so degenerate that even this direction's ratio exceeds every
    # level's and delay's (a fit that ran tau2 to nothing) is capped by them: the
    # noise's correlation widens all parameters alike
    others = [float(w) for k, w in zip(names, ff.correction.widening) if not k.startswith("log_")
              and math.isfinite(float(w))]
    if others and ratio > max(others):
        ratio = max(others)
    return max(1.0, ratio)


def profile_wanted(log_stderr: float | None, determined: bool) -> bool:
    """True when a reported quantity's linearised interval should be replaced by its profile."""
    return (not determined) or log_stderr is None or not math.isfinite(log_stderr) \
        or log_stderr > PROFILE_ABOVE_LOG_STDERR
