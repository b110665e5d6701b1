"""Fitting the candidate forms of a selection, in an order that lets a ringing response pass over
the forms that cannot ring.

The step response of 1/prod(1 + s tau_i) cannot ring: its impulse response is a convolution of
decaying exponentials, each positive, so it is positive and the step response rises
monotonically, without overshoot. The two second-order candidates are therefore fitted first:
the underdamped form, then the two-real-pole form (the same function, in tau0 and Q, allowed
past Q = 1/2 so that it measures how clearly the response rings). Where that fit lies beyond
Q = 1/2 by more than its interval, the forms of three to five real poles are not tried (they
cost the most of all the candidates and cannot win), nor, when the underdamped form is supported
by the data, are first order and critically damped. Where the underdamped fit's Q interval lies
wholly above 1/2, the two-real-pole fit starts at its optimum instead of searching from the grid
of starts. The candidates keep their
order in the selection table either way.
"""

from __future__ import annotations

import math
from typing import Sequence

from ..conditioning.segment import StepSegment
from ..forms import FORMS
from ..forms.base import Form
from .form_fit import physical_shape
from .further_forms import fitted_candidate
from .region_estimates import beyond_range_sigmas
from .selection import FALLBACK_CANDIDATES, Candidate, needs_fallback

#: Forms of more than two real poles alone (no zero): their step response rises without overshoot,
#: and they are passed over whenever the response rings.
REAL_POLES_ONLY = ("three-real-pole", "four-real-pole", "five-real-pole")
#: The simpler forms of real poles alone: passed over where the response rings and the
#: underdamped form is supported (where it is not, a misplaced edge may look like an overshoot,
#: and the simpler form is what is left to compare).
SIMPLER_REAL_POLES = ("first-order", "critically-damped")


def fit_candidates(forms: Sequence[Form], trial: Sequence[StepSegment], dt: float, kwargs: dict, *,
                   fallback: bool) -> list[Candidate]:
    """Every form of ``forms`` fitted to the trial segments as a candidate, in their order, or
    set aside unfitted where the response rings and the form cannot (see the module docstring).

    dt: the sample interval (s), for admissibility. kwargs: passed to form_fit.fit_form.
    fallback: the default candidates are being compared, so the forms of
    selection.FALLBACK_CANDIDATES join when no second-order form is supported.
    """
    trial = tuple(trial)
    queue = list(forms)
    early: dict[str, Candidate] = {}
    names = [f.name for f in queue]
    if "underdamped" in names and "two-real-pole" in names:
        under = fitted_candidate(queue[names.index("underdamped")], trial, dt, kwargs)
        pair = queue[names.index("two-real-pole")]
        early = {"underdamped": under, "two-real-pole": fitted_candidate(pair, trial, dt, kwargs,
                                                                         _ringing_start(under))}
    # the second-order evidence, judged once (without it, a two-real-pole fit among the candidates
    # before a form of more real poles still tells that the response rings)
    ringing = rings_reason(list(early.values()))
    underdamped_supported = any(c.form.name == "underdamped" and c.admissible for c in early.values())
    cands: list[Candidate] = []
    while queue:
        f = queue.pop(0)
        rings = ""
        if f.name in REAL_POLES_ONLY:
            rings = ringing or rings_reason(cands)
        elif f.name in SIMPLER_REAL_POLES and underdamped_supported:
            rings = ringing
        if f.name in early:
            cands.append(early.pop(f.name))
        elif rings:
            cands.append(Candidate(f, None, {}, False, rings))
            continue
        else:
            cands.append(fitted_candidate(f, trial, dt, kwargs))
        last = cands[-1].fit
        if not queue and fallback and last is not None and last.converged and needs_fallback(cands):
            tried = {c.form.name for c in cands}
            queue = [FORMS[n] for n in FALLBACK_CANDIDATES if n in FORMS and n not in tried]
    return cands


def rings_reason(candidates: Sequence[Candidate]) -> str:
    """Why a form of real poles alone is not tried ('' when it is): the two-real-pole
    fit lies beyond Q = 1/2 by more than its interval, so the response rings."""
    for c in candidates:
        if c.form.name == "two-real-pole" and c.fit is not None and c.fit.converged:
            beyond = beyond_range_sigmas(c.fit)
            if beyond > c.fit.tq:
                return (f"not tried: the response rings (the two-real-pole fit lies {beyond:.1f} standard "
                        "errors above Q = 1/2), and real poles alone give a step response that cannot ring")
    return ""


def _ringing_start(under: Candidate) -> dict[str, float] | None:
    """The two-real-pole form's start (tau0 = 1/(2 pi f0), Q, the edge delay) at an underdamped
    fit whose Q interval lies wholly above 1/2, else None (the grid of starts as usual)."""
    q = under.shape.get("Q") if under.fit is not None else None
    if q is None or q.ci95 is None or not q.ci95[0] > 0.5:
        return None
    start = physical_shape(under.fit)
    return {"tau0": 1.0 / (2.0 * math.pi * start.pop("f0")), **start}
