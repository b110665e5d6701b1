"""Known parts given with a tolerance carry it into the solved parts' intervals.

`fitkit fit ... --known R1=76.72+-1%` holds R1 at 76.72 Ohm for the fit; the
solved parts depend on that value, so its tolerance belongs in their
intervals. A tolerance +-t is taken as a rectangular distribution of half
width ln(1 + t) on the log scale, standard uncertainty ln(1 + t)/sqrt(3)
(JCGM 100:2008, the GUM, 4.3.7). With the fitted transfer-function
coefficients held, a change d ln(known) moves the solved parts by
d ln(solved) = -pinv(J_solved) J_known d ln(known) (J the scale-free
coefficient Jacobian, fitkit.circuits.identifiability.scale_free_jacobian);
each side of a solved part's 95 % interval on the log scale is then
widened in quadrature by 1.96 times the propagated standard uncertainty.
"""

from __future__ import annotations

import math
from dataclasses import replace
from typing import Mapping

import numpy as np

from ..circuits.identifiability import scale_free_jacobian
from ..errors import FitkitError
from ..results import Estimate

#: Standard normal quantile of a two-sided 95 % interval.
Z95 = 1.959964


def propagated_log_uncertainty(circuit, solved: Mapping[str, float], known: Mapping[str, float],
                               tolerances: Mapping[str, float]) -> dict[str, float]:
    """Standard uncertainty (log scale) each solved part takes from the known parts' tolerances.

    circuit: the circuit with every part valued (solved and known, SI); solved: the
    solved parts' values; known: the toleranced known parts' values; tolerances:
    part -> relative half width (0.01 for +-1 %).
    """
    names = list(solved) + list(tolerances)
    point = {**dict(solved), **{k: known[k] for k in tolerances}}
    try:
        J = scale_free_jacobian(circuit.with_unknowns(names), names, point, gain_known=False)
    except (FitkitError, ValueError, ArithmeticError, np.linalg.LinAlgError):
        return {}
    n = len(solved)
    sensitivity = -np.linalg.pinv(J[:, :n]) @ J[:, n:]
    sd_known = np.array([math.log1p(tolerances[k]) / math.sqrt(3) for k in tolerances])
    return {p: float(math.sqrt(np.sum((sensitivity[i] * sd_known) ** 2))) for i, p in enumerate(solved)}


def widened(est: Estimate, log_sd: float, tolerances: Mapping[str, float]) -> Estimate:
    """The estimate with each side of its interval widened by Z95 * log_sd in quadrature (log scale)."""
    if not est.determined or est.ci95 is None or not log_sd > 0 or not est.value > 0:
        return est
    lo, hi = est.ci95
    add = Z95 * log_sd
    down = math.sqrt(math.log(est.value / lo) ** 2 + add ** 2) if lo > 0 else math.inf
    up = math.sqrt(math.log(hi / est.value) ** 2 + add ** 2)
    ci = (est.value * math.exp(-down) if math.isfinite(down) else 0.0, est.value * math.exp(up))
    stderr = None if est.stderr is None else math.hypot(est.stderr, est.value * log_sd)
    words = ", ".join(f"{k} +-{100 * t:g} %" for k, t in tolerances.items())
    return replace(est, ci95=ci, stderr=stderr,
                   interval_method=f"{est.interval_method}; widened for the known parts' tolerances ({words})")


def with_known_tolerances(components: Mapping[str, Estimate], circuit, known: Mapping[str, float],
                          tolerances: Mapping[str, float]) -> dict[str, Estimate]:
    """Components with the known parts' tolerances carried into their intervals."""
    solved = {n: e.value for n, e in components.items() if e.determined and e.value > 0}
    if not tolerances or not solved:
        return dict(components)
    valued = circuit.with_values({**solved, **{k: known[k] for k in tolerances}})
    sd = propagated_log_uncertainty(valued, solved, known, tolerances)
    return {n: (widened(e, sd[n], tolerances) if n in sd else e) for n, e in components.items()}
