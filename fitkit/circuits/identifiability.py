"""Which unknown parts one step capture can determine.

A step capture determines (at best) the transfer function's coefficients. An
unknown part is determined when the coefficients change in a way no
combination of the other unknowns can undo: formally, when its unit vector
lies in the row space of the Jacobian of the (normalised) coefficients with
respect to ln(part values). The rank of that Jacobian (SVD, singular values
above ``rtol`` times the largest) is the number of independent things the
capture can tell; the null space says which parts trade off against each
other (for an RC low-pass: R and C only through their product).

When several parts are undetermined, a smallest set the user must supply is
chosen greedily, preferring resistors (usually known to 1 % or better), then
amplifier gains, inductors and capacitors (common practice, no source).
"""

from __future__ import annotations

from dataclasses import dataclass
from fractions import Fraction
from typing import Any, Mapping, Sequence

import numpy as np

from ..results import json_number
from .coefficients import coefficient_jacobian
from .description import Circuit

#: Typical values used when an unknown part has no design value (the rank is
#: structural, so any generic positive values serve).
TYPICAL_VALUES = {"resistor": 10e3, "capacitor": 10e-9, "inductor": 10e-3, "amplifier": 2.0}
#: Preference for which parts to ask the user for (first = ask first).
SUPPLY_PREFERENCE = ("resistor", "amplifier", "inductor", "capacitor")


@dataclass(frozen=True)
class IdentifiabilityReport:
    """What one step capture can and cannot tell about the unknown parts.

    unknowns: the parts considered.
    rank: number of independent combinations of them the capture determines.
    determined: parts whose value the capture fixes.
    undetermined: parts it does not fix.
    must_supply: a smallest set of undetermined parts whose values, once
        given, make all the remaining unknowns determined.
    combinations: plain descriptions of what is determined among the
        undetermined parts, e.g. "R1*C1".
    singular_values: of the scale-free (log-log) Jacobian, largest first.
    gain_known: whether the absolute gain (step amplitude at the input) was
        taken as measured.
    messages: plain-language sentences for the report.
    """

    unknowns: tuple[str, ...]
    rank: int
    determined: tuple[str, ...]
    undetermined: tuple[str, ...]
    must_supply: tuple[str, ...]
    combinations: tuple[str, ...]
    singular_values: tuple[float, ...]
    gain_known: bool
    messages: tuple[str, ...]

    @property
    def all_determined(self) -> bool:
        return not self.undetermined

    def to_dict(self) -> dict[str, Any]:
        return {"unknowns": list(self.unknowns), "rank": self.rank, "determined": list(self.determined),
                "undetermined": list(self.undetermined), "must_supply": list(self.must_supply),
                "combinations": list(self.combinations),
                "singular_values": [json_number(s) for s in self.singular_values],
                "gain_known": self.gain_known, "all_determined": self.all_determined,
                "messages": list(self.messages)}


def analysis_point(circuit: Circuit, unknowns: Sequence[str],
                   values: Mapping[str, float] | None = None) -> dict[str, float]:
    """Values for the unknowns: given, else the part's value/design value, else a typical value."""
    point = {}
    for name in unknowns:
        part = circuit.part(name)
        if values and name in values:
            point[name] = float(values[name])
        elif part.value is not None:
            point[name] = float(part.value)
        elif part.design is not None:
            point[name] = float(part.design)
        else:
            point[name] = TYPICAL_VALUES[part.kind]
    return point


def scale_free_jacobian(circuit: Circuit, unknowns: Sequence[str], point: Mapping[str, float],
                        gain_known: bool = True) -> np.ndarray:
    """d ln|coefficient| / d ln(part) for the non-zero coefficients.

    Without a known gain, the numerator is divided by its lowest-order
    non-zero coefficient first, so only the response's shape counts.
    """
    cj = coefficient_jacobian(circuit, unknowns, point)
    values, J = cj.values.copy(), cj.jacobian.copy()
    n_num = cj.num_degree + 1
    if not gain_known:
        num, dnum = values[:n_num], J[:n_num]
        nz = np.nonzero(num)[0]
        if nz.size:
            ref = nz[-1]
            # d(n_i / n_ref) = (dn_i - (n_i / n_ref) dn_ref) / n_ref
            J[:n_num] = (dnum - np.outer(num / num[ref], dnum[ref])) / num[ref]
            values[:n_num] = num / num[ref]
    keep = values != 0
    return J[keep] / np.abs(values[keep])[:, None]


def _rank(J: np.ndarray, rtol: float) -> tuple[int, np.ndarray, np.ndarray]:
    if J.size == 0:
        return 0, np.zeros(0), np.eye(J.shape[1])
    _, s, vt = np.linalg.svd(J, full_matrices=True)
    r = int(np.sum(s > rtol * s[0])) if s.size and s[0] > 0 else 0
    return r, s, vt[r:].T


def _monomial(names: Sequence[str], vector: np.ndarray) -> str:
    """The product of powers of two parts left unchanged along a null direction."""
    a, b = vector
    exps = np.array([b, -a]) / max(abs(a), abs(b))
    fr = [Fraction(float(e)).limit_denominator(4) for e in exps]
    if fr[0] < 0 or (fr[0] == 0 and fr[1] < 0):
        fr = [-f for f in fr]
    num = [(n, f) for n, f in zip(names, fr) if f > 0]
    den = [(n, -f) for n, f in zip(names, fr) if f < 0]

    def word(items):
        return "*".join(n if f == 1 else f"{n}^{f}" for n, f in items)

    return word(num) + (f"/{word(den)}" if den else "")


def identifiability(circuit: Circuit, unknowns: Sequence[str] | None = None,
                    values: Mapping[str, float] | None = None, *, gain_known: bool = True,
                    rtol: float = 1e-6) -> IdentifiabilityReport:
    """Which of ``unknowns`` (default: the circuit's unknown parts) one step capture determines.

    Analysed at ``values`` (default: design values, else typical values).
    ``gain_known=False`` when the input step's amplitude is not measured, so
    the overall gain carries no information.
    """
    unknowns = tuple(circuit.unknowns if unknowns is None else unknowns)
    if not unknowns:
        return IdentifiabilityReport((), 0, (), (), (), (), (), gain_known,
                                     ("no part is unknown: nothing to determine",))
    point = analysis_point(circuit, unknowns, values)
    J_local = scale_free_jacobian(circuit, unknowns, point, gain_known)
    local_rank = _rank(J_local, rtol)[0]
    # The structural rank: at a generic point near the given one (special
    # values, such as equal stage time constants, can lose rank locally).
    rng = np.random.default_rng(20261201)
    generic = {n: v * float(np.exp(rng.uniform(-0.5, 0.5))) if circuit.part(n).kind != "amplifier" else v
               for n, v in point.items()}
    J = scale_free_jacobian(circuit, unknowns, generic, gain_known)
    rank, s, null = _rank(J, rtol)
    if local_rank >= rank:
        J, s = J_local, np.linalg.svd(J_local, compute_uv=False)
    free = np.linalg.norm(null, axis=1) if null.size else np.zeros(len(unknowns))
    undetermined = tuple(n for n, f in zip(unknowns, free) if f > 1e-5)
    determined = tuple(n for n in unknowns if n not in undetermined)

    must_supply: list[str] = []
    remaining = list(unknowns)
    order = sorted(undetermined, key=lambda n: (SUPPLY_PREFERENCE.index(circuit.part(n).kind),
                                                unknowns.index(n)))
    while len(remaining) > rank:
        for cand in order:
            if cand in must_supply:
                continue
            trial = [n for n in remaining if n != cand]
            cols = [unknowns.index(n) for n in trial]
            if _rank(J[:, cols], rtol)[0] == rank:
                must_supply.append(cand)
                remaining = trial
                break
        else:  # pragma: no cover - the greedy always finds one (rank is preserved by some column)
            break

    combinations = []
    for k in range(null.shape[1] if null.size else 0):
        v = null[:, k]
        involved = [i for i in range(len(unknowns)) if abs(v[i]) > 1e-5]
        if len(involved) == 2 and null.shape[1] == 1:
            combinations.append(_monomial([unknowns[i] for i in involved], v[involved]))
    messages = _messages(unknowns, rank, determined, undetermined, tuple(must_supply),
                         tuple(combinations), gain_known)
    if local_rank < rank:
        messages += (f"at these values the capture separates only {local_rank} of the {rank} combinations "
                     "(for example two stages with equal time constants cannot be told apart); "
                     "parts at or near such values are poorly determined",)
    return IdentifiabilityReport(unknowns, rank, determined, undetermined, tuple(must_supply),
                                 tuple(combinations), tuple(float(x) for x in s), gain_known, messages)


def _messages(unknowns, rank, determined, undetermined, must_supply, combinations, gain_known) -> tuple[str, ...]:
    msgs = []
    if not undetermined:
        msgs.append(f"one step capture determines {'all ' if len(unknowns) > 1 else ''}"
                    f"the unknown part{'s' if len(unknowns) > 1 else ''} " + ", ".join(unknowns))
    else:
        if determined:
            msgs.append("one step capture determines " + ", ".join(determined))
        k = rank - len(determined)
        what = (f"only the combination {combinations[0]} is determined" if combinations
                else f"only {k} independent combination{'s' if k != 1 else ''} of them "
                     f"{'are' if k != 1 else 'is'} determined")
        msgs.append(f"it cannot determine {', '.join(undetermined)} separately ({what}); "
                    "no value is reported for them as if measured")
        msgs.append(f"supply the value of {' and '.join(must_supply)} (for example from the parts list) "
                    "and the other unknowns become determined")
    if not gain_known:
        msgs.append("the input step amplitude is not measured, so the overall gain was not used")
    return tuple(msgs)
