"""Nodal analysis against lcapy's symbolic circuit analysis (sympy).

Reference: lcapy (symbolic linear circuit analysis, https://lcapy.readthedocs.io),
which builds the same netlist independently and solves it symbolically. Each
library topology's symbolic H(s) is built once, then compared with fitkit's
numerical transfer function over random part values (fixed seed).
"""

from __future__ import annotations

import functools
import math

import numpy as np
import pytest
import sympy as sp

from fitkit.circuits.description import Circuit
from fitkit.circuits.topologies import TOPOLOGIES, topology
from fitkit.circuits.toml_format import loads_circuit
from fitkit.circuits.transfer import transfer_function

lcapy = pytest.importorskip("lcapy")

LCAPY_LETTER = {"resistor": "R", "capacitor": "C", "inductor": "L"}


def lcapy_netlist(circuit: Circuit, symbolic: bool) -> str:
    """The same circuit as an lcapy netlist: an s-domain unit source drives the driven node."""
    g = circuit.ground

    def node(n: str) -> str:
        return "0" if n == g else n

    lines = [f"Vsrc {node(circuit.drive)} 0 s 1"]
    for p in circuit.parts:
        value = p.name if symbolic else repr(float(p.value))
        if p.kind == "amplifier":
            out, plus, minus = (node(n) for n in p.nodes)
            if math.isinf(p.value):
                lines.append(f"E{p.name} {out} 0 opamp {plus} {minus} Again")
            else:
                lines.append(f"E{p.name} {out} 0 {plus} {minus} {p.value!r}")
        else:
            lines.append(f"{LCAPY_LETTER[p.kind]}{p.name}x {node(p.nodes[0])} {node(p.nodes[1])} {value}")
    return "\n".join(lines)


def lcapy_transfer(circuit: Circuit, symbolic: bool = True) -> sp.Expr:
    """H(s) at the measured node from lcapy; an ideal op-amp is the limit of infinite gain."""
    net = lcapy.Circuit(lcapy_netlist(circuit, symbolic))
    expr = net[circuit.measure].V.laplace().sympy
    names = {x.name: x for x in expr.free_symbols}
    if "Again" in names:
        expr = sp.limit(expr, names["Again"], sp.oo)
    return sp.simplify(expr)


@functools.lru_cache(maxsize=None)
def symbolic_coefficients(name: str):
    """(part symbols, f(values) -> (num, den) descending, normalised den[-1] = 1) for a topology."""
    circuit = topology(name)
    expr = lcapy_transfer(circuit)
    s = next(x for x in expr.free_symbols if x.name == "s")
    parts = [p.name for p in circuit.parts if p.kind != "amplifier"]
    symbols = [next(x for x in expr.free_symbols if x.name == n) for n in parts]
    num, den = sp.fraction(sp.together(expr))
    num_c = sp.Poly(sp.expand(num), s).all_coeffs()
    den_c = sp.Poly(sp.expand(den), s).all_coeffs()
    f_num = sp.lambdify(symbols, num_c)
    f_den = sp.lambdify(symbols, den_c)

    def evaluate(values: dict[str, float]) -> tuple[np.ndarray, np.ndarray]:
        args = [values[n] for n in parts]
        n_ = np.atleast_1d(np.array(f_num(*args), dtype=float))
        d_ = np.atleast_1d(np.array(f_den(*args), dtype=float))
        low = d_[np.nonzero(d_)[0][-1]]
        return np.trim_zeros(n_ / low, "f"), d_ / low

    return parts, evaluate


def random_values(circuit: Circuit, rng: np.random.Generator) -> dict[str, float]:
    """Log-uniform part values over two decades around each default."""
    return {p.name: p.value * 10 ** rng.uniform(-1, 1) for p in circuit.parts if p.kind != "amplifier"}


@pytest.mark.parametrize("name", list(TOPOLOGIES))
def test_topology_coefficients_match_lcapy(name):
    # Reference: lcapy symbolic nodal analysis of the same netlist.
    parts, evaluate = symbolic_coefficients(name)
    circuit = topology(name)
    rng = np.random.default_rng(5)
    for _ in range(12):
        values = random_values(circuit, rng)
        tf = transfer_function(circuit, values)
        num_ref, den_ref = evaluate(values)
        assert len(tf.den) == len(den_ref), (name, tf.den, den_ref)
        np.testing.assert_allclose(tf.denominator, den_ref, rtol=1e-9, atol=0)
        # Compare numerators on the same length (structural zeros are exactly 0 in fitkit).
        num = np.trim_zeros(tf.numerator, "f")
        ref = np.concatenate([np.zeros(max(0, num.size - num_ref.size)), num_ref])
        scale = np.max(np.abs(ref))
        np.testing.assert_allclose(num, ref[-num.size:], rtol=1e-9, atol=1e-12 * scale)


@pytest.mark.parametrize("name", ["rc-ladder-2", "sallen-key-low-pass", "mfb-low-pass", "rlc-series-r"])
def test_frequency_response_matches_lcapy(name):
    # Reference: lcapy symbolic H(s) evaluated at s = j 2 pi f.
    parts, evaluate = symbolic_coefficients(name)
    circuit = topology(name)
    values = random_values(circuit, np.random.default_rng(11))
    num_ref, den_ref = evaluate(values)
    tf = transfer_function(circuit, values)
    f0 = 1.0 / (2 * math.pi * tf.time_scale)
    f = f0 * np.geomspace(0.01, 100, 9)
    s = 2j * np.pi * f
    ref = np.polyval(num_ref, s) / np.polyval(den_ref, s)
    np.testing.assert_allclose(tf.frequency_response(f), ref, rtol=1e-9)


def test_ten_node_ladder_with_amplifier_matches_lcapy_numerically():
    # Reference: lcapy with numeric part values (a 9-stage ladder, a gain-2 stage, 10+ nodes).
    rng = np.random.default_rng(3)
    lines = ['drive = "in"', 'measure = "out"']
    nodes = ["in"] + [f"n{k}" for k in range(1, 9)] + ["a"]
    for k in range(9):
        lines += [f"[parts.R{k + 1}]", 'kind = "resistor"', f'between = ["{nodes[k]}", "{nodes[k + 1]}"]',
                  f'value = "{1e3 * 10 ** rng.uniform(0, 1):.6g}"',
                  f"[parts.C{k + 1}]", 'kind = "capacitor"', f'between = ["{nodes[k + 1]}", "0"]',
                  f'value = "{1e-9 * 10 ** rng.uniform(0, 1):.6g}"']
    lines += ["[parts.U1]", 'kind = "amplifier"', 'output = "out"', 'sense = ["a", "0"]', "gain = 2.0",
              "[parts.RL]", 'kind = "resistor"', 'between = ["out", "0"]', 'value = "1k"']
    circuit = loads_circuit("\n".join(lines), "ladder9.toml")
    assert len(circuit.nodes) >= 10
    tf = transfer_function(circuit)
    assert tf.order == 9
    expr = lcapy_transfer(circuit, symbolic=False)
    s = next(x for x in expr.free_symbols if x.name == "s")
    h = sp.lambdify(s, expr)
    f0 = 1.0 / (2 * math.pi * tf.time_scale)
    for f in f0 * np.geomspace(0.01, 100, 7):
        w = 2j * np.pi * f
        assert abs(tf(w) - complex(h(w))) <= 1e-8 * abs(complex(h(w))) + 1e-12


def _random_network(rng: np.random.Generator) -> Circuit:
    """A random connected R, L, C network between in, out, ground and a few inner nodes."""
    from fitkit.circuits.description import Part
    nodes = ["in", "out"] + [f"n{k}" for k in range(int(rng.integers(1, 4)))] + ["0"]
    order = [str(n) for n in rng.permutation(nodes)]
    pairs = list(zip(order[:-1], order[1:])) + [tuple(str(x) for x in rng.choice(nodes, 2, replace=False))
                                                for _ in range(int(rng.integers(1, 4)))]
    parts = []
    for k, (a, b) in enumerate(pairs, start=1):
        kind = ("resistor", "capacitor", "inductor")[int(rng.integers(0, 3))]
        scale = {"resistor": 1e3, "capacitor": 1e-8, "inductor": 1e-2}[kind]
        parts.append(Part(f"X{k}", kind, (a, b), scale * 10 ** rng.uniform(-1, 1)))
    return Circuit("random", tuple(parts), "in", "out", "0")


def test_random_networks_match_lcapy():
    # Reference: lcapy numeric nodal analysis of random connected RLC networks (fixed seed);
    # covers capacitor loops, inductor cut-sets and pole-zero cancellation.
    from fitkit.errors import CircuitError
    rng = np.random.default_rng(42)
    checked = 0
    while checked < 8:
        circuit = _random_network(rng)
        try:
            tf = transfer_function(circuit)
        except CircuitError as exc:
            # A random node used once, or an output nothing drives: rejected, fine.
            assert "loose end" in exc.one_line() or "does not respond" in exc.one_line()
            continue
        expr = lcapy_transfer(circuit, symbolic=False)
        s = next((x for x in expr.free_symbols if x.name == "s"), sp.Symbol("s"))
        h = sp.lambdify(s, expr)
        f0 = 1.0 / (2 * math.pi * tf.time_scale)
        # Off the characteristic frequency: a lossless LC network has a pole exactly there.
        for f in f0 * np.array([0.0137, 0.171, 1.93, 23.7, 87.1]):
            w = 2j * np.pi * f
            ref = complex(h(w))
            assert abs(tf(w) - ref) <= 1e-9 * abs(ref) + 1e-13
        checked += 1
