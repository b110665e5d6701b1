"""Another reading of an output-only capture: one response, not several edges.

Without a drive channel the edges are found in the output itself, and an
output that leaves its level and comes back reads two ways: a low-pass
response to a pulse (two drive edges), or a band-pass or high-pass response to
one drive edge, whose own return crosses the levels like a second edge. The
level search takes the first reading; when the forms fitted to it do not
describe the capture, :func:`one_response_reading` gives the second: one edge
(the first found, or the one the user forced) whose window runs to the ends of
the record, so that the forms which return to their baseline are tried on the
whole response. A simulated series RLC with the voltage taken across R (Q = 1,
an output-only step) was refused in the first reading (its return taken as a
falling drive edge, 9.5 times the noise) and, forced at its edge, read as a
first-order rise of tau 4.3 us over the window that the return cut short.

The second reading is tried when the first does not describe the capture,
leaves more than STRUCTURE_RATIO times the noise (the misfit that earns a
warning), or needed one of the rarer forms fitted only when the usual ones
fail (:func:`needed_rarer_form`). A Q = 0.7 band-pass read as two edges was
"described" by a first-order form at 9.6 times the noise (tau 7.8 us, its interval tight, its
creep warned of): its short baselines left the noise to the sample-to-sample
estimate and the ceiling at 10. A Q = 2 band-pass, whose first swings were
found as two jumps, was read as an underdamped low-pass at 1.85 times the
noise, f0 1 % and Q 4 % off and outside their intervals. The second reading is
kept only when it describes the capture and the first does not, or, when both
do, it leaves at most MISFIT_RATIO times the noise and less misfit than the
first or needs no rarer form where the first did; it is said so: the output
alone cannot tell a drive that fell from a response that came back, and the
drive recorded on a second channel can.
"""

from __future__ import annotations

import dataclasses
from typing import Callable, TypeVar

from ..capture import Capture
from ..conditioning.analysis import StepAnalysis, analyse_steps
from ..errors import FitkitError
from ..results import FitResult
from ..units import format_value
from .adequacy import MISFIT_RATIO, STRUCTURE_RATIO
from .further_forms import RESCUE_CANDIDATES

#: a fit's or a check's result: a dataclass with ``warnings``
Result = TypeVar("Result")


#: A capture with more edges than this is not read as one response. A band-pass step's own
#: swings crossed the levels 4 to 10 times at Q = 32 (3 mV of band-limited noise on 1 V). A
#: square wave read as one response is described by no form but costs the whole record's
#: fit: 1.0 s at 4 edges, 2.5 s at 10, 64 s at 20 and 39 s at 200 (100k samples, CPU).
MAX_SWINGS = 10


def one_response_reading(capture: Capture, analysis: StepAnalysis,
                         edge_time: float | None = None) -> StepAnalysis | None:
    """The capture conditioned as the output's response to its first edge alone (or to the
    forced ``edge_time``, s), the window running to the record's ends; None when the
    analysis has a drive channel, averages its edges, found more than MAX_SWINGS of them,
    or its first window already runs to the end of the record. A square wave read this way
    is not described by any step form (its later edges swing the output back and forth), so
    only a capture that holds one response is changed by it; the cost is one more fit, and
    only for a first reading that left over STRUCTURE_RATIO times the noise."""
    if analysis.input_channel is not None or analysis.averaged or not analysis.segments or not analysis.edges:
        return None
    if analysis.segments[0].stop >= capture.n_points or len(analysis.edges) > MAX_SWINGS:
        return None
    at = edge_time if edge_time is not None else float(capture.time[analysis.edges[0].onset_index])
    try:
        return analyse_steps(capture, input="none", output=analysis.output_channel, edge_time=at,
                             edge_alone=True)
    except FitkitError:
        return None


def worth_reading_again(first: FitResult) -> bool:
    """True when the first reading's fit does not describe the capture, leaves over
    STRUCTURE_RATIO times the noise, or needed a rarer form (:func:`needed_rarer_form`)."""
    return first.adequacy is not None and (not first.describes_data or needed_rarer_form(first)
                                           or first.adequacy.misfit_ratio > STRUCTURE_RATIO)


def needed_rarer_form(result: FitResult) -> bool:
    """True when the fit's form is one of the rarer forms fitted only when the usual candidates
    leave the capture undescribed (fitkit.fitting.further_forms.RESCUE_CANDIDATES)."""
    return result.model in RESCUE_CANDIDATES


def better_reading(first: FitResult, other: FitResult) -> bool:
    """True when ``other`` describes the capture and ``first`` does not; or, when both do, when
    ``other`` leaves at most MISFIT_RATIO times the noise and either ``first`` needed a rarer
    form where ``other`` did not or ``first`` leaves more misfit. A rarer form (a zero that
    makes a lead network, a fourth pole) can follow a band-pass response cut into pieces: on a
    real RL capture with three times its noise, the decay's noisy crossing of the mid level was
    taken for drive edges, and a pole-zero form described the pieces at the noise (tau1 6 us,
    interval tight, for the 9.3 us the whole response gives)."""
    if not other.describes_data:
        return False
    if not first.describes_data:
        return True
    ratio = other.adequacy.misfit_ratio if other.adequacy is not None else 1.0
    if ratio > MISFIT_RATIO:
        return False
    return (needed_rarer_form(first) and not needed_rarer_form(other)) or ratio < first.adequacy.misfit_ratio


def one_response_note(analysis: StepAnalysis, reading: StepAnalysis, misfit_ratio: float | None,
                      rarer_form: str = "") -> str:
    """Why the capture was read as one response: the edges set aside and the misfit of the
    first reading (residual RMS over noise; None when no form could be fitted to it), or the
    rarer form it needed."""
    at = reading.segments[0].edge_time
    others = [e.time for e in analysis.edges[1:5]]
    where = ", ".join(format_value(t, "s") for t in others)
    outcome = ("no form could be fitted" if misfit_ratio is None
               else f"only the rarer {rarer_form} form described it" if rarer_form
               else f"the fit left residuals {misfit_ratio:.1f} times the noise")
    return (f"read as one response to the edge at {format_value(at, 's')}: with its window ending at the "
            f"output's next swing{' (at ' + where + ')' if where else ''} taken as a drive edge, {outcome}; "
            "the output's swings after the edge are taken as the "
            "response's own return (a band-pass or high-pass response), which the output alone cannot tell "
            "from a drive that switched again: record the drive on a second channel to decide")


def as_one_response(capture: Capture, analysis: StepAnalysis, first: FitResult | None, edge_time: float | None,
                    run: Callable[[StepAnalysis], Result], fit_of: Callable[[Result], FitResult]) -> Result | None:
    """``run`` (a fit or a check) on the capture read as one response (:func:`one_response_reading`),
    its warnings led by :func:`one_response_note`, when that reading's fit (``fit_of`` its result)
    describes the capture better than the first reading's fit ``first`` (None: the first reading
    could not be fitted at all); else None."""
    reading = one_response_reading(capture, analysis, edge_time)
    try:
        other = None if reading is None else run(reading)
    except FitkitError:
        return None
    if other is None or not (fit_of(other).describes_data if first is None else better_reading(first, fit_of(other))):
        return None
    note = one_response_note(analysis, reading, None if first is None else first.adequacy.misfit_ratio,
                             first.model if first is not None and needed_rarer_form(first) else "")
    return dataclasses.replace(other, warnings=(note,) + tuple(other.warnings))
