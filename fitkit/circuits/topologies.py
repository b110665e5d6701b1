"""The named circuit library: common step-tested circuits with their usual part names.

Every topology is driven at node "in" (an ideal step source from ground "0")
and measured at node "out". ``topology(name, **parts)`` gives the Circuit with
default part values, any of which can be replaced: a number (SI units), a
string in engineering notation ("4.7k", "10n", "4k7"), or "?" for an unknown
part; ``unknown=("C1", "C2")`` marks parts unknown keeping their values as
design values.

Sketches use one line each: ``--R1--`` a part in series, ``(out)`` a node,
``|C1 to 0`` a part from the node before it to ground, ``[x1]`` a unity-gain
buffer, ``[-inf]`` an ideal inverting op-amp stage.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, replace
from typing import Any, Iterable, Mapping

from ..errors import CircuitError, OptionError
from ..units import parse_value
from .description import Circuit, Part

G = "0"


@dataclass(frozen=True)
class Topology:
    """One library entry.

    name: plain-words name used on the command line.
    summary: one line on what it is and where the output is.
    sketch: one-line ASCII sketch.
    parts: (name, kind, nodes, default value in SI) for each part.
    """

    name: str
    summary: str
    sketch: str
    parts: tuple[tuple[str, str, tuple[str, ...], float], ...]

    @property
    def part_names(self) -> tuple[str, ...]:
        return tuple(p[0] for p in self.parts)

    def to_dict(self) -> dict[str, Any]:
        return {"name": self.name, "summary": self.summary, "sketch": self.sketch,
                "parts": {n: {"kind": k, "nodes": list(nodes),
                              "default": "inf" if math.isinf(v) else v}
                          for n, k, nodes, v in self.parts}}


def _r(name, a, b, v):
    return (name, "resistor", (a, b), v)


def _c(name, a, b, v):
    return (name, "capacitor", (a, b), v)


def _l(name, a, b, v):
    return (name, "inductor", (a, b), v)


def _amp(name, out, plus, minus, gain):
    return (name, "amplifier", (out, plus, minus), gain)


TOPOLOGIES: dict[str, Topology] = {t.name: t for t in (
    Topology("rc-low-pass", "first-order RC low-pass; output across C1 (tau = R1 C1)",
             "in --R1--(out) |C1 to 0",
             (_r("R1", "in", "out", 10e3), _c("C1", "out", G, 10e-9))),
    Topology("rc-high-pass", "first-order RC high-pass; output across R1 (tau = R1 C1)",
             "in --C1--(out) |R1 to 0",
             (_c("C1", "in", "out", 10e-9), _r("R1", "out", G, 10e3))),
    Topology("rl", "series R then L to ground; output across L1 (decays, tau = L1/R1)",
             "in --R1--(out) |L1 to 0",
             (_r("R1", "in", "out", 1e3), _l("L1", "out", G, 10e-3))),
    Topology("rl-across-r", "series L then R to ground; output across R1 (rises, tau = L1/R1)",
             "in --L1--(out) |R1 to 0",
             (_l("L1", "in", "out", 10e-3), _r("R1", "out", G, 1e3))),
    Topology("rc-ladder-2", "two RC low-pass stages in cascade, unbuffered (real poles, Q <= 1/2)",
             "in --R1--(n1) |C1 to 0 --R2--(out) |C2 to 0",
             (_r("R1", "in", "n1", 10e3), _c("C1", "n1", G, 10e-9),
              _r("R2", "n1", "out", 10e3), _c("C2", "out", G, 10e-9))),
    Topology("rc-buffered-2", "two RC low-pass stages with a unity-gain buffer between (poles 1/R1C1, 1/R2C2)",
             "in --R1--(n1) |C1 to 0 [x1]--R2--(out) |C2 to 0",
             (_r("R1", "in", "n1", 10e3), _c("C1", "n1", G, 10e-9),
              _amp("U1", "n2", "n1", G, 1.0),
              _r("R2", "n2", "out", 10e3), _c("C2", "out", G, 10e-9))),
    Topology("rlc-series-c", "series RLC; output across C1 (low-pass, f0 = 1/(2 pi sqrt(L1 C1)))",
             "in --R1--L1--(out) |C1 to 0",
             (_r("R1", "in", "n1", 100.0), _l("L1", "n1", "out", 10e-3), _c("C1", "out", G, 100e-9))),
    Topology("rlc-series-r", "series RLC; output across R1 (band-pass, peaks at f0)",
             "in --C1--L1--(out) |R1 to 0",
             (_c("C1", "in", "n1", 100e-9), _l("L1", "n1", "out", 10e-3), _r("R1", "out", G, 100.0))),
    Topology("sallen-key-low-pass", "unity-gain Sallen-Key low-pass; C1 feedback from output, C2 to ground",
             "in --R1--(n1)--R2--(n2) |C2 to 0 [x1]--(out); C1 from n1 to out",
             (_r("R1", "in", "n1", 10e3), _r("R2", "n1", "n2", 10e3),
              _c("C1", "n1", "out", 20e-9), _c("C2", "n2", G, 10e-9),
              _amp("U1", "out", "n2", G, 1.0))),
    Topology("mfb-low-pass", "multiple-feedback low-pass, inverting (DC gain -R2/R1); ideal op-amp",
             "in --R1--(n1) |C2 to 0 --R3--(n2) [-inf]--(out); R2 from n1 to out, C1 from n2 to out",
             (_r("R1", "in", "n1", 10e3), _r("R2", "n1", "out", 10e3), _r("R3", "n1", "n2", 10e3),
              _c("C1", "n2", "out", 4.7e-9), _c("C2", "n1", G, 47e-9),
              _amp("U1", "out", G, "n2", math.inf))),
)}


def get_topology(name: str) -> Topology:
    """The library entry ``name``; CircuitError naming the choices when unknown."""
    key = name.strip().lower()
    if key not in TOPOLOGIES:
        raise CircuitError(f"no circuit topology named {name!r}",
                           hint="choose one of " + ", ".join(TOPOLOGIES) + " (see `fitkit circuits`)")
    return TOPOLOGIES[key]


def apply_part_settings(circuit: Circuit, settings: Mapping[str, float | str],
                        unknown: Iterable[str] = ()) -> Circuit:
    """A copy of ``circuit`` with part values set and parts marked unknown.

    ``settings``: part name -> a number (SI), engineering notation ("4.7k",
    "10n", "4k7") or "?" (unknown, no design value). Parts named in
    ``unknown`` become unknown with their (given or present) value as design value.
    """
    names = circuit.part_names
    unknown = tuple(unknown)
    for n in list(settings) + list(unknown):
        if n not in names:
            raise circuit.error(f"there is no part {n!r}", hint="its parts are " + ", ".join(names))
    built = []
    for part in circuit.parts:
        value, is_unknown, design = part.value, part.unknown or part.name in unknown, part.design
        if part.name in settings:
            given = settings[part.name]
            if isinstance(given, str) and given.strip() == "?":
                value, is_unknown, design = None, True, None
            else:
                try:
                    value = math.inf if (part.kind == "amplifier" and str(given).strip().lower() == "inf") \
                        else parse_value(given, part.unit or None)
                except OptionError as exc:
                    raise circuit.error(f"part {part.name}: {exc.message}",
                                        hint="write e.g. 10k, 4.7n, 2.2u, 4k7 or ?") from None
                design = value if is_unknown else None
        if is_unknown and design is None and part.name in unknown:
            design = value
        built.append(replace(part, value=value, unknown=is_unknown, design=design if is_unknown else None))
    return replace(circuit, parts=tuple(built)).validate()


def topology(name: str, unknown: Iterable[str] = (), **parts: float | str) -> Circuit:
    """A library circuit with default values, overridden by ``parts``.

    A part value may be a number in SI units, engineering notation ("4.7k",
    "10n") or "?" (unknown, no design value). Parts named in ``unknown`` are
    unknown with their (default or given) value as design value.
    """
    topo = get_topology(name)
    base = Circuit(topo.name, tuple(Part(n, k, nodes, v) for n, k, nodes, v in topo.parts),
                   drive="in", measure="out", ground=G)
    return apply_part_settings(base, parts, unknown)
