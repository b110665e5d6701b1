"""Choosing a form: fit every candidate, rank by AICc, favour the simpler form.

The criterion is the corrected Akaike information criterion (AICc, Hurvich &
Tsai, Biometrika 76 (1989) 297-307). A more complex form (more parameters)
replaces a simpler one only when it lowers AICc by more than
:data:`MARGIN` (a difference of 10 is "essentially no support" for the worse
model in Burnham & Anderson, Model Selection and Multimodel Inference, 2nd ed.,
Springer 2002, section 2.6), and only when its extra shape parameters are
determined by the data: a second time constant shorter than one sample
interval, or a Q whose interval reaches down to 0.5 (no ringing resolved), is
never claimed; nor is a two-real-pole fit whose Q lies above 1/2 by more than
its interval (ringing resolved: the underdamped form's case). With correlated
residuals the likelihood part is divided by the residuals' long-run variance
ratio (fewer effective samples), so band-limited noise is not mistaken for
evidence.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, replace
from typing import Sequence

from ..errors import FitError
from ..forms import FORMS, PULSE_FORMS, get_form
from ..forms.base import Form
from ..results import CandidateScore, Estimate
from .form_fit import FormFit
from .region_estimates import OUTSIDE_RANGE, beyond_range_sigmas

#: AICc advantage a more complex form needs to be preferred.
MARGIN = 10.0
#: How a candidate set aside for a time constant below the sample interval is noted.
SHORTER_THAN_SAMPLE = "is shorter than one sample interval"
#: ... and promoted back only when its interval lies above this fraction of the sample interval.
RESOLVED_FRACTION = 0.5
CRITERION = "AICc"
#: A candidate set aside that lowers the criterion by more than the selection margin
#: and leaves an RMS residual smaller by more than this factor shows a misfit of the
#: chosen form of at least a quarter of the noise (sqrt(1.03^2 - 1)): see outfitted_finding.
OUTFITTED_RATIO = 1.03
#: Default candidates, simplest first, used when they exist in FORMS.
DEFAULT_CANDIDATES = ("first-order", "first-order-decay", "two-real-pole", "underdamped", "three-real-pole")
#: Candidates for a response that returns to its baseline after each edge, simplest first: the
#: high-pass decay that jumps at the edge, and the band-pass forms that rise from the baseline
#: (the voltage across the series resistor of an RLC) and come back.
RETURNING_CANDIDATES = ("first-order-decay", "first-order-pulse", "two-real-pole-band-pass",
                        "underdamped-band-pass")
#: ... of which these only without a drive channel (a measured drive needs no pulse wrapper).
IDEAL_DRIVE_ONLY = ("first-order-pulse",)
#: Tried as well when the response first moves the wrong way (a right-half-plane zero).
UNDERSHOOT_CANDIDATES = ("two-real-pole-undershoot", "underdamped-undershoot")
#: Tried as well when neither two-real-pole nor underdamped is supported by the data
#: (neither converged, or neither is determined): the one-parameter double pole.
#: (two-real-pole is fitted in tau0 and Q, so equal poles alone no longer need it.)
FALLBACK_CANDIDATES = ("critically-damped",)


@dataclass(frozen=True)
class Candidate:
    """One candidate's fit (None when it failed), shape estimates and a note on admissibility."""

    form: Form
    fit: FormFit | None
    shape: dict[str, Estimate]
    admissible: bool
    note: str


def default_candidates(returns_to_baseline: bool, moves_wrong_way: bool = False,
                       measured_input: bool = False) -> list[Form]:
    """The default candidate forms that exist, simplest first.

    When the response returns to its baseline after each edge the candidates
    are :data:`RETURNING_CANDIDATES` (a coupling-capacitor high-pass, or a
    band-pass), and the low-pass forms are not; else the low-pass forms of
    :data:`DEFAULT_CANDIDATES`, joined by :data:`UNDERSHOOT_CANDIDATES` when
    the response first moves against its step (they then compete by the same
    rules: AICc margin and determinability).
    """
    if returns_to_baseline:
        names = [n for n in RETURNING_CANDIDATES if (n in FORMS or n in PULSE_FORMS)
                 and not (measured_input and n in IDEAL_DRIVE_ONLY)]
    else:
        names = [n for n in DEFAULT_CANDIDATES if n in FORMS and getattr(FORMS[n], "auto_candidate", True)
                 and n != "first-order-decay"]
        if moves_wrong_way:
            names += [n for n in UNDERSHOOT_CANDIDATES if n in FORMS]
    return [get_form(n) for n in names]


def needs_fallback(candidates: Sequence[Candidate]) -> bool:
    """True when the second-order candidates were fitted but none is supported by the data."""
    second = [c for c in candidates if c.form.name in ("two-real-pole", "underdamped")]
    return bool(second) and not any(c.admissible for c in second)


def admissibility(form: Form, shape: dict[str, Estimate], sample_interval: float) -> tuple[bool, str]:
    """Whether a converged candidate's shape is supported by the data, with the reason if not."""
    for est in shape.values():
        if not est.determined and est.interval_method.startswith(OUTSIDE_RANGE):
            return False, est.interval_method
        if not est.determined:
            return False, f"{est.name} is not determined by the data"
    for spec in form.shape:
        est = shape.get(spec.name)
        lower = getattr(spec, "lower", None)
        if est is not None and lower is not None and est.value <= lower:
            return False, f"{spec.name} = {est.value:.3g} is not above {lower:g}, outside this form's range"
    for est in shape.values():
        # a dead time shorter than a sample is measurable against a measured input
        if est.unit == "s" and est.value < sample_interval and est.name != "delay":
            return False, f"{est.name} = {est.value:.3g} s {SHORTER_THAN_SAMPLE}"
        if est.unit == "Hz" and est.value > 0.5 / sample_interval:
            return False, f"{est.name} is above the Nyquist frequency"
    q = shape.get("Q")
    if q is not None and form.name == "underdamped" and q.ci95 is not None and q.ci95[0] <= 0.5:
        return False, "the Q interval reaches 0.5: ringing is not resolved"
    return True, ""


def choose(candidates: Sequence[Candidate], sample_interval: float = math.nan
           ) -> tuple[Candidate, tuple[CandidateScore, ...], str, list[str]]:
    """Pick the form; return (chosen, scores, reason in plain words, warnings).

    sample_interval (s): for a time constant below it that the data support decisively.
    """
    candidates = _set_aside_beyond_range(candidates)
    candidates, promoted = _decisive_below_sample(candidates, sample_interval)
    usable = [c for c in candidates if c.fit is not None and c.fit.converged]
    if not usable:
        raise FitError("no candidate form converged",
                       hint="check that the capture holds a clean step response, or name a form with --form")
    admissible = [c for c in usable if c.admissible]
    if not admissible:
        notes = "; ".join(f"{c.form.name}: {c.note}" for c in usable)
        raise FitError(f"no candidate form is determined by the data ({notes})",
                       hint="capture more of the response, with less noise or a faster sample rate")
    inflation = min(c.fit.correction.variance_ratio for c in admissible)
    crit = {c.form.name: c.fit.aicc(inflation) for c in usable}
    ranked = sorted(admissible, key=lambda c: (c.fit.n_parameters, c.form.order))
    chosen = ranked[0]
    reason = (f"{chosen.form.name} has the fewest parameters of the candidates the data determine, and no "
              f"candidate with more lowers {CRITERION} by more than {MARGIN:g}")
    for c in ranked[1:]:
        gain = crit[chosen.form.name] - crit[c.form.name]
        if gain > MARGIN:
            reason = (f"{c.form.name} lowers {CRITERION} by {gain:.1f} against {chosen.form.name}; a form with "
                      f"more parameters replaces a simpler one only when it lowers {CRITERION} by more "
                      f"than {MARGIN:g}")
            chosen = c
    warnings: list[str] = []
    if id(chosen) in promoted:
        warnings.append(f"{chosen.form.name}: {promoted[id(chosen)]}, but the data "
                        f"support it decisively ({CRITERION} lower by more than {MARGIN:g} than every simpler "
                        "form, its interval bounded); it is reported, and its interval says how well the "
                        "samples resolve it")
    for c in usable:
        if not c.admissible and crit[c.form.name] < crit[chosen.form.name] - MARGIN:
            warnings.append(f"{c.form.name} fits better than {chosen.form.name}, but {c.note}; "
                            f"reporting {chosen.form.name}")
    base = crit[chosen.form.name]
    scores = []
    for c in candidates:
        ok = c.fit is not None and c.fit.converged
        scores.append(CandidateScore(
            model=c.form.name, converged=ok,
            n_parameters=c.fit.n_parameters if c.fit is not None else 0,
            criterion=crit.get(c.form.name, math.nan), delta=crit.get(c.form.name, math.nan) - base,
            rms_residual=rms_residual(c.fit) if ok else math.nan,
            note=("chosen" if c is chosen else c.note or "")))
    return chosen, tuple(scores), reason, warnings


def _decisive_below_sample(candidates: Sequence[Candidate], sample_interval: float) -> tuple[list[Candidate], dict]:
    """Candidates set aside only for a time constant shorter than one sample
    interval made admissible again when the data support them decisively: every
    shape parameter determined (bounded interval) and the criterion lower than
    that of every admissible simpler candidate by more than the margin.

    Within half a sample interval a pole cannot be told from the shape of the
    drive between its samples (a converter's staircase against the straight
    lines the model draws between input samples) and is not promoted.
    Such a pole is faster than the sampling but not invisible: it delays and
    rounds the start of the response by an amount far above the noise (a
    logger at 1 kHz on a 0.4 ms pole). Dropping it for a form whose interval
    excludes the truth is the confident wrong answer. Returns the candidates
    and {id of a promoted candidate: the note it was set aside with}.
    """
    out = list(candidates)
    promoted: dict[int, str] = {}
    base = [c for c in out if c.admissible and c.fit is not None and c.fit.converged]
    if not base:
        return out, promoted
    inflation = min(c.fit.correction.variance_ratio for c in base)
    for i, c in enumerate(out):
        if c.admissible or c.fit is None or not c.fit.converged or SHORTER_THAN_SAMPLE not in c.note:
            continue
        if not all(e.determined and e.ci95 is not None and e.ci95[0] > 0 for e in c.shape.values()):
            continue
        if any(e.unit == "s" and e.ci95[0] <= RESOLVED_FRACTION * sample_interval for e in c.shape.values()):
            continue
        simpler = [b for b in base if b.fit.n_parameters < c.fit.n_parameters]
        gain = min((b.fit.aicc(inflation) - c.fit.aicc(inflation) for b in simpler), default=-math.inf)
        if gain > MARGIN:
            out[i] = replace(c, admissible=True, note="")
            promoted[id(out[i])] = c.note
    return out, promoted


def _set_aside_beyond_range(candidates: Sequence[Candidate]) -> list[Candidate]:
    """Candidates whose fit lies beyond their form's range by more than its interval (a
    two-real-pole fit whose Q is clearly above 1/2: the response rings) marked inadmissible,
    when another candidate is admissible.

    Such a fit reports the nearest point of its range (equal poles) but scores
    the sum of squares of the ringing fit, which belongs to the underdamped
    form. Alone (a form asked for by name) it is kept, with its warning.
    """
    out = list(candidates)
    for i, c in enumerate(out):
        if c.fit is None or not c.admissible:
            continue
        beyond = beyond_range_sigmas(c.fit) if c.fit.converged else 0.0
        others = any(o.admissible for o in out if o is not c)
        if beyond > c.fit.tq and others:
            out[i] = replace(c, admissible=False,
                             note=f"its fit lies {beyond:.1f} standard errors beyond the form's range "
                                  "(Q above 1/2: the response rings)")
    return out


def rms_residual(ff: FormFit) -> float:
    """RMS residual per sample (V) of a fit."""
    return math.sqrt(ff.fit.rss / max(ff.fit.n, 1)) * ff.joint.scaling.volt_unit


def outfitted_finding(chosen: Form, scores: Sequence[CandidateScore]) -> str:
    """The finding when a candidate set aside fits the capture far better than the
    chosen form ('' when none does): criterion lower by more than the selection
    margin and an RMS residual smaller by more than OUTFITTED_RATIO (the chosen
    form then leaves a misfit of at least a quarter of the noise, which that candidate
    explains). It is set aside for what its parameters say (a pole faster than a
    sample, Q at its range's end), but the chosen form, reported instead, misses
    something the data show: its numbers would be confidently wrong. (The chosen
    form lands there when the right one failed to converge.)"""
    own = next((sc for sc in scores if sc.model == chosen.name), None)
    if own is None or not math.isfinite(own.rms_residual):
        return ""
    for sc in scores:
        if (sc.model != chosen.name and sc.converged and sc.delta < -MARGIN
                and math.isfinite(sc.rms_residual) and own.rms_residual > OUTFITTED_RATIO * sc.rms_residual):
            why = f" (set aside: {sc.note})" if sc.note else ""
            return (f"the {chosen.name} form does not describe this capture: {sc.model}{why} leaves residuals "
                    f"{own.rms_residual / sc.rms_residual:.1f} times smaller, {CRITERION} lower by {-sc.delta:.0f}; "
                    f"the {chosen.name} residuals hold a misfit beyond the noise; its numbers are not measurements")
    return ""
