"""The fitting entry points: fit_capture (from a Capture) and fit_segments.

Both return a :class:`fitkit.results.FitResult` holding the chosen form, its
parameters and derived quantities with 95 % intervals, the selection
evidence, residual diagnostics and plain-words warnings.
"""

from __future__ import annotations

import math
import dataclasses
from dataclasses import replace
from typing import Iterable, Mapping, Sequence

import numpy as np

from ..capture import Capture
from ..conditioning.analysis import BELOW_ONE_CODE
from ..conditioning.segment import StepSegment
from ..errors import AverageSmearedError, FitError, FitkitError
from ..units import format_value
from ..forms import get_form, pulse_response
from ..forms.base import Form
from ..results import (ChannelRoles, Estimate, FitDetails, FitDiagnostics, FitResult,
                       FittedSegment)
from .adequacy import STRUCTURE_RATIO, assess, capture_noise, drift_warning
from .alignment_smear import SMEAR_LIMIT, smear_bias
from .form_fit import FormFit, fit_form, physical_shape, sample_interval
from .candidate_forms import fit_candidates
from .further_forms import rescued, with_dead_time
from .information import has_measured_input
from .estimates import derived_estimates, level_estimates, shape_estimates
from .noise_record import NoiseRecord
from .one_response import as_one_response, worth_reading_again
from .response_shape import moves_wrong_way, returns_to_baseline
from .quantised import ROUNDED_GAUSSIAN, quantised_refit
from .selection import (CRITERION, Candidate, admissibility, choose, default_candidates,
                        outfitted_finding)

#: Above this many samples per segment, candidate forms are compared on bins
#: of at most this many points per segment (see fit_segments).
SELECTION_POINTS_PER_SEGMENT = 1000
#: A square wave of more edges than this has its candidate forms compared on its
#: first this-many edges (the evidence of eight edges decides a form as well as
#: that of hundreds, at a fraction of the cost); the chosen form is fitted to all.
SELECTION_EDGES = 8


def fit_segments(segments: Sequence[StepSegment], form: str | Form = "auto", *,
                 candidates: Iterable[str | Form] | None = None, intervals: str = "auto",
                 correlation: str = "auto", measured_input: bool | None = None,
                 start: Mapping[str, float] | None = None, fixed: Mapping[str, float] | None = None,
                 file: str = "", warnings: Iterable[str] = (), derived: bool = True,
                 noise_record: NoiseRecord | None = None) -> FitResult:
    """Fit step segments with a named form, or choose among candidates ("auto").

    intervals: "auto" (covariance on the log scale, profile likelihood where
        the sum of squares is asymmetric), "covariance" or "profile".
    correlation: "auto", "on" or "off" for the correlated-residual correction.
    measured_input: drive the form with the measured input (default: when
        every segment has an input channel).
    start, fixed: physical values by trade name (see form_fit.fit_form).
    derived: False skips the derived quantities (faster, for Monte Carlo studies).
    noise_record: the noise model of a separate quiet record of the output
        channel (fitkit.fitting.noise_record): generalised least squares with
        it, for band-limited noise on short captures.
    Raises FitError when the chosen form does not converge or nothing is determined.
    """
    segments = tuple(segments)
    if not segments:
        raise FitError("no step segments to fit", path=file or None,
                       hint="check that the capture holds at least one edge")
    if intervals not in ("auto", "covariance", "profile"):
        raise FitError(f"unknown interval method {intervals!r}", hint="use auto, covariance or profile")
    dt = sample_interval(segments)
    if noise_record is not None and correlation != "off":
        noise_record.require_timebase(dt, file)
    kwargs = dict(measured_input=measured_input, start=start, fixed=fixed, correlation=correlation,
                  noise_record=noise_record)
    if form != "auto":
        chosen_form = form if isinstance(form, Form) else get_form(form)
        ff = fit_form(segments, chosen_form, **kwargs)
        if not ff.converged:
            raise FitError(f"the {chosen_form.name} fit did not converge ({ff.fit.message})"
                           + _runaway_note(ff, dt), path=file or None, hint="try --form auto or another form")
        ff = quantised_refit(ff, correlation) or ff
        _refuse_smeared_average(ff, file)
        shape, notes = shape_estimates(ff, intervals)
        ok, why = admissibility(chosen_form, shape, dt)
        if not ok and "outside this form's range" in why:
            raise FitError(f"the {chosen_form.name} form does not describe this response: {why}",
                           path=file or None, hint="try --form auto or another form")
        extra_warn = list(notes)
        if not ok:
            extra_warn.append(f"{chosen_form.name}: {why}")
        cand = Candidate(chosen_form, ff, shape, ok, why)
        _, scores, _, _ = choose([cand]) if ok else (None, (), "", [])
        reason = f"{chosen_form.name} was asked for"
        return _build(cand, scores, reason, extra_warn + list(warnings), file, segments, derived)
    forms = [f if isinstance(f, Form) else get_form(f) for f in candidates] if candidates \
        else default_candidates(returns_to_baseline(segments), moves_wrong_way(segments[:SELECTION_EDGES]),
                                measured_input if measured_input is not None else has_measured_input(segments))
    # candidates compete on coarser bins of a long record, and on the first
    # SELECTION_EDGES edges of a long square wave (the same data for all of them);
    # the chosen form is then refitted at full resolution on every edge
    trial = tuple(segments[:SELECTION_EDGES])
    coarse = any(s.n_points > SELECTION_POINTS_PER_SEGMENT for s in trial) or len(trial) < len(segments)
    select_kwargs = dict(kwargs, max_points=SELECTION_POINTS_PER_SEGMENT) if coarse else kwargs
    if len(trial) < len(segments):
        # compared as on a long record's bins: with the correlated-residual
        # correction but no whitened refit (a form that misses the ringing
        # leaves correlated residuals, and refitting it whitened cost seconds per
        # candidate); the chosen form's fit to every edge is whitened as usual
        select_kwargs = dict(select_kwargs, whitened_refit=False)
    cands = fit_candidates(forms, trial, dt, select_kwargs, fallback=candidates is None)
    chosen, scores, reason, sel_warn = choose(cands, dt)
    _refuse_smeared_average(chosen.fit, file)  # before any rescue: the smear is the misfit's cause
    if candidates is None:
        chosen, scores, reason, sel_warn = with_dead_time(chosen, scores, reason, sel_warn, cands, trial,
                                                        dt, select_kwargs)
        chosen, scores, reason, sel_warn = rescued(chosen, scores, reason, sel_warn, cands, trial,
                                                   dt, select_kwargs)
    final = chosen.fit
    if coarse:
        refit = fit_form(segments, chosen.form, shape_start=physical_shape(chosen.fit), **kwargs)
        if refit.converged:
            final = refit
        elif len(trial) < len(segments):
            raise FitError(f"the {chosen.form.name} form chosen on the first {len(trial)} edges did not converge "
                           f"on all {len(segments)} ({refit.fit.message})", path=file or None,
                           hint="fit fewer edges (--edge-time) or average them (--average)")
    if len(trial) < len(segments):
        reason += f" (forms compared on the first {len(trial)} of {len(segments)} edges, the chosen one fitted to all)"
    final = quantised_refit(final, correlation) or final
    _refuse_smeared_average(final, file)
    shape, notes = shape_estimates(final, intervals)
    chosen = Candidate(chosen.form, final, shape, True, "")
    result = _build(chosen, scores, reason, sel_warn + notes + list(warnings), file, segments, derived)
    outfitted = outfitted_finding(chosen.form, scores) if result.describes_data else ""
    if outfitted:
        result = replace(result, adequacy=replace(result.adequacy, describes_data=False, finding=outfitted))
    if not result.describes_data:
        fixes = tuple(_alternative_forms(chosen.form, cands, trial))
        result = replace(result, adequacy=replace(result.adequacy, fixes=fixes))
    return result


def fit_capture(capture: Capture, *, model: str = "auto", input: str | None = None,
                output: str | None = None, edge_time: float | None = None, average: bool = False,
                candidates: Iterable[str] | None = None, intervals: str = "auto",
                noise_record: NoiseRecord | None = None, pulse_width: float | None = None) -> FitResult:
    """Find the steps in a capture (fitkit.conditioning.analyse_steps) and fit them.

    model: a form name or "auto" (model selection among ``candidates``).
    input, output: channel names/positions (default: chosen from the data,
        fitkit.conditioning.roles; input "none": no drive channel).
    edge_time: seconds, to fit only the edge nearest this time.
    average: coherently average the edges before fitting.
    noise_record: see :func:`fit_segments`.
    pulse_width: the drive is a train of rectangular pulses of this width (s): both
        edges of a pulse are one segment, and without a drive channel each form is
        fitted as its response to such a pulse (fitkit.forms.pulse_response, the
        width held); with one, the measured drive already is the pulse.

    When the roles were chosen from the data and the fit does not describe the
    capture, the other assignments the roles offer are fitted too, and the
    first that does describe it is kept (said in the warnings); else the
    result carries its finding and what would work.
    """
    from ..conditioning import analyse_steps  # written alongside; imported when used

    options = dict(model=model, edge_time=edge_time, average=average, candidates=candidates,
                   intervals=intervals, noise_record=noise_record, pulse_width=pulse_width)
    analysis = analyse_steps(capture, input=input, output=output, edge_time=edge_time, average=average,
                             pulse_width=pulse_width)

    def run(reading):
        return _fit_analysis(capture, reading, **options)
    try:
        result = run(analysis)
    except AverageSmearedError as err:
        # the average cannot give honest intervals here: every edge jointly instead, said so
        options["average"] = average = False
        analysis = analyse_steps(capture, input=input, output=output, edge_time=edge_time,
                                 pulse_width=pulse_width)
        result = _fit_analysis(capture, analysis, **options)
        note = f"--average not used: {err.message}; every edge fitted jointly instead"
        result = dataclasses.replace(result, warnings=(note,) + tuple(result.warnings))
    except FitError:
        # the edges found in the output could not be fitted: perhaps they are one response's swings
        alt = as_one_response(capture, analysis, None, edge_time, run, _itself) if pulse_width is None else None
        if alt is None:
            raise
        return alt
    if pulse_width is not None and analysis.input_channel is None and not result.describes_data:
        # without a drive channel the output's own edges locate the pulses; a ringing response
        # crosses its levels many times, and then its edges fitted one by one (each with the
        # previous one's tail: superposition as well) may describe it where the pulse forms did not
        plain = _fit_analysis(capture, analyse_steps(capture, input=input, output=output, edge_time=edge_time,
                                                     average=average), **dict(options, pulse_width=None))
        if plain.describes_data:
            note = (f"the forms driven by a {format_value(pulse_width, 's')} pulse left residuals "
                    f"{result.adequacy.misfit_ratio:.1f} times the noise; the output's edges fitted one by one "
                    "(each with the previous edge's tail) describe the capture")
            return dataclasses.replace(plain, warnings=(note,) + tuple(plain.warnings))
    if pulse_width is None and worth_reading_again(result):
        alt = as_one_response(capture, analysis, result, edge_time, run, _itself)
        if alt is not None:
            return alt
    if result.describes_data or (input is not None and output is not None):
        return result
    other, roles, tried = _other_roles(capture, analysis, input, output, options)
    if other is not None:
        note = (f"channel roles changed: with {_roles_words(analysis.input_channel, analysis.output_channel)} "
                f"the {result.model} fit left residuals {result.adequacy.misfit_ratio:.1f} times the noise; with "
                f"{roles} the fit describes the capture (name the channels with --input and --output to decide "
                "yourself)")
        return dataclasses.replace(other, warnings=(note,) + tuple(other.warnings))
    if tried and result.adequacy is not None:
        finding = result.adequacy.finding + "; other channel roles tried do not describe it either (" + \
            "; ".join(tried) + ")"
        result = dataclasses.replace(result, adequacy=replace(result.adequacy, finding=finding))
    return result


def _other_roles(capture: Capture, analysis, input: str | None, output: str | None, options: dict):
    """The capture fitted with the other channel roles the conditioning offers (those the user's
    --input / --output allow): (the first fit that describes the capture or None, its roles in
    words, what each other assignment tried left)."""
    from ..conditioning import analyse_steps  # written alongside; imported when used

    tried = []
    for alt_in, alt_out in analysis.alternatives:
        if (input is not None and alt_in != input) or (output is not None and alt_out != output):
            continue
        try:
            other = analyse_steps(capture, input=alt_in or "none", output=alt_out, edge_time=options["edge_time"],
                                  average=options["average"], pulse_width=options["pulse_width"])
            alt = _fit_analysis(capture, other, **options)
        except FitkitError:
            continue
        roles = _roles_words(alt_in, alt_out)
        if alt.describes_data:
            return alt, roles, tried
        tried.append(f"{roles}: residuals {alt.adequacy.misfit_ratio:.1f} times the noise")
    return None, "", tried


def _roles_words(input_channel: str | None, output_channel: str) -> str:
    """Channel roles in words: "input 'A' and output 'B'", or "no input and output 'B'"."""
    return (f"input {input_channel!r} and output {output_channel!r}" if input_channel
            else f"no input and output {output_channel!r}")


def _itself(result: FitResult) -> FitResult:
    return result


def _fit_analysis(capture: Capture, analysis, *, model, edge_time, average, candidates, intervals,
                  noise_record, pulse_width=None) -> FitResult:
    """Fit the segments of one conditioning of ``capture``; the roles' decisions lead the warnings."""
    if pulse_width is not None and analysis.input_channel is None:
        model, candidates = _pulse_forms(model, candidates, pulse_width)
    warnings = list(capture.warnings) + list(getattr(analysis, "flags", ()))
    for seg in analysis.segments:
        warnings.extend(f for f in seg.flags if f not in warnings)
    path = capture.provenance.path
    try:
        result = fit_segments(analysis.segments, model, candidates=candidates, intervals=intervals,
                              file=path, warnings=warnings, noise_record=noise_record)
        result = result.with_binning(sum(seg.n_points for seg in analysis.segments))
        result = result.with_output_unit(capture.channel(analysis.output_channel).unit)
    except FitError as err:
        if err.path is None and path:
            raise FitError(err.message, path=path, hint=err.hint) from None
        raise
    from ..conditioning.drive_period import period_of_edges
    roles = ChannelRoles(analysis.input_channel, analysis.output_channel,
                         tuple(d for d in analysis.decisions if "channel" in d))
    details = dataclasses.replace(result.details, channels=roles, drive_period=period_of_edges(analysis.edges))
    return dataclasses.replace(result, details=details)


def _pulse_forms(model, candidates, width: float):
    """(model, candidates) as responses to a pulse of ``width`` seconds (the width held); the
    candidates by default the usual low-pass forms (a pulse response comes back by itself)."""
    if model != "auto":
        return pulse_response(model if isinstance(model, Form) else get_form(model), width), candidates
    forms = candidates if candidates is not None else default_candidates(returns_to_baseline=False)
    return model, [pulse_response(f if isinstance(f, Form) else get_form(f), width) for f in forms]


# -- assembling the result ------------------------------------------------------

def _build(cand: Candidate, scores: tuple, reason: str, warnings: list[str], file: str,
           segments: Sequence[StepSegment], with_derived: bool = True) -> FitResult:
    ff = cand.fit
    assert ff is not None
    shape = cand.shape
    if not any(e.determined for e in shape.values()) and shape:
        raise FitError(f"the {ff.form.name} fit converged but none of its parameters is determined by the data",
                       path=file or None, hint="capture more of the response or reduce the noise")
    warnings = list(warnings) + [n for n in ff.notes if n not in warnings]
    if ff.objective == ROUNDED_GAUSSIAN:  # the bias the conditioning warned of is what the refit removes
        warnings = [w for w in warnings if not w.startswith(BELOW_ONE_CODE)]
        warnings.append("the output noise is below one quantisation code: fitted by maximum likelihood for a "
                        "trace rounded to codes (see diagnostics), not by least squares")
    params = dict(shape)
    params.update(level_estimates(ff, 0))
    derived = derived_estimates(ff) if with_derived else {}
    # a reported parameter listed among the derived quantities too is one estimate
    derived.update({name: shape[name] for name in derived if name in shape})
    _add_gain(ff, params, derived)
    for name, est in list(params.items()) + list(derived.items()):
        if not est.determined:
            warnings.append(f"{name} is not determined by the data (interval unbounded); not a measurement")
    diagnostics, diag_warn, adequacy = _diagnostics(ff, segments)
    if not adequacy.describes_data:
        reason = (f"{ff.form.name} fitted best of the forms tried, but does not describe the capture"
                  if len(scores) > 1 else f"{ff.form.name} was asked for, but does not describe the capture")
    fitted = _fitted_segments(ff)
    edges = tuple(level_estimates(ff, i) for i in range(len(segments)))
    seen: list[str] = []
    for w in warnings + diag_warn:
        if w not in seen:
            seen.append(w)
    details = FitDetails(form_summary=ff.form.summary, edges=edges,
                         mode="measured input" if ff.joint.measured_input else "ideal step",
                         bin_size=max(d.bin_size for d in ff.joint.data))
    return FitResult(file=file, model=ff.form.name, parameters=params, derived=derived, selection=scores,
                     selection_reason=reason, diagnostics=diagnostics, segments=fitted,
                     warnings=tuple(seen), details=details, adequacy=adequacy)


def _add_gain(ff: FormFit, params: dict[str, Estimate], derived: dict[str, Estimate]) -> None:
    """DC gain (output step / input step) and, in measured-input mode, the output step."""
    seg = ff.joint.segments[0]
    if seg.input_before is None or seg.input_after is None:
        return
    in_step = seg.input_after - seg.input_before
    if in_step == 0 or seg.drive_returns:  # no step to scale: the drive is a pulse inside the window
        return
    if "gain" in params:  # measured-input mode: the step follows from the gain
        g = params["gain"]
        ci = None if g.ci95 is None else tuple(sorted((g.ci95[0] * in_step, g.ci95[1] * in_step)))
        derived["step"] = Estimate("step", g.value * in_step, None if g.stderr is None else g.stderr * abs(in_step),
                                   ci, "V", g.interval_method, g.determined)
    elif "step" in params:
        s = params["step"]
        ci = None if s.ci95 is None else tuple(sorted((s.ci95[0] / in_step, s.ci95[1] / in_step)))
        derived["gain"] = Estimate("gain", s.value / in_step, None if s.stderr is None else s.stderr / abs(in_step),
                                   ci, "", s.interval_method, s.determined)


def _diagnostics(ff: FormFit, segments: Sequence[StepSegment]):
    """(FitDiagnostics, warnings, Adequacy) of a fit."""
    fit, sc, corr = ff.fit, ff.joint.scaling, ff.correction
    # the residuals are weighted by sqrt(samples per point): rms is per sample
    rms = math.sqrt(fit.rss / max(fit.n, 1)) * sc.volt_unit
    expected = capture_noise(segments)
    adequacy = assess(ff, expected, corr.lag1)
    shape_idx = [i for i, n in enumerate(fit.names) if n.startswith("log_")]
    widening = float(max((corr.widening[i] for i in shape_idx), default=1.0))
    structured = adequacy.structured and not adequacy.describes_data
    warnings = [w for w in (drift_warning(adequacy, ff.form.name),) if w]
    if adequacy.describes_data and math.isfinite(expected) and rms > STRUCTURE_RATIO * expected:
        warnings.append(f"residuals ({rms:.3g} V rms) are {rms / expected:.1f} times the noise "
                        f"({expected:.3g} V rms): the {ff.form.name} form may not fully describe the "
                        "response; its intervals include the misfit, not any bias it causes")
    elif corr.applied and abs(corr.lag1) > 0.9 and not math.isfinite(expected):
        warnings.append("residuals are strongly correlated; the form may not fully describe the response")
    correction = corr.description
    if corr.applied:
        correction += f"; intervals widened up to x{widening:.2f}"
    diag = FitDiagnostics(n_samples=fit.n, rms_residual=rms, noise_rms=expected, residual_lag1=corr.lag1,
                          effective_samples=fit.n / corr.variance_ratio, ci_widening=widening,
                          correction=correction, structured_residual=structured, criterion_name=CRITERION,
                          n_parameters=ff.n_parameters)
    return diag, warnings, adequacy


def _fitted_segments(ff: FormFit) -> tuple[FittedSegment, ...]:
    sc = ff.joint.scaling
    out = []
    for seg, d, piece in zip(ff.joint.segments, ff.joint.data, ff.joint.split(ff.fit.fitted)):
        time = seg.edge_time + d.t_point * sc.time_unit
        data = sc.volt_origin + d.y * sc.volt_unit
        out.append(FittedSegment(time=time, data=data, fitted=sc.volt_origin + piece * sc.volt_unit,
                                 edge_time=seg.edge_time, direction=seg.direction))
    return tuple(out)


def _alternative_forms(chosen: Form, candidates: Sequence[Candidate],
                       segments: Sequence[StepSegment]) -> list[str]:
    """For a chosen form that does not describe the capture: the other candidates
    that would (residuals near the noise), as one line each with the option to
    give and why they were set aside."""
    noise = capture_noise(segments)
    fixes = []
    for c in candidates:
        if c.form is chosen or c.fit is None or not c.fit.converged:
            continue
        if "not determined" in c.note or "did not converge" in c.note:
            continue  # a form whose own parameters the data do not fix is no fix
        other = assess(c.fit, noise, c.fit.correction.lag1)
        if other.describes_data:
            why = f" (set aside: {c.note})" if c.note else ""
            fixes.append(f"--form {c.form.name} leaves residuals {other.misfit_ratio:.1f} times the noise{why}")
    return fixes


def _refuse_smeared_average(ff: FormFit, file: str) -> None:
    """Raise AverageSmearedError when averaged segments' alignment moves a shape
    parameter by more than SMEAR_LIMIT of its standard errors (:mod:`.alignment_smear`)."""
    bias = smear_bias(ff)
    if not bias or max(bias.values()) <= SMEAR_LIMIT:
        return
    name = max(bias, key=bias.get)
    edges = sum(s.averaged_edges for s in ff.joint.segments)
    raise AverageSmearedError(
        f"the coherent average of {edges} edges is smeared by their alignment (their sub-sample shifts"
        f"{'' if ff.joint.segments[0].input is not None else ' and the noise on edge times read off the output'}"
        f"): it would bias {name} by {bias[name]:.1f} standard errors", path=file or None,
        hint="fit without --average (every edge jointly)")


def _runaway_note(ff: FormFit, dt: float) -> str:
    """Plain words when a time constant of a fit that did not converge was
    running below the sample interval (a pole the data do not show), else ''."""
    sc = ff.joint.scaling
    shape = {p.name: sc.shape_from_log_scaled(p, ff.fit.values["log_" + p.name]) for p in ff.form.shape}
    quantities = getattr(ff.form, "region_quantities", None)
    if quantities is not None:
        with np.errstate(all="ignore"):
            shape.update({k: float(np.asarray(v)) for k, v in quantities(**shape).items()})
    units = {**{p.name: p.unit for p in ff.form.shape}, **{p.name: p.unit for p in ff.form.reported_shape},
             **dict(ff.form.derived_units)}
    fast = [k for k, v in shape.items() if units.get(k) == "s" and k.startswith("tau") and math.isfinite(v)
            and 0 < v < dt]
    if not fast or not math.isfinite(dt):
        return ""
    return (f"; {fast[0]} was running below the sample interval ({shape[fast[0]]:.3g} s < {dt:.3g} s): "
            "the data show no such time constant")
