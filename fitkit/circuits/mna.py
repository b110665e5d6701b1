"""Modified nodal analysis: the transfer function of a small linear circuit, numerically.

The circuit's equations in the Laplace domain are ``(G + s C) x = b``: x holds
the node voltages (ground excluded) and the currents of the branches whose
current must be an unknown (the driving source, each inductor, each amplifier
output); G holds conductances and incidence entries, C capacitances and
(negated) inductances; b drives the source's branch row with 1 V. The
transfer function H(s) = V(measured node) / V(source).

How the polynomials are found (robust and exact for polynomials):

1. Frequency is scaled, s = w0 z, with w0 the reciprocal of a characteristic
   time of the parts (then rebalanced so the first and last denominator
   coefficients are equal), so the polynomial coefficients in z are of
   comparable size.
2. At M points z_j on the unit circle, det(G + w0 z_j C) (Cramer's denominator)
   and H(z_j) (by solving the system) are computed, after row and column
   equilibration. D(z) = det is a polynomial of degree at most the number of
   reactive parts, and so is N(z) = H(z) D(z); both follow exactly from their
   M samples by the discrete Fourier transform (interpolation on the unit circle).
3. Coefficients below 1e-10 of the largest are structural zeros. Pole-zero
   pairs shared by N and D (parts the measured node cannot see, e.g. behind a
   buffer) are removed: candidate pairs are those whose roots nearly coincide,
   and a reduction is accepted when the lower-degree transfer function, refitted
   to the samples by linear least squares, still reproduces them to rounding.
   This leaves the minimal transfer function with accurate coefficients even
   for multiple roots.

Normalisation (the canonical form used everywhere in fitkit.circuits): num
and den in descending powers of s, scaled so that den's lowest-order non-zero
coefficient is 1. For a circuit without a pole at s = 0 (all library
topologies) den[-1] = 1 and num[-1] is then the DC gain.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Mapping

import numpy as np

from .description import Circuit

#: Coefficients smaller than this fraction of the largest (in scaled frequency) are zero.
ZERO_COEFFICIENT = 1e-10
#: Pole-zero pairs closer than this (relative) are candidates for cancellation ...
CANDIDATE_DISTANCE = 1e-3
#: ... and cancel when the reduced transfer function still fits every sample to this (relative).
REFIT_TOLERANCE = 1e-9


@dataclass(frozen=True)
class MnaSystem:
    """The matrices of (G + s C) x = b for one circuit with all values filled in.

    labels: what each unknown of x is ("V(n1)", "I(L1)", ...).
    output: index of the measured node's voltage in x.
    reactive: number of capacitors and inductors (bounds the polynomial degree).
    time_scale: a characteristic time of the parts in seconds (for scaling).
    """

    G: np.ndarray
    C: np.ndarray
    b: np.ndarray
    output: int
    labels: tuple[str, ...]
    reactive: int
    time_scale: float


def build_mna(circuit: Circuit, values: Mapping[str, float] | None = None) -> MnaSystem:
    """Assemble G, C and b for ``circuit`` (measurement chain included as parts).

    ``values`` overrides part values (SI units), e.g. for unknown parts. Every
    part must end up with a value, else CircuitError.
    """
    if values:
        circuit = circuit.with_values(values)
    circuit = circuit.with_chain_parts().validate(need_values=True)
    nodes = circuit.nodes
    index = {n: i for i, n in enumerate(nodes)}
    branches = ["source"] + [p.name for p in circuit.parts if p.kind in ("inductor", "amplifier")]
    size = len(nodes) + len(branches)
    G = np.zeros((size, size))
    C = np.zeros((size, size))
    b = np.zeros(size)
    row = {name: len(nodes) + k for k, name in enumerate(branches)}

    def stamp(matrix: np.ndarray, a: str, c: str, y: float) -> None:
        ia, ic = index.get(a), index.get(c)
        if ia is not None:
            matrix[ia, ia] += y
        if ic is not None:
            matrix[ic, ic] += y
        if ia is not None and ic is not None:
            matrix[ia, ic] -= y
            matrix[ic, ia] -= y

    def incidence(node: str, k: int, sign: float) -> None:
        i = index.get(node)
        if i is not None:
            G[i, k] += sign      # branch current leaves/enters the node (KCL)
            G[k, i] += sign      # node voltage in the branch equation

    k = row["source"]
    incidence(circuit.drive, k, 1.0)
    b[k] = 1.0
    resistances, reactive_times = [], []
    for p in circuit.parts:
        v = float(p.value)
        if p.kind == "resistor":
            stamp(G, p.nodes[0], p.nodes[1], 1.0 / v)
            resistances.append(v)
        elif p.kind == "capacitor":
            stamp(C, p.nodes[0], p.nodes[1], v)
        elif p.kind == "inductor":
            k = row[p.name]
            incidence(p.nodes[0], k, 1.0)
            incidence(p.nodes[1], k, -1.0)
            C[k, k] = -v                 # V(a) - V(b) - s L I = 0
        else:  # amplifier: ideal VCVS, output referred to ground
            k = row[p.name]
            out, plus, minus = p.nodes
            if out in index:
                G[index[out], k] += 1.0
            # Row scaled so an infinite gain (ideal op-amp) is the limit:
            # V(out)/A - (V(+) - V(-)) = 0, or V(out) - A (V(+) - V(-)) = 0 for |A| < 1.
            scale_out, scale_in = (1.0 / v, 1.0) if abs(v) >= 1 else (1.0, v)
            if out in index:
                G[k, index[out]] += scale_out
            if plus in index:
                G[k, index[plus]] -= scale_in
            if minus in index:
                G[k, index[minus]] += scale_in
    typical_r = math.exp(np.mean(np.log(resistances))) if resistances else 1.0
    for p in circuit.parts:
        if p.kind == "capacitor":
            reactive_times.append(typical_r * p.value)
        elif p.kind == "inductor":
            reactive_times.append(p.value / typical_r)
    time_scale = math.exp(np.mean(np.log(reactive_times))) if reactive_times else 1.0
    labels = tuple(f"V({n})" for n in nodes) + tuple(f"I({n})" for n in branches)
    return MnaSystem(G, C, b, index[circuit.measure], labels, len(reactive_times), time_scale)


def _equilibrate(G: np.ndarray, C: np.ndarray, w0: float) -> tuple[np.ndarray, np.ndarray]:
    """Row and column scale factors that bring |G| + w0 |C| to entries of order 1."""
    magnitude = np.abs(G) + w0 * np.abs(C)
    rows = np.ones(G.shape[0])
    cols = np.ones(G.shape[1])
    for _ in range(3):
        m = rows[:, None] * magnitude * cols[None, :]
        r = m.max(axis=1)
        rows /= np.sqrt(np.where(r > 0, r, 1.0))
        m = rows[:, None] * magnitude * cols[None, :]
        c = m.max(axis=0)
        cols /= np.sqrt(np.where(c > 0, c, 1.0))
    return rows, cols


def _circle_matrices(system: MnaSystem, w0: float, n_points: int
                     ) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """(z, rows, cols, A): the points z_j = exp(2 pi i (j + 1/2) / M), the row and
    column scalings of :func:`_equilibrate`, and the equilibrated system matrices
    A_j = rows (G + w0 z_j C) cols, shape (M, n, n)."""
    z = np.exp(2j * np.pi * (np.arange(n_points) + 0.5) / n_points)
    rows, cols = _equilibrate(system.G, system.C, w0)
    Gs = rows[:, None] * system.G * cols[None, :]
    Cs = rows[:, None] * system.C * cols[None, :] * w0
    return z, rows, cols, Gs[None, :, :] + z[:, None, None] * Cs[None, :, :]


def sample_on_circle(system: MnaSystem, w0: float, n_points: int) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Evaluate at z_j = exp(2 pi i (j + 1/2) / M), s = w0 z_j.

    The half-step offset keeps the samples off the real axis, where a balanced
    first-order pole (z = -1) would otherwise sit exactly on a sample.

    Returns (z, D, H): D the determinant of the (equilibrated) system matrix,
    scaled by a common real factor, and H the transfer function at s. A point
    where the matrix is singular gives D = 0 and H = nan (the caller decides).
    """
    z, rows, cols, A = _circle_matrices(system, w0, n_points)
    sign, logabs = np.linalg.slogdet(A)
    finite = np.isfinite(logabs)
    ref = logabs[finite].max() if finite.any() else 0.0
    D = np.where(finite, sign * np.exp(np.where(finite, logabs - ref, 0.0)), 0.0)
    H = np.full(n_points, np.nan + 0j)
    if finite.any():
        bs = (rows * system.b).astype(complex)
        x = np.linalg.solve(A[finite], np.broadcast_to(bs, (int(finite.sum()), bs.size))[..., None])[..., 0]
        H[finite] = x[:, system.output] * cols[system.output]
    return z, D, H


def unnormalised_polynomials(system: MnaSystem, w0: float, n_points: int,
                             log_reference: float | None = None) -> tuple[np.ndarray, np.ndarray, float]:
    """det(G + s C) and its Cramer numerator (the output column replaced by b) as
    polynomials in z = s / w0, ascending, with no normalisation or cancellation.

    Both are divided by exp(log_reference) (default: the largest log|det| on the
    circle, returned) so that systems sampled with the same reference are on one
    absolute scale. Each part's stamp is a rank-one change of G or C, so (matrix
    determinant lemma) both polynomials are affine in every conductance 1/R,
    capacitance C and inductance L: the property circuits.parametric builds on.
    Returns (num, den, log_reference); raises ValueError when the system is singular.
    """
    z, rows, cols, A = _circle_matrices(system, w0, n_points)
    sign, logabs = np.linalg.slogdet(A)
    if not np.all(np.isfinite(logabs)):
        raise ValueError("singular")
    log_raw = logabs - np.log(rows).sum() - np.log(cols).sum()     # log|det| of G + s C itself
    if log_reference is None:
        log_reference = float(log_raw.max())
    D = sign * np.exp(log_raw - log_reference)
    bs = (rows * system.b).astype(complex)
    x = np.linalg.solve(A, np.broadcast_to(bs, (n_points, bs.size))[..., None])[..., 0]
    N = x[:, system.output] * cols[system.output] * D
    if not np.all(np.isfinite(N)):
        raise ValueError("singular")
    return _interpolate(N), _interpolate(D), log_reference


def _interpolate(values: np.ndarray) -> np.ndarray:
    """Real coefficients (ascending powers) of the polynomial sampled at the M points
    z_j = exp(2 pi i (j + 1/2) / M) (degree below M): an inverse DFT, undoing the offset."""
    m = values.size
    return (np.fft.fft(values) / m * np.exp(-1j * np.pi * np.arange(m) / m)).real


def _trim(coef: np.ndarray, reference: float) -> np.ndarray:
    """Zero the structurally-zero coefficients (ascending order) and drop high zeros."""
    coef = np.where(np.abs(coef) <= ZERO_COEFFICIENT * reference, 0.0, coef)
    nz = np.nonzero(coef)[0]
    return coef[: nz[-1] + 1] if nz.size else np.zeros(1)


def _candidate_pairs(num: np.ndarray, den: np.ndarray) -> list[tuple[float, complex]]:
    """(relative distance, pole) of pole-zero pairs that may cancel, nearest first (greedy matching)."""
    zeros = list(np.roots(num[::-1]))
    poles = list(np.roots(den[::-1]))
    pairs = []
    for p in poles:
        if not zeros:
            break
        dist = [abs(z - p) / max(abs(p), 1e-300) for z in zeros]
        j = int(np.argmin(dist))
        if dist[j] <= CANDIDATE_DISTANCE:
            pairs.append((dist[j], p))
            zeros.pop(j)
    return sorted(pairs, key=lambda x: x[0])


def _refit(z: np.ndarray, H: np.ndarray, n_num: int, n_den: int, k0: int
           ) -> tuple[np.ndarray, np.ndarray, float]:
    """Coefficients (ascending) of N/D with given degrees fitted to samples H(z) by linear least squares.

    D's coefficient k0 (its lowest non-zero one) is fixed to 1 and those below it to 0. Returns
    (num, den, largest relative misfit of N/D against H); exact data of the right degrees fit to rounding.
    """
    free = list(range(k0 + 1, n_den + 1))
    A = np.hstack([z[:, None] ** np.arange(n_num + 1)[None, :],
                   -H[:, None] * z[:, None] ** np.array(free, dtype=float)[None, :]])
    rhs = H * z ** k0
    weight = 1.0 / (1.0 + np.abs(H) / np.median(np.abs(H)))    # keep samples near a pole from dominating
    A, rhs = A * weight[:, None], rhs * weight
    A_ri = np.vstack([A.real, A.imag])
    rhs_ri = np.concatenate([rhs.real, rhs.imag])
    col = np.linalg.norm(A_ri, axis=0)
    col[col == 0] = 1.0
    x = np.linalg.lstsq(A_ri / col, rhs_ri, rcond=None)[0] / col
    num = x[: n_num + 1]
    den = np.zeros(n_den + 1)
    den[k0] = 1.0
    den[free] = x[n_num + 1:]
    fit = np.polyval(num[::-1], z) / np.polyval(den[::-1], z)
    misfit = float(np.max(np.abs(fit - H) / (np.abs(H) + 1e-6 * np.median(np.abs(H)))))
    return num, den, misfit


def _cancel_common_factors(z: np.ndarray, H: np.ndarray, num: np.ndarray, den: np.ndarray
                           ) -> tuple[np.ndarray, np.ndarray, int]:
    """Remove pole-zero pairs shared by num and den (ascending coefficients, scaled z).

    Common powers of z are removed exactly. Other candidate pairs (roots within
    CANDIDATE_DISTANCE, relative) are cancelled only when the transfer function of
    reduced degree, refitted to the samples, still reproduces them to REFIT_TOLERANCE;
    the largest such reduction is kept. Multiple roots, which numerical root finding
    places only to about sqrt(rounding), are handled the same way.
    Returns (num, den, number of cancelled pairs).
    """
    cancelled = 0
    while num.size > 1 and den.size > 1 and num[0] == 0 and den[0] == 0:
        num, den, cancelled = num[1:], den[1:], cancelled + 1
    if num.size < 2 or den.size < 2 or not np.any(num):
        return num, den, cancelled
    pairs = _candidate_pairs(num, den)
    k0 = int(np.nonzero(den)[0][0])
    for k in range(len(pairs), 0, -1):
        n_num, n_den = num.size - 1 - k, den.size - 1 - k
        if n_den < k0:
            continue
        n_red, d_red, misfit = _refit(z, H, n_num, n_den, k0)
        if misfit <= REFIT_TOLERANCE:
            scale = d_red[k0] / den[k0]
            return _trim(n_red / scale, np.abs(n_red).max()), d_red / scale, cancelled + k
    return num, den, cancelled


def scaled_polynomials(system: MnaSystem, w0: float) -> tuple[np.ndarray, np.ndarray, int]:
    """(num, den, n_cancelled) in ascending powers of z = s / w0, before normalisation."""
    n_points = max(16, 2 * (system.reactive + 1))
    z, D, H = sample_on_circle(system, w0, n_points)
    if not np.any(D):
        raise ValueError("singular")
    N = np.where(D != 0, H * D, 0.0)
    if not np.all(np.isfinite(N)):
        raise ValueError("singular")
    den = _interpolate(D)
    num = _interpolate(N)
    den = _trim(den, np.abs(den).max())
    if np.abs(num).max() <= 1e-13 * np.abs(den).max():
        return np.zeros(1), den, 0              # |H| below 1e-13 everywhere: rounding of H = 0
    num = _trim(num, np.abs(num).max())
    num, den, cancelled = _cancel_common_factors(z, H, num, den)
    return num, den, cancelled


def balanced_scale(den_ascending: np.ndarray, w0: float) -> float:
    """Rescale w0 so the lowest and highest non-zero den coefficients are equal in size."""
    nz = np.nonzero(den_ascending)[0]
    if nz.size < 2:
        return w0
    lo, hi = nz[0], nz[-1]
    alpha = (abs(den_ascending[lo]) / abs(den_ascending[hi])) ** (1.0 / (hi - lo))
    return w0 * alpha


def polynomials(circuit: Circuit, values: Mapping[str, float] | None = None
                ) -> tuple[np.ndarray, np.ndarray, float, int]:
    """The normalised (num, den) in descending powers of s, the frequency scale w0
    (rad/s) used, and the number of cancelled pole-zero pairs.

    See the module docstring for the method and the normalisation.
    """
    system = build_mna(circuit, values)
    w0 = 1.0 / system.time_scale
    try:
        num, den, cancelled = scaled_polynomials(system, w0)
        w1 = balanced_scale(den, w0)
        if not math.isclose(w1, w0, rel_tol=1e-3):
            w0 = w1
            num, den, cancelled = scaled_polynomials(system, w0)
    except (ValueError, np.linalg.LinAlgError):
        raise circuit.error("the circuit equations are singular (for example a loop of amplifier "
                            "outputs, or an amplifier sensing a node that nothing drives)",
                            hint="check the amplifier connections and the node names") from None
    if not np.any(num):
        raise circuit.error(f"the measured node {circuit.measure!r} does not respond to the drive (H(s) = 0)",
                            hint="check that a path of parts links the driven node to the measured node")
    powers = w0 ** -np.arange(max(num.size, den.size))
    num_s = num * powers[: num.size]
    den_s = den * powers[: den.size]
    lowest = den_s[np.nonzero(den_s)[0][0]]
    num_s = num_s / lowest
    den_s = den_s / lowest
    return num_s[::-1].copy(), den_s[::-1].copy(), w0, cancelled
