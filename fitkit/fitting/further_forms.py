"""Forms tried after the usual choice: a dead time, and the rarer forms when nothing describes.

Both run after :func:`fitkit.fitting.selection.choose` has picked among the
usual candidates, on the same (selection) segments, and change the choice only
by the same rules (AICc margin, determined parameters, and, for the rarer forms,
describing the capture: fitkit.fitting.adequacy).
"""

from __future__ import annotations

import dataclasses
from typing import Sequence

from ..conditioning.segment import StepSegment
from ..errors import FitError
from ..forms import FORMS, delayed
from ..results import CandidateScore
from ..units import format_value
from .adequacy import assess, capture_noise
from .form_fit import fit_form
from .estimates import shape_estimates
from .selection import CRITERION, MARGIN, Candidate, admissibility, rms_residual


def with_dead_time(chosen: Candidate, scores, reason: str, sel_warn: list[str], cands: list[Candidate],
                    segments: Sequence[StepSegment], dt: float, kwargs: dict):
    """In measured-input mode, the chosen form behind a dead time when the data ask for it.

    A logger that samples its output a period after its input, or a transport
    delay, shifts the whole response; without a delay parameter a fit explains
    the shift with a slower pole (a second time constant several times too
    long). The delayed variant of the chosen form (and of its simpler
    admissible rivals) is fitted; it is kept when it lowers the criterion by
    more than the margin and its shape and delay are determined. The other
    candidates' scores stay as they were.
    """
    if chosen.fit is None or not chosen.fit.joint.measured_input:
        return chosen, scores, reason, sel_warn
    inflation = min(c.fit.correction.variance_ratio for c in cands if c.admissible and c.fit is not None)
    base = chosen.fit.aicc(inflation)
    rivals = [chosen.form] + [c.form for c in cands if c.admissible and c.fit is not None and c is not chosen
                              and c.fit.n_parameters <= chosen.fit.n_parameters]
    best = None
    for form in rivals:
        cand = _fitted(delayed(form), segments, dt, kwargs)
        delay = cand.shape.get("delay") if cand is not None else None
        if not (cand and cand.admissible) or delay is None or delay.ci95 is None or not delay.ci95[0] > 0:
            continue
        crit = cand.fit.aicc(inflation)
        if crit < base - MARGIN and (best is None or crit < best[0]):
            best = (crit, cand)
    if best is None:
        return chosen, scores, reason, sel_warn
    crit, cand = best
    delay = cand.shape["delay"]
    reason = (f"{cand.form.name}: the response lags the measured input by a dead time "
              f"({format_value(delay.value, 's')}), which lowers {CRITERION} by {base - crit:.1f} against "
              f"{chosen.form.name} without it")
    note = (f"a dead time of {format_value(delay.value, 's')} between the input and the output (a logger that "
            "samples its output later than its input, or a transport delay) is fitted; a pole much faster "
            "than it cannot be told from it")
    return cand, _rescored(scores, crit, [(cand, crit)], cand), reason, list(sel_warn) + [note]


#: Forms fitted only when the usual candidates leave the capture undescribed (residuals far above
#: the noise): a zero in the left half-plane (more overshoot than the poles give), a lead or lag
#: network, a fourth pole. They then compete by the same rules, among those that describe it.
RESCUE_CANDIDATES = ("underdamped-zero", "pole-zero", "four-real-pole")


def rescued(chosen: Candidate, scores, reason: str, sel_warn: list[str], cands: list[Candidate],
             segments: Sequence[StepSegment], dt: float, kwargs: dict):
    """When the chosen form does not describe the capture, the rarer forms of RESCUE_CANDIDATES are
    fitted too; the one with the lowest AICc among those that are admissible and describe the
    capture is chosen (said in the reason). They join ``cands`` either way, so a refusal can name
    them as what would work."""
    noise = capture_noise(segments)
    if chosen.fit is None:
        return chosen, scores, reason, sel_warn
    ratio = assess(chosen.fit, noise, chosen.fit.correction.lag1)
    if ratio.describes_data:
        return chosen, scores, reason, sel_warn
    tried = {c.form.name for c in cands}
    describing = []
    for name in RESCUE_CANDIDATES:
        if name in tried or name not in FORMS:
            continue
        cand = _fitted(FORMS[name], segments, dt, kwargs)
        if cand is None:
            continue
        cands.append(cand)
        if cand.admissible and assess(cand.fit, noise, cand.fit.correction.lag1).describes_data:
            describing.append(cand)
    if not describing:
        return chosen, scores, reason, sel_warn
    inflation = min(c.fit.correction.variance_ratio for c in cands if c.admissible and c.fit is not None)
    best = min(describing, key=lambda c: c.fit.aicc(inflation))
    crit = best.fit.aicc(inflation)
    reason = (f"{best.form.name}: the usual candidates do not describe the capture ({chosen.form.name} left "
              f"residuals {ratio.misfit_ratio:.1f} times the noise); of the forms tried then, it describes it "
              f"with the lowest {CRITERION}")
    tried_now = [(c, c.fit.aicc(inflation)) for c in cands if c.form.name in RESCUE_CANDIDATES and c.fit is not None]
    return best, _rescored(scores, crit, tried_now, best), reason, list(sel_warn)


def fitted_candidate(form, segments: Sequence[StepSegment], dt: float, kwargs: dict,
                     shape_start: dict[str, float] | None = None) -> Candidate:
    """``form`` fitted to the segments as a candidate: its shape and admissibility, or, when the fit
    fails or does not converge, a candidate without a shape that says why. shape_start: physical
    shape values to start from (see form_fit.fit_form)."""
    try:
        ff = fit_form(segments, form, shape_start=shape_start, **kwargs)
    except FitError as err:
        return Candidate(form, None, {}, False, err.message)
    if not ff.converged:
        return Candidate(form, ff, {}, False, "did not converge")
    shape, _ = shape_estimates(ff, "covariance")
    ok, why = admissibility(form, shape, dt)
    return Candidate(form, ff, shape, ok, why)


def _fitted(form, segments: Sequence[StepSegment], dt: float, kwargs: dict) -> Candidate | None:
    """``form`` fitted to the segments as a candidate, or None when the fit fails or does not converge."""
    cand = fitted_candidate(form, segments, dt, kwargs)
    return cand if cand.fit is not None and cand.fit.converged else None


def _rescored(scores, crit: float, added: list[tuple[Candidate, float]], chosen: Candidate) -> tuple:
    """The selection table against a newly chosen form of criterion ``crit``: the earlier rows with
    their ΔAICc moved (the old choice no longer marked chosen), then a row for each candidate in
    ``added`` (with its criterion)."""
    rows = [dataclasses.replace(sc, delta=sc.criterion - crit, note="" if sc.note == "chosen" else sc.note)
            for sc in scores]
    rows += [CandidateScore(model=c.form.name, converged=True, n_parameters=c.fit.n_parameters, criterion=c_crit,
                            delta=c_crit - crit, rms_residual=rms_residual(c.fit),
                            note="chosen" if c is chosen else c.note)
             for c, c_crit in added]
    return tuple(rows)
