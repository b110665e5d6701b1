"""Fit one form to one or more edges: starts, the nonlinear fit, the correction.

``fit_form`` is the engine's single entry for a known form. It scales the
data (:mod:`.scaling`), builds the joint model (:mod:`.joint_model`), finds
starting values from the data (:mod:`.starts`), runs the nonlinear fit from
the best few starts with the levels solved linearly inside the objective
(variable projection, :mod:`.projection`; the full problem through
:mod:`.least_squares` when a start is given or a level held fixed), keeps the lowest
sum of squares, and measures the residual autocorrelation
(:mod:`.uncertainty`); when the residuals are correlated it refits by
generalised least squares with the residuals whitened by their
autoregressive model (:mod:`.whitening`; ideal-step mode, unbinned
segments). In measured-input mode the input's own noise is added to the
covariance (:mod:`.input_noise`).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, replace
from typing import Mapping, Sequence

import numpy as np

from ..conditioning.segment import StepSegment
from ..errors import FitError
from ..forms.base import Form, rise_time_scale
from .block_jacobian import weighted
from .least_squares import ModelFit, fit_model
from .information import corrected_aic, has_measured_input
from .input_noise import input_noise_covariance
from .drive_between_samples import with_drive_between_samples
from .edge_windows import consecutive_windows_cut, cut_at_fitted_edges
from .joint_model import MAX_POINTS_PER_SEGMENT, JointModel
from .projection import (ProjectedSearch, can_project, finish_projected, nonlinear_names,
                         search_projected)
from .scaling import Scaling, decimated, reference_step
from .starts import best_starts, few_edges, projected_levels
from .uncertainty import Correction, correlated_residual_correction, t_quantile
from .noise_record import NoiseRecord
from .odd_edges import edges_unlike_the_others
from .unseen_edges import unseen_edge_times
from .whitening import whitened_fit, whitening_applies

#: How many of the best grid starts are refined by the nonlinear fit.
STARTS_REFINED = 2
#: Relative tolerance of the engine's fits (the NIST checks use the core's tighter default).
ENGINE_TOLERANCE = 1e-10
#: Model evaluations allowed per free parameter in one search. A form whose
#: extra pole runs away (not supported by the data) stops here; it is then
#: continued (see _continued) and reported as converged in the objective when
#: the sum of squares has stopped falling (its runaway parameter is then
#: loosely determined, and model selection refuses such a form), else as not
#: converged.
EVALUATIONS_PER_PARAMETER = 150
#: A search stopped by its budget has converged in the objective when a further
#: budget lowers the sum of squares by less than this fraction of the noise
#: variance; it is continued at most CONTINUATIONS times to find out.
FLAT_FRACTION = 0.05
CONTINUATIONS = 5


@dataclass(frozen=True)
class FormFit:
    """A converged (or failed) fit of one form, in the engine's internal units.

    fit.values holds internal values (log shapes, scaled levels); use
    :mod:`.estimates` to turn them into physical estimates.
    """

    form: Form
    joint: JointModel
    fit: ModelFit
    correction: Correction
    tq: float
    notes: tuple[str, ...] = ()
    #: edges whose time came before their window's first sample under a single exponential: held
    #: there, their baseline, step and time not determined (:mod:`.unseen_edges`)
    unseen_edges: tuple[int, ...] = ()
    #: "least squares", or "rounded Gaussian" for the maximum-likelihood refit of
    #: a trace whose noise is below one code (:mod:`.quantised`); the sum of
    #: squares checks (profile likelihood) apply to least squares only
    objective: str = "least squares"

    @property
    def converged(self) -> bool:
        return self.fit.converged

    @property
    def n_parameters(self) -> int:
        return len(self.fit.names)

    def aicc(self, variance_inflation: float = 1.0) -> float:
        """Corrected Akaike criterion for Gaussian errors of unknown variance.

        AIC = n ln(RSS/n) + 2k with k = p + 1 (the noise variance counts), and the
        small-sample term 2k(k+1)/(n-k-1) (Hurvich & Tsai, Biometrika 76 (1989)
        297-307). ``variance_inflation`` divides the likelihood part so that
        correlated residuals (fewer effective samples) do not make noise look
        like evidence.
        """
        return corrected_aic(self.fit.rss, self.fit.n, self.n_parameters, variance_inflation)


def make_scaling(segments: Sequence[StepSegment], form: Form, measured_input: bool) -> Scaling:
    """Scaled units from the segments: the first time-scale guess and the largest step."""
    seg = max(segments, key=lambda s: abs(reference_step(s, form)))
    t_rel = np.asarray(seg.time, dtype=float) - seg.edge_time
    step = reference_step(seg, form)
    y_norm = (np.asarray(seg.output, dtype=float) - seg.baseline) / step
    span = float(np.ptp(seg.time)) if seg.time.size else 0.0
    if getattr(form, "final_value", 1.0) == 0.0:  # a decay: time to fall to 1/e is the scale
        y_norm = 1.0 - np.where(t_rel >= 0, y_norm, 0.0)
    t_unit = rise_time_scale(*decimated(t_rel, y_norm))
    if not (math.isfinite(t_unit) and t_unit > 0):
        t_unit = span / 5.0 if span > 0 else 1.0
    v_unit = abs(step)
    if not (math.isfinite(v_unit) and v_unit > 0):
        v_unit = float(np.ptp(seg.output)) or 1.0
    in_unit = 1.0
    if measured_input and seg.input_before is not None and seg.input_after is not None:
        in_unit = abs(seg.input_after - seg.input_before) or 1.0
    return Scaling(time_unit=t_unit, volt_origin=float(segments[0].baseline), volt_unit=v_unit,
                   input_unit=in_unit)


def sample_interval(segments: Sequence[StepSegment]) -> float:
    """The first segment's sample interval (s; StepSegment.sample_interval, the capture's),
    NaN with fewer than two samples."""
    return float(segments[0].sample_interval)


def to_internal(joint: JointModel, physical: Mapping[str, float]) -> dict[str, float]:
    """Physical values by trade name ("tau", "baseline", "step", "t0", "gain") to internal ones.

    Level names apply to every edge; per-edge values may be given as "baseline_2" etc.
    """
    sc = joint.scaling
    out: dict[str, float] = {}
    specs = {p.name: p for p in joint.form.shape}
    for name, value in physical.items():
        base, _, idx = name.partition("_")
        edges = [int(idx)] if idx.isdigit() else range(len(joint.segments))
        if name in specs:
            out["log_" + name] = sc.shape_to_log_scaled(specs[name], float(value))
        elif name == "gain":
            out["gain"] = float(value) * sc.input_unit / sc.volt_unit
        elif base in ("baseline", "step", "t0"):
            for i in edges:
                if base == "baseline":
                    out[f"baseline_{i}"] = (float(value) - sc.volt_origin) / sc.volt_unit
                elif base == "step":
                    out[f"step_{i}"] = float(value) / sc.volt_unit
                else:
                    out[f"t0_{i}"] = (float(value) - joint.segments[i].edge_time) / sc.time_unit
        else:
            raise FitError(f"form {joint.form.name!r} has no parameter {name!r}")
    return out


def fit_form(segments: Sequence[StepSegment], form: Form, *, measured_input: bool | None = None,
             free_t0: bool | None = None, start: Mapping[str, float] | None = None,
             fixed: Mapping[str, float] | None = None, correlation: str = "auto",
             max_points: int = MAX_POINTS_PER_SEGMENT, noise_record: NoiseRecord | None = None,
             shape_start: Mapping[str, float] | None = None, whitened_refit: bool = True) -> FormFit:
    """Fit ``form`` jointly to ``segments`` (shared shape, per-edge levels).

    measured_input: drive the transfer function with the measured input
        (default: when every segment has an input channel).
    free_t0: fit each edge's time (default: when there is no input channel and
        the form does not jump at the edge).
    start: optional physical starting values (the NIST tests use this);
        missing ones come from the data.
    fixed: physical values held fixed, e.g. {"baseline": 0.0, "t0": 0.0}; the form's own
        ``held`` values (a stated pulse width) are held too.
    correlation: "auto", "on" or "off" for the correlated-residual correction
        and the whitened refit (:mod:`.whitening`) that comes with it.
    noise_record: a separate quiet record's noise model (:mod:`.noise_record`):
        the fit is then whitened by it (generalised least squares with that
        noise model) wherever whitening applies, however short the capture.
        Its sample interval must be the capture's.
    shape_start: physical shape values by name (e.g. from a fit of a few of the
        edges) to start the search from instead of the grid of starts; the
        levels and delays are then solved for that shape. When that search
        does not converge the grid's starts are tried as usual.
    whitened_refit: False keeps the ordinary fit with its correlated-residual
        correction instead of refitting whitened (:mod:`.whitening`) when the
        residuals are correlated; a noise record is used either way.
    """
    args = dict(measured_input=measured_input, free_t0=free_t0, start=start, correlation=correlation,
                max_points=max_points, noise_record=noise_record, shape_start=shape_start,
                whitened_refit=whitened_refit)
    ff = _fit_form_once(segments, form, fixed=fixed, **args)
    unseen = unseen_edge_times(ff, fixed or {})
    if not unseen:
        return ff
    # an edge before its window under a single exponential: its time held (.unseen_edges)
    held = _fit_form_once(segments, form, fixed={**dict(fixed or {}), **unseen}, **args)
    if not held.converged:
        return ff
    return replace(held, unseen_edges=tuple(sorted(int(k[3:]) for k in unseen)))


def _fit_form_once(segments: Sequence[StepSegment], form: Form, *, measured_input: bool | None = None,
                   free_t0: bool | None = None, start: Mapping[str, float] | None = None,
                   fixed: Mapping[str, float] | None = None, correlation: str = "auto",
                   max_points: int = MAX_POINTS_PER_SEGMENT, noise_record: NoiseRecord | None = None,
                   shape_start: Mapping[str, float] | None = None, whitened_refit: bool = True) -> FormFit:
    """One fit of ``form`` as :func:`fit_form` describes, every edge time free as asked."""
    if not segments:
        raise FitError("no step segments to fit", hint="check that the capture holds at least one edge")
    # the scaled units come from the windows as given: a circuit form is built in the time unit
    # make_scaling gives for them (fitkit.part_values.direct), and the cut must not change it
    given = segments
    segments = consecutive_windows_cut(segments)
    has_input = has_measured_input(segments)
    measured_input = has_input if measured_input is None else measured_input
    if free_t0 is None:
        # A response that jumps at the edge (e.g. first-order-decay) fixes its
        # edge only to within a sample, where t0 and step trade off exactly: the
        # edge then stays at the conditioning's jump time. One that rises from
        # its baseline (every low-pass form, and the band-pass forms, which
        # return to 0 without jumping) has its edge time fitted.
        free_t0 = not has_input and not form.edge_jumps
    scaling = make_scaling(given, form, measured_input)
    joint = JointModel(form, segments, scaling, measured_input=measured_input, free_t0=free_t0,
                       max_points=max_points)
    # a wrapper's own given parameter (a stated pulse width) is held wherever the form is fitted
    fixed_int = to_internal(joint, {**dict(getattr(form, "held", {}) or {}), **dict(fixed or {})})
    project = not start and can_project(joint, fixed_int)
    if shape_start and project:
        found = _search(joint, _shape_started(joint, shape_start, fixed_int), fixed_int)
        if found.converged:
            return _finished(joint, finish_projected(joint, found, fixed_int), fixed_int, project, correlation,
                             noise_record, segments, whitened_refit)
    starts = best_starts(joint, keep=STARTS_REFINED)
    if start:
        # A given start is tried as given, and with its levels solved linearly
        # for its shape (variable projection), which rescues poor level starts.
        given = dict(starts[0]) if starts else {}
        given.update(to_internal(joint, start))
        shape = joint.shape_scaled(given)
        delay = given.get("t0_0", fixed_int.get("t0_0", 0.0))
        projected = dict(given)
        projected.update(projected_levels(joint, shape, delay)[1])
        projected.update(fixed_int)
        starts = [given, projected]
    if not starts:
        raise FitError(f"no usable starting values for form {form.name!r}",
                       hint="the trace may be flat or the edge not captured")
    # levels projected out of the nonlinear search (see .projection) unless a
    # start was given (the NIST checks start the full problem where NIST does)
    # or a level is held fixed
    if project:
        starts = _piloted(joint, starts, fixed_int)
    best: ModelFit | None = None
    best_search: ProjectedSearch | None = None
    for s in starts:
        params = {k: s.get(k, 0.0) for k in joint.names if k not in fixed_int}
        if not params:
            continue
        if project:  # the Jacobian and covariance only for the best start (below)
            found = _search(joint, params, fixed_int)
            if best_search is None or _better(found, best_search):
                best_search = found
            continue
        fit = _run(joint, params, fixed_int, project)
        if best is None or _better(fit, best):
            best = fit
    if best_search is not None:
        if not best_search.converged:
            best_search = _continued(joint, best_search, fixed_int)
        best = finish_projected(joint, best_search, fixed_int)
    assert best is not None
    if best.singular:
        # A start on a symmetry line (e.g. tau1 = tau2) gives identical Jacobian
        # columns and the fit cannot leave it: nudge the shape apart and refit.
        nudged = {k: best.values[k] + (0.1 * (-1) ** i if k.startswith("log_") else 0.0)
                  for i, k in enumerate(best.names)}
        fit = _run(joint, nudged, fixed_int, project)
        if fit.converged and (not fit.singular or fit.rss < best.rss):
            best = fit
    return _finished(joint, best, fixed_int, project, correlation, noise_record, segments, whitened_refit)


def physical_shape(ff: FormFit) -> dict[str, float]:
    """A fit's shape parameters in physical units by name, and its median edge delay
    ``t0`` (s) when the edge times were fitted: the start of a refit of the same form
    (``shape_start``)."""
    joint, values = ff.joint, ff.fit.values
    out = {spec.name: joint.scaling.shape_from_log_scaled(spec, values["log_" + spec.name])
           for spec in ff.form.shape if "log_" + spec.name in values}
    delays = [values[k] for k in values if k.startswith("t0_")]
    if delays:
        out["t0"] = float(np.median(delays)) * joint.scaling.time_unit
    return out


def _shape_started(joint: JointModel, shape_start: Mapping[str, float], fixed: Mapping[str, float]
                   ) -> dict[str, float]:
    """Internal start values from a physical shape: every edge's levels (and a
    common delay) solved for that shape."""
    internal = to_internal(joint, {k: v for k, v in shape_start.items()
                                   if k in {p.name for p in joint.form.shape}})
    shape = joint.shape_scaled({**{"log_" + p.name: 0.0 for p in joint.form.shape}, **internal})
    delay = float(shape_start.get("t0", 0.0)) / joint.scaling.time_unit if joint.free_t0 else 0.0
    start = dict(internal)
    if joint.measured_input:
        start["gain"] = 1.0
    start.update(projected_levels(joint, shape, delay)[1])
    start.update(fixed)
    return {k: start.get(k, 0.0) for k in joint.names if k not in fixed}


def _finished(joint: JointModel, best: ModelFit, fixed_int: Mapping[str, float], project: bool,
              correlation: str, noise_record: NoiseRecord | None, segments: Sequence[StepSegment],
              whitened_refit: bool = True) -> FormFit:
    """The best fit trimmed where windows overlap, in canonical order, with its
    correlated-residual correction, whitened refit and measured-input noise."""
    form = joint.form
    trimmed = cut_at_fitted_edges(joint, best)
    if trimmed is not None:  # an edge window ran into the next edge's response: refit without it
        trimmed_joint = joint.with_segments(trimmed)
        refit = _run(trimmed_joint, {k: best.values[k] for k in best.names}, fixed_int, project)
        if refit.converged or not best.converged:  # else the untrimmed fit stands, with its own windows
            joint, best = trimmed_joint, refit
    best = _canonical(joint, best)
    w = joint.weights
    pieces = joint.split(w * best.residual)
    correction = correlated_residual_correction(weighted(best.jacobian, w), pieces, list(joint.bounds),
                                                best.covariance, best.s2, correlation)
    notes: list[str] = []
    if correction.unevaluated:
        notes.append(f"the residuals are correlated (lag-1 autocorrelation {correction.lag1:.2f}) but the "
                     "correction for it could not be computed (the data leave a combination of parameters "
                     "undetermined): the intervals may be too narrow")
    searched = len(nonlinear_names(joint)) if project else len(best.names)
    whiten = dict(project=project, tol=ENGINE_TOLERANCE, max_nfev=EVALUATIONS_PER_PARAMETER * (searched + 1),
                  canonical=lambda f, j=joint: _canonical(j, f))
    if noise_record is not None and correlation != "off":
        noise_record.require_timebase(sample_interval(segments))
        if whitening_applies(joint, min_points=0):
            joint, best, correction = whitened_fit(joint, best, fixed_int, correction, "on",
                                                   whitener=noise_record.whitener, **whiten)
        else:
            notes.append("the noise record was not used: generalised least squares applies to unbinned captures "
                         "without an input channel (fit the output alone, or fewer samples per edge)")
    elif whitened_refit and correction.applied and whitening_applies(joint):  # feasible GLS, see .whitening
        joint, best, correction = whitened_fit(joint, best, fixed_int, correction, correlation, **whiten)
    if joint.measured_input:
        correction = _with_input_noise(joint, best, correction)
        correction, note = with_drive_between_samples(joint, best, correction)
        notes.extend([note] if note else [])
    notes.extend(edges_unlike_the_others(joint, best, correction))
    dof = correction.dof if correction.applied and correction.dof is not None else best.dof
    return FormFit(form, joint, best, correction, t_quantile(int(round(dof))), tuple(notes))


def _continued(joint: JointModel, stopped: ProjectedSearch, fixed: Mapping[str, float]) -> ProjectedSearch:
    """A search stopped by its evaluation budget, continued from where it stopped.

    A response whose second pole the data barely show (two real poles at low
    SNR) leaves the search crawling down a long flat valley towards tau2 -> 0:
    thousands of evaluations that lower the sum of squares by a millionth of
    itself. The search is continued up to :data:`CONTINUATIONS` times; when a
    whole further budget lowers the sum of squares by less than
    :data:`FLAT_FRACTION` of one noise variance, the objective has converged
    (about 1 % of the 3.8 variances that bound a 95 % interval), though the
    position along the valley has not; that position is what the intervals
    (profile likelihood, :mod:`.region_profile`) then report as loosely
    determined. Otherwise the best search found is returned, not converged.
    """
    n_varied = len([n for n in joint.names if n not in fixed])
    dof = joint.y.size - n_varied
    current = stopped
    for _ in range(CONTINUATIONS):
        again = _search(joint, current.values, fixed)
        if not math.isfinite(again.rss) or again.rss > current.rss:
            return current
        if again.converged:
            return again
        s2 = again.rss / dof if dof > 0 else math.inf
        if current.rss - again.rss <= FLAT_FRACTION * s2:
            return replace(again, converged=True,
                           message=(f"converged in the sum of squares (a further {again.nfev} evaluations lowered "
                                    f"it by less than {FLAT_FRACTION:g} of the noise variance), the search still "
                                    "moving along a flat valley"))
        current = again
    return current


def _piloted(joint: JointModel, starts: list[dict[str, float]], fixed: Mapping[str, float]
             ) -> list[dict[str, float]]:
    """With many edges, the one start of a fit of a few of them (:func:`.starts.few_edges`).

    The grid's starts are refined on a few edges spread over the record (a
    search there costs a few per cent of one over every edge); the search
    over every edge then starts from the best shape found, each edge's delay
    at the few edges' median, and needs only a few steps. Unchanged with few edges.
    """
    sub = few_edges(joint)
    if sub is None or not starts:
        return starts
    found: ProjectedSearch | None = None
    for s in starts:
        params = {k: s.get(k, 0.0) for k in sub.names if k not in fixed}
        trial = _search(sub, params, fixed)
        if found is None or _better(trial, found):
            found = trial
    if found is None or not math.isfinite(found.rss):
        return starts
    shape = joint.shape_scaled(found.values)
    delay = float(np.median(sub.delays_of(found.values))) if joint.free_t0 else 0.0
    start = {k: v for k, v in found.values.items() if k.startswith("log_") or k == "gain"}
    start.update(projected_levels(joint, shape, delay)[1])
    return [start]


def _search(joint: JointModel, params: Mapping[str, float], fixed: Mapping[str, float]) -> ProjectedSearch:
    """One projected search (levels solved linearly) from ``params``, without its covariance."""
    n_nonlinear = len([n for n in nonlinear_names(joint) if n not in fixed])
    return search_projected(joint, params, fixed, tol=ENGINE_TOLERANCE,
                            max_nfev=EVALUATIONS_PER_PARAMETER * (n_nonlinear + 1))


def _run(joint: JointModel, params: Mapping[str, float], fixed: Mapping[str, float], project: bool) -> ModelFit:
    """One nonlinear fit from ``params``: projected (levels solved linearly) or over all parameters."""
    if project:
        return finish_projected(joint, _search(joint, params, fixed), fixed)
    return fit_model(joint.evaluate, dict(params), None, joint.y, weights=joint.weights, fixed=fixed,
                     tol=ENGINE_TOLERANCE, max_nfev=EVALUATIONS_PER_PARAMETER * (len(params) + 1))


def _with_input_noise(joint: JointModel, fit: ModelFit, correction: Correction) -> Correction:
    """Add the measured input's own noise, carried through the model, to the covariance."""
    if fit.singular or not np.all(np.isfinite(fit.covariance)) or not fit.s2 > 0:
        return correction
    extra = input_noise_covariance(joint, fit.jacobian, fit.covariance / fit.s2, dict(fit.values))
    if not np.all(np.isfinite(extra)):
        return correction
    total = correction.covariance + extra
    with np.errstate(all="ignore"):
        widening = np.sqrt(np.diag(total) / np.diag(fit.covariance))
        own = np.sqrt(np.diag(total) / np.diag(correction.covariance))
    if not np.all(np.isfinite(widening)):
        return correction
    text = correction.description if correction.applied else "output noise treated as white"
    text += (f"; plus the measured input's own noise carried through the model "
             f"(widens up to x{float(np.max(own)):.2f})")
    return replace(correction, covariance=total, widening=np.maximum(widening, 1.0), applied=True,
                   description=text)


def _canonical(joint: JointModel, fit: ModelFit) -> ModelFit:
    """Put symmetric shape parameters in the form's canonical order (e.g. tau1 >= tau2).

    Swaps the values, covariance rows/columns and Jacobian columns of the
    parameters the form's ``canonical`` permutes.
    """
    form = joint.form
    if getattr(form, "canonical", None) is None:
        return fit
    shape = joint.shape_scaled(fit.values)
    canon = form.canonical_shape(shape)
    if all(canon[k] == shape[k] for k in shape):
        return fit
    mapping = {}  # new name -> old name holding that value
    for new, v in canon.items():
        old = min(shape, key=lambda k: abs(shape[k] - v) + (1e300 if k in mapping.values() else 0))
        mapping[new] = old
    source = {"log_" + new: "log_" + old for new, old in mapping.items()}
    names = list(fit.names)
    order = [names.index(source.get(n, n)) if source.get(n, n) in names else i
             for i, n in enumerate(names)]
    values = dict(fit.values)
    for new, old in mapping.items():
        values["log_" + new] = fit.values["log_" + old]
    perm = np.array(order)
    return replace(fit, values=values, covariance=fit.covariance[np.ix_(perm, perm)],
                   jacobian=fit.jacobian[:, perm],
                   stderr={n: fit.stderr[names[k]] for n, k in zip(names, order)})


def _better(a: ModelFit | ProjectedSearch, b: ModelFit | ProjectedSearch) -> bool:
    if a.converged != b.converged:
        return a.converged
    return a.rss < b.rss
