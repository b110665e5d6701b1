"""The quantities of a fit as rows, with plain-words labels, shared by every report.

Text tables, CSV, HTML and the plot's parameter box all show the same rows:
(kind, name, Estimate), where kind is "parameter", "derived" or "component".
This module lists them in one order, names them in the trade's words and
formats a value with its 95 % interval in engineering notation (quantiphy,
through fitkit.units). It computes nothing about the fit itself.
"""

from __future__ import annotations

import math
import re
from dataclasses import dataclass, replace
from typing import Iterator

from quantiphy import Quantity

from ..results import Estimate, FitResult
from ..units import format_value

#: Text shown instead of a number when the data do not determine a quantity.
NOT_DETERMINED = "not determined"

#: The two residual RMS figures of a fit, named apart in every report: the candidate
#: forms' (from the fits that compared them, whose bins are coarser on a long record)
#: and the chosen form's final fit (Diagnostics). Both are per sample, in the output's unit.
COMPARISON_RMS = "comparison RMS residual"
FINAL_RMS = "final fit RMS residual"
COMPARISON_RMS_MEANING = ("comparison RMS residual: per sample, from the fits that compared the forms (a long "
                          "record averaged into coarser bins); with correlated noise it can exceed the "
                          f"{FINAL_RMS} shown below")

# Trade names used in results -> plain words. Unknown names get no label.
LABELS: dict[str, str] = {
    "baseline": "output level before the edge",
    "step": "output step size",
    "t0": "edge time",
    "delay": "delay after the input edge",
    "tau": "time constant",
    "tau1": "slower time constant",
    "tau2": "faster time constant",
    "tau0": "geometric mean of the two time constants, 1/omega0",
    "tau3": "third time constant",
    "tau4": "fourth time constant",
    "tau5": "fifth time constant",
    "tau_z": "zero time constant",
    "tau_dominant": "dominant time constant",
    "f0": "natural frequency",
    "omega0": "natural angular frequency",
    "Q": "quality factor",
    "zeta": "damping ratio",
    "fd": "damped (ringing) frequency",
    "damped_frequency": "damped (ringing) frequency",
    "gain": "DC gain (output step / input step)",
    "circuit_dc_gain": "DC gain the circuit's fitted parts give (its topology may fix it); measured: gain",
    "bandwidth_3db": "-3 dB bandwidth",
    "rise_time": "10-90 % rise time",
    "overshoot": "overshoot",
    "peak_time": "time to first peak",
    "settling_time_2pct": "settling time to 2 %",
    "R": "resistance", "C": "capacitance", "L": "inductance",
}

_EDGE_SUFFIX = re.compile(r"^(.*?)_(\d+)$")


def label_for(name: str) -> str:
    """Plain-words meaning of a quantity name ("tau" -> "time constant").

    Per-edge names from joint fits ("baseline_3") read "... (edge 3)"; part
    names of a circuit ("R1", "C2") read by their first letter.
    """
    if name in LABELS:
        return LABELS[name]
    match = _EDGE_SUFFIX.match(name)
    if match and match.group(1) in LABELS:
        return f"{LABELS[match.group(1)]} (edge {match.group(2)})"
    part = re.match(r"^([RCL])\d*\w*$", name)
    if part:
        return LABELS[part.group(1)]
    return ""


@dataclass(frozen=True)
class QuantityRow:
    """One line of a report: which table it belongs to, its name and estimate."""

    kind: str          # "parameter", "derived" or "component"
    name: str
    estimate: Estimate

    @property
    def label(self) -> str:
        return label_for(self.name)



def is_reportable(est: Estimate) -> bool:
    """True when an estimate may be shown as a number (determined and finite)."""
    return bool(est.determined) and est.value is not None and math.isfinite(float(est.value))


def quantity_rows(result: FitResult, *, skip_repeated: bool = False) -> Iterator[QuantityRow]:
    """Rows of a fit in report order: parameters, derived quantities, components.

    With ``skip_repeated`` a derived quantity that repeats a parameter of the
    same name (for example "tau" of a first-order fit) is left out, so a table
    shows each quantity once. When the form does not describe the capture every
    estimate comes without interval (see :func:`_not_a_measurement`), so no
    report prints an interval as if it held.
    """
    shown = _as_measured if result.describes_data else _not_a_measurement
    for name, est in result.parameters.items():
        yield QuantityRow("parameter", name, shown(est))
    for name, est in result.derived.items():
        if skip_repeated and name in result.parameters:
            continue
        yield QuantityRow("derived", name, shown(est))
    for name, est in result.components.items():
        yield QuantityRow("component", name, shown(est))


def _as_measured(est: Estimate) -> Estimate:
    return est


def _not_a_measurement(est: Estimate) -> Estimate:
    """An estimate of a fit that does not describe its capture, as every report shows
    it: the value kept for diagnosis, no interval and no standard error (they would
    read as if they held), marked not determined."""
    return replace(est, ci95=None, stderr=None, determined=False,
                   interval_method="none: the form does not describe the capture")


def format_quantity(value: float | None, unit: str = "", digits: int = 4) -> str:
    """A value in engineering notation with its unit, as reports show it.

    fitkit.units.format_value (quantiphy) with the micro sign written "µ" (as
    on the plots' axes), and percentages kept as plain numbers ("58.8 %", not
    with an SI prefix).
    """
    if unit == "%":
        text = format_value(value, "", digits)
        return text if text in ("n/a", "inf", "-inf") else f"{text} %"
    with Quantity.prefs(map_sf=Quantity.map_sf_to_greek):
        return format_value(value, unit, digits)


def digits_for(est: Estimate, minimum: int = 4, maximum: int = 9) -> int:
    """Significant digits that resolve an estimate's 95 % interval.

    Enough digits that the interval's ends differ from the value in print:
    two digits beyond the ratio of the value to the interval's half-width.
    """
    if est.ci95 is None or not is_reportable(est):
        return minimum
    lo, hi = est.ci95
    if lo is None or hi is None or not (math.isfinite(lo) and math.isfinite(hi)):
        return minimum
    half = 0.5 * abs(hi - lo)
    size = max(abs(float(est.value)), abs(lo), abs(hi))
    if half <= 0 or size <= 0:
        return minimum
    needed = math.ceil(math.log10(size / half)) + 2
    return int(min(max(needed, minimum), maximum))


def value_text(est: Estimate) -> str:
    """The value in engineering notation with its unit, or "not determined"."""
    if not is_reportable(est):
        return NOT_DETERMINED
    return format_quantity(est.value, est.unit, digits_for(est))


def interval_text(est: Estimate) -> str:
    """The 95 % interval as "[lo, hi]" with units, "" when not determined or absent.

    Each end is written by fitkit.units.format_value, so both carry their own
    SI prefix and unit ("[9.981 us, 10.02 us]").
    """
    if not is_reportable(est) or est.ci95 is None:
        return ""
    lo, hi = est.ci95
    if lo is None or hi is None:
        return ""
    digits = digits_for(est)
    return f"[{format_quantity(lo, est.unit, digits)}, {format_quantity(hi, est.unit, digits)}]"


def stderr_text(est: Estimate) -> str:
    """The standard error in engineering notation, "" when absent or undetermined."""
    if not is_reportable(est) or est.stderr is None or not math.isfinite(float(est.stderr)):
        return ""
    return format_quantity(est.stderr, est.unit, 2)


def set_aside(result: FitResult) -> list:
    """The candidate forms set aside before the comparison, in the order tried: those
    that did not converge and those the engine noted a reason against (a parameter
    not determined, a value outside the form's range). Their ``note`` says why."""
    return [c for c in result.selection if c.model != result.model and (not c.converged or _noted(c))]


def runner_up(result: FitResult):
    """The best candidate form among those compared with the chosen one (converged,
    not set aside, lowest ΔAICc), or None when every other candidate was set aside."""
    rest = [c for c in result.selection if c.model != result.model and c.converged and not _noted(c)
            and c.delta is not None and math.isfinite(c.delta)]
    return min(rest, key=lambda c: c.delta) if rest else None


def _noted(c) -> bool:
    return bool(c.note.strip()) and c.note != "chosen"


def delta_name(result: FitResult) -> str:
    """The one name of the criterion difference in every report: "ΔAICc"."""
    return "Δ" + criterion_name(result)


def delta_meaning(result: FitResult, against: str = "the chosen form's") -> str:
    """What the difference is and which way is worse, said once per report."""
    crit = criterion_name(result)
    return f"{delta_name(result)}: {crit} minus {against}; bigger = worse fit"


def runner_up_text(result: FitResult) -> str:
    """The runner-up as a reader needs it: the form, its ΔAICc and, when it fits
    better than the chosen form, why it was not chosen. "" when there is none."""
    from ..fitting.selection import MARGIN

    other = runner_up(result)
    if other is None:
        return ""
    text = f"{other.model}, {delta_name(result)} {other.delta:+.1f}"
    if other.delta < 0:
        text += (f": fits better by {-other.delta:.1f}, less than the {MARGIN:g} a form must gain to replace "
                 f"a simpler one, so {result.model} is kept")
    return text


def not_fitted(candidate) -> bool:
    """True for a candidate score of a form that was not fitted at all (its note says why:
    "not tried: ..."), as against one whose fit failed to converge."""
    return not candidate.converged and candidate.note.startswith("not tried")


def set_aside_lines(result: FitResult) -> list[str]:
    """One line per candidate set aside: "form: why"."""
    return [f"{c.model}: {c.note if c.converged or not_fitted(c) else 'did not converge'}"
            for c in set_aside(result)]


def unique_lines(lines) -> list[str]:
    """The lines in order, each once (a warning raised at two stages is shown once)."""
    return list(dict.fromkeys(str(line) for line in lines))


def criterion_name(result: FitResult) -> str:
    """Name of the information criterion used in selection ("AICc" by default)."""
    return result.diagnostics.criterion_name if result.diagnostics is not None else "AICc"
