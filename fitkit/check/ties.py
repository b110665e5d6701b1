"""Why two tied suspects tie: the same response from two different parts.

Two single-part hypotheses tie when the capture explains them equally well.
That happens for one of two reasons, and the reader should know which:

* the parts are interchangeable at this measurement point: for any value of
  one there is a value of the other that gives the same response, so no
  capture of this node can tell them apart (in an equal-stage RC ladder,
  R1 scaled by m and C2 scaled by m give the same H(s): a2 = m R^2 C^2 and
  a1 = RC (1 + 2m); circuit algebra, Horowitz and Hill, The Art of
  Electronics, 3rd ed., ch. 1);
* or the responses differ, but by less than this capture's noise.

A swap (two parts on each other's pads) can tie with a single part the same
two ways: in the multiple-feedback low-pass, C1 and C2 exchanged leave
1/(R2 R3 C1 C2) alone and change only the damping term
(1/C2)(1/R1 + 1/R2 + 1/R3), which R1 alone can also set, so the swapped board
and R1 at one value give the same response (the gain -R2/R1 differs, and the
levels are fitted freely). ``swap_reason`` searches for that value.

``interchangeable`` tells them apart with the design's own circuit (its
measurement chain included): the part ``a`` is set to its implied value and
to a decade either side of nominal, and at each the value of ``b`` whose step
response comes closest is searched for. The responses are compared
normalised (divided by their largest magnitude), because the levels are
fitted freely. (Dividing by the last value, as "the settled value", is no
normalisation for a response that decays to zero: eight time constants
leave e^-8 of it, and the division magnified a 1e-5 mismatch of the search
to 0.6 % in an RL circuit whose L and R trade exactly through tau = L/R.)
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from scipy import optimize

from ..circuits import transfer_function
from ..circuits.description import PART_UNITS
from ..errors import CircuitError
from ..units import format_value
from .design import Design, analysed_circuit

#: Normalised responses closer than this (largest difference, share of the peak) are the same.
SAME_RESPONSE = 5e-3
#: Decades of b searched on either side of its nominal value.
SEARCH_DECADES = 2.0
#: Points of the coarse log grid over b before the local refinement.
GRID_POINTS = 41


@dataclass(frozen=True)
class TieReason:
    """Why a and b tie.

    interchangeable: for every value of a tried there is a value of b with the
        same response (largest difference below SAME_RESPONSE); for a swap, the
        swapped board's response is that of b at value_b.
    value_b: the value of b (SI) matching a at its implied value (or the swap).
    difference: the largest normalised response difference at the implied value.
    swapped: the two parts exchanged when ``a`` stands for a swap (a is then "").
    """

    a: str
    b: str
    interchangeable: bool
    value_b: float
    difference: float
    swapped: tuple[str, ...] = ()


def _response(design: Design, values: dict[str, float], measured: bool, t: np.ndarray) -> np.ndarray | None:
    try:
        y = transfer_function(analysed_circuit(design.circuit.with_values(values), measured)).step_response(t)
    except (CircuitError, FloatingPointError, ValueError, np.linalg.LinAlgError):
        return None
    if not np.all(np.isfinite(y)):
        return None
    scale = float(np.max(np.abs(y)))
    return y / scale if scale > 0 else None


def _closest(design: Design, target: np.ndarray, b: str, measured: bool, t: np.ndarray) -> tuple[float, float]:
    """(value of b, largest normalised difference) whose response is closest to ``target``."""
    nominal = design.parts[b].nominal

    def miss(log_ratio: float) -> float:
        y = _response(design, {b: nominal * math.exp(log_ratio)}, measured, t)
        return math.inf if y is None else float(np.max(np.abs(y - target)))

    span = SEARCH_DECADES * math.log(10)
    grid = np.linspace(-span, span, GRID_POINTS)
    misses = [miss(x) for x in grid]
    i = int(np.argmin(misses))
    step = grid[1] - grid[0]
    found = optimize.minimize_scalar(miss, bounds=(grid[i] - step, grid[i] + step), method="bounded",
                                     options={"xatol": 1e-6})
    x, d = (found.x, found.fun) if found.fun < misses[i] else (grid[i], misses[i])
    return nominal * math.exp(x), d


def tie_reason(design: Design, a: str, value_a: float, b: str, measured: bool) -> TieReason | None:
    """Why the single-part hypotheses "a at value_a" and "b alone" tie; None when the
    circuit cannot be evaluated."""
    t = _times(design, {a: value_a}, measured)
    nominal = design.parts[a].nominal
    found = []
    for va in (value_a, 10 * nominal, 0.1 * nominal):
        target = _response(design, {a: va}, measured, t)
        if target is None:
            return None
        found.append(_closest(design, target, b, measured, t))
    value_b, difference = found[0]
    return TieReason(a, b, all(d <= SAME_RESPONSE for _, d in found), value_b, difference)


def swap_reason(design: Design, a: str, b: str, single: str, measured: bool) -> TieReason | None:
    """Why the swap of ``a`` and ``b`` and the hypothesis "``single`` alone" tie: the value of
    ``single`` whose response comes closest to the swapped board's; None when the circuit
    cannot be evaluated."""
    swapped = {a: design.parts[b].nominal, b: design.parts[a].nominal}
    target = _response(design, swapped, measured, _times(design, swapped, measured))
    if target is None:
        return None
    value, difference = _closest(design, target, single, measured, _times(design, swapped, measured))
    return TieReason("", single, difference <= SAME_RESPONSE, value, difference, (a, b))


def _times(design: Design, values: dict[str, float], measured: bool) -> np.ndarray:
    """400 times from the edge to eight of the slowest time constants of the design at ``values``."""
    tf = transfer_function(analysed_circuit(design.circuit.with_values(values), measured))
    slow = np.abs(tf.poles.real)
    slow = slow[slow > 0]
    return np.linspace(0.0, 8.0 / slow.min() if slow.size else 12.0 * tf.time_scale, 400)


def tie_sentence(design: Design, reason: TieReason) -> str:
    """Plain words for a tie's reason."""
    lb = design.label(reason.b)
    if reason.swapped:
        swap = " and ".join(design.label(p) for p in reason.swapped)
        unit = PART_UNITS.get(design.parts[reason.b].kind, "")
        if reason.interchangeable:
            return (f"{swap} swapped give the same response as {lb} at {format_value(reason.value_b, unit)} "
                    f"(within {100 * SAME_RESPONSE:.1f} % of the peak), so no capture of this node can tell "
                    f"them apart; measure {lb} in circuit to decide")
        return (f"{swap} swapped and {lb} alone give responses that differ by {100 * reason.difference:.2g} % "
                "of the peak, less than this capture's noise resolves; measure one of the parts in circuit "
                "to decide")
    la = design.label(reason.a)
    if reason.interchangeable:
        return (f"{la} and {lb} are interchangeable at this measurement point: for any value of one, a value "
                f"of the other gives the same response (within {100 * SAME_RESPONSE:.1f} % of the peak), so "
                f"no capture of this node can tell them apart; measure one of them in circuit to decide")
    return (f"{la} and {lb} give responses that differ by {100 * reason.difference:.2g} % of the peak at their "
            "implied values, less than this capture's noise resolves; more edges averaged, a quieter "
            "vertical range or a measured value of one of them would decide")
