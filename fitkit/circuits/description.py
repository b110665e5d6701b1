"""A small linear circuit as fitkit sees it: parts between named nodes.

A circuit is a list of parts (resistor, capacitor, inductor, ideal voltage
amplifier), a ground node, the node the step drives (through an ideal voltage
source from ground) and the node that is measured. Each part value is in SI
units (ohms, farads, henries; an amplifier's value is its voltage gain, which
may be ``math.inf`` for an ideal op-amp). A part is either known (its value
is fixed) or unknown (to be solved from a capture), optionally with a design
value that ranks several solutions.

The measurement chain (generator source resistance, probe loading at the
measured node) is kept apart in :class:`MeasurementChain` and turned into
ordinary parts by :meth:`Circuit.with_chain_parts` only when analysed, so the
report can say how much each shifts the result.

Nothing here does numerics beyond validation; see mna.py for the analysis.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field, replace
from typing import Any, Iterable, Mapping

from ..errors import CircuitError
from ..probes import PROBE_PRESETS  # noqa: F401  (re-exported: part of this module's API)

#: Part kinds and the SI unit of their value.
PART_UNITS: dict[str, str] = {"resistor": "Ohm", "capacitor": "F", "inductor": "H", "amplifier": ""}

#: Names the ground node may have.
GROUND_NAMES = ("gnd", "0")

#: Generator source resistance used when one is asked for without a value, ohms.
DEFAULT_SOURCE_RESISTANCE = 50.0

#: Names the measurement chain gives its parts when they are added to a circuit.
SOURCE_PART, PROBE_R_PART, PROBE_C_PART = "R_source", "R_probe", "C_probe"
SOURCE_NODE = "generator"


@dataclass(frozen=True)
class Part:
    """One part of a circuit.

    name: reference designator ("R1", "C2", "U1").
    kind: "resistor", "capacitor", "inductor" or "amplifier".
    nodes: for two-terminal parts (a, b); for an amplifier
        (output, sense_plus, sense_minus): an ideal voltage-controlled voltage
        source from ground to ``output`` of value gain * (V(sense_plus) - V(sense_minus)).
    value: SI value (ohms, farads, henries, or the dimensionless gain);
        None when unknown and no design value is given.
    unknown: True when the value is to be solved from a capture.
    design: the design (nominal) value in SI units, if given; for an unknown
        part it ranks several solutions, for a known part it equals ``value``.
    """

    name: str
    kind: str
    nodes: tuple[str, ...]
    value: float | None
    unknown: bool = False
    design: float | None = None

    @property
    def unit(self) -> str:
        return PART_UNITS[self.kind]

    def to_dict(self) -> dict[str, Any]:
        gain_inf = self.kind == "amplifier" and self.value is not None and math.isinf(self.value)
        return {"name": self.name, "kind": self.kind, "nodes": list(self.nodes),
                "value": "inf" if gain_inf else self.value, "unknown": self.unknown,
                "design": self.design, "unit": self.unit}


@dataclass(frozen=True)
class MeasurementChain:
    """The generator and probe around a circuit under test.

    source_resistance: generator output resistance in ohms, in series with
        the driven node (None: an ideal source).
    probe_resistance, probe_capacitance: probe input loading at the measured
        node, ohms and farads (None: no loading by that element).
    probe_name: the preset used ("10x-passive", "1x-direct") or "" when explicit.
    """

    source_resistance: float | None = None
    probe_resistance: float | None = None
    probe_capacitance: float | None = None
    probe_name: str = ""

    @property
    def is_empty(self) -> bool:
        return (self.source_resistance is None and self.probe_resistance is None
                and self.probe_capacitance is None)

    def describe(self) -> str:
        """Plain words, e.g. '50 Ohm source; probe 10x-passive (10 MOhm || 12 pF)'."""
        from ..units import format_value
        bits = []
        if self.source_resistance is not None:
            bits.append(f"{format_value(self.source_resistance, 'Ohm')} source")
        probe = []
        if self.probe_resistance is not None:
            probe.append(format_value(self.probe_resistance, "Ohm"))
        if self.probe_capacitance is not None:
            probe.append(format_value(self.probe_capacitance, "F"))
        if probe:
            label = f"probe {self.probe_name} " if self.probe_name else "probe "
            bits.append(label + "(" + " || ".join(probe) + ")")
        return "; ".join(bits) if bits else "ideal source, no probe loading"

    def to_dict(self) -> dict[str, Any]:
        return {"source_resistance": self.source_resistance, "probe_resistance": self.probe_resistance,
                "probe_capacitance": self.probe_capacitance, "probe_name": self.probe_name}


def probe_chain(preset: str, source_resistance: float | None = None) -> MeasurementChain:
    """A measurement chain from a probe preset name (see PROBE_PRESETS)."""
    if preset not in PROBE_PRESETS:
        raise CircuitError(f"unknown probe preset {preset!r}",
                           hint="use one of " + ", ".join(PROBE_PRESETS) + " or give probe R and C")
    r, c = PROBE_PRESETS[preset]
    return MeasurementChain(source_resistance, r, c, preset)


@dataclass(frozen=True)
class Circuit:
    """A circuit under test: parts, ground, driven node, measured node, chain.

    name: plain name ("rc-low-pass" or the file's name).
    parts: the parts, in the order given.
    drive: node driven by the step (ideal voltage source from ground).
    measure: node whose voltage (to ground) is captured.
    ground: the ground node's name, "gnd" (default) or "0".
    chain: optional measurement chain (not included in ``parts``).
    source_path: the file it was read from, for error messages.
    """

    name: str
    parts: tuple[Part, ...]
    drive: str
    measure: str
    ground: str = "gnd"
    chain: MeasurementChain = field(default_factory=MeasurementChain)
    source_path: str | None = None

    # -- look-ups -------------------------------------------------------
    def part(self, name: str) -> Part:
        for p in self.parts:
            if p.name == name:
                return p
        raise self.error(f"no part named {name!r}",
                         hint="parts are " + ", ".join(p.name for p in self.parts))

    @property
    def part_names(self) -> tuple[str, ...]:
        return tuple(p.name for p in self.parts)

    @property
    def unknowns(self) -> tuple[str, ...]:
        """Names of the parts to be solved, in order."""
        return tuple(p.name for p in self.parts if p.unknown)

    @property
    def nodes(self) -> tuple[str, ...]:
        """Every node name except ground, in order of first appearance."""
        seen: dict[str, None] = {}
        for p in self.parts:
            for n in p.nodes:
                if n != self.ground:
                    seen.setdefault(n, None)
        for n in (self.drive, self.measure):
            if n != self.ground:
                seen.setdefault(n, None)
        return tuple(seen)

    def design_values(self) -> dict[str, float]:
        """Design value of every unknown part that has one, SI units."""
        return {p.name: p.design for p in self.parts if p.unknown and p.design is not None}

    def error(self, message: str, hint: str | None = None) -> CircuitError:
        """A CircuitError naming this circuit's file (or name)."""
        where = self.source_path
        if where is None:
            message = f"circuit {self.name!r}: {message}"
        return CircuitError(message, path=where, hint=hint)

    # -- derived circuits ----------------------------------------------
    def with_values(self, values: Mapping[str, float]) -> "Circuit":
        """A copy with the given part values (SI), keeping which parts are unknown."""
        names = set(self.part_names)
        for name in values:
            if name not in names:
                raise self.error(f"no part named {name!r}",
                                 hint="parts are " + ", ".join(self.part_names))
        parts = tuple(replace(p, value=float(values[p.name])) if p.name in values else p
                      for p in self.parts)
        return replace(self, parts=parts)

    def with_unknowns(self, names: Iterable[str]) -> "Circuit":
        """A copy in which exactly the named parts are unknown (their current
        values become design values)."""
        names = tuple(names)
        for n in names:
            self.part(n)
        parts = tuple(replace(p, unknown=p.name in names,
                              design=p.value if (p.name in names and p.design is None) else p.design)
                      for p in self.parts)
        return replace(self, parts=parts)

    def with_chain(self, chain: MeasurementChain) -> "Circuit":
        return replace(self, chain=chain)

    def with_chain_parts(self) -> "Circuit":
        """The circuit with its measurement chain turned into ordinary known parts.

        The source resistance goes between a new node "generator" (now the
        driven node) and the old driven node; probe R and C go from the
        measured node to ground.
        """
        chain = self.chain
        if chain.is_empty:
            return self
        parts = list(self.parts)
        drive = self.drive
        taken = set(self.part_names)
        for n in (SOURCE_PART, PROBE_R_PART, PROBE_C_PART):
            if n in taken:
                raise self.error(f"part name {n!r} is reserved for the measurement chain",
                                 hint="rename that part")
        if chain.source_resistance is not None:
            if SOURCE_NODE in self.nodes:
                raise self.error(f"node name {SOURCE_NODE!r} is reserved for the generator",
                                 hint="rename that node")
            parts.append(Part(SOURCE_PART, "resistor", (SOURCE_NODE, self.drive), chain.source_resistance))
            drive = SOURCE_NODE
        if chain.probe_resistance is not None:
            parts.append(Part(PROBE_R_PART, "resistor", (self.measure, self.ground), chain.probe_resistance))
        if chain.probe_capacitance is not None:
            parts.append(Part(PROBE_C_PART, "capacitor", (self.measure, self.ground), chain.probe_capacitance))
        return replace(self, parts=tuple(parts), drive=drive, chain=MeasurementChain())

    def to_dict(self) -> dict[str, Any]:
        return {"name": self.name, "ground": self.ground, "drive": self.drive, "measure": self.measure,
                "parts": [p.to_dict() for p in self.parts], "measurement_chain": self.chain.to_dict()}

    # -- validation -----------------------------------------------------
    def validate(self, *, need_values: bool = False) -> "Circuit":
        """Check the description; return self or raise CircuitError.

        Checks: ground name, unique part names, node counts, positive finite
        values (gain: non-zero), drive/measure nodes exist, no node floating
        (every node reaches ground through parts, the source or an amplifier
        output). With ``need_values`` every part must have a value (unknown
        parts use their design value).
        """
        if self.ground not in GROUND_NAMES:
            raise self.error(f"ground node {self.ground!r} is not allowed", hint='call it "gnd" or "0"')
        if not self.parts:
            raise self.error("the circuit has no parts", hint="add at least one part")
        seen: set[str] = set()
        for p in self.parts:
            if p.name in seen:
                raise self.error(f"part {p.name!r} appears twice", hint="give each part its own name")
            seen.add(p.name)
            if p.kind not in PART_UNITS:
                raise self.error(f"part {p.name}: unknown kind {p.kind!r}",
                                 hint="use resistor, capacitor, inductor or amplifier")
            want = 3 if p.kind == "amplifier" else 2
            if len(p.nodes) != want or any(not isinstance(n, str) or not n for n in p.nodes):
                raise self.error(f"part {p.name}: needs {want} node names, got {list(p.nodes)}",
                                 hint="amplifier: output and sense = [plus, minus]; others: between = [a, b]")
            other_ground = [n for n in p.nodes if n in GROUND_NAMES and n != self.ground]
            if other_ground:
                raise self.error(f"part {p.name}: node {other_ground[0]!r} looks like ground but ground is "
                                 f"{self.ground!r}", hint="use one name for ground throughout")
            if p.kind != "amplifier" and p.nodes[0] == p.nodes[1]:
                raise self.error(f"part {p.name}: both ends on node {p.nodes[0]!r}",
                                 hint="connect it between two different nodes")
            if p.kind == "amplifier" and p.nodes[0] == self.ground:
                raise self.error(f"part {p.name}: amplifier output on ground", hint="give its output a node")
            self._check_value(p, need_values)
        for role, node in (("driven", self.drive), ("measured", self.measure)):
            if node == self.ground:
                raise self.error(f"the {role} node is ground", hint=f"name a non-ground {role} node")
            if not any(node in p.nodes for p in self.parts):
                raise self.error(f"the {role} node {node!r} is not connected to any part",
                                 hint="check the node name against the parts' nodes")
        if not any(self.ground in p.nodes for p in self.parts):
            raise self.error(f"no part connects to ground {self.ground!r}",
                             hint="connect a part to ground, or set ground to the name you used")
        dangling = self._dangling_nodes()
        if dangling:
            node, part = dangling[0]
            raise self.error(f"node {node!r} connects only to part {part} (a loose end)",
                             hint="check the node names for a typing error")
        floating = self._floating_nodes()
        if floating:
            raise self.error(f"node {floating[0]!r} is floating (no path to ground through any part)",
                             hint="connect it, or check for a typing error in a node name")
        return self

    def _check_value(self, p: Part, need_values: bool) -> None:
        for label, v in (("value", p.value), ("design value", p.design)):
            if v is None:
                continue
            if p.kind == "amplifier":
                if v == 0 or math.isnan(v):
                    raise self.error(f"part {p.name}: gain {v} is not usable", hint="give a non-zero gain or inf")
            elif not (math.isfinite(v) and v > 0):
                raise self.error(f"part {p.name}: {label} {v!r} is not a positive finite number",
                                 hint=f"give it in {p.unit} with a prefix, e.g. 10k, 4.7n, 2.2u")
        if need_values and p.value is None:
            raise self.error(f"part {p.name} has no value",
                             hint="give a value, or a design value for an unknown part")

    def _dangling_nodes(self) -> list[tuple[str, str]]:
        """(node, part) for nodes other than drive and measure touched by one part terminal only."""
        touches: dict[str, list[str]] = {}
        for p in self.parts:
            for n in p.nodes:
                touches.setdefault(n, []).append(p.name)
        return [(n, names[0]) for n, names in touches.items()
                if len(names) == 1 and n not in (self.drive, self.measure, self.ground)]

    def _floating_nodes(self) -> list[str]:
        """Nodes with no path to ground through parts, the source or an amplifier output."""
        adjacent: dict[str, set[str]] = {}

        def link(a: str, b: str) -> None:
            adjacent.setdefault(a, set()).add(b)
            adjacent.setdefault(b, set()).add(a)

        link(self.drive, self.ground)
        for p in self.parts:
            if p.kind == "amplifier":
                link(p.nodes[0], self.ground)
                for n in p.nodes[1:]:
                    adjacent.setdefault(n, set())
            else:
                link(p.nodes[0], p.nodes[1])
        reached = {self.ground}
        todo = [self.ground]
        while todo:
            for nxt in adjacent.get(todo.pop(), ()):
                if nxt not in reached:
                    reached.add(nxt)
                    todo.append(nxt)
        return [n for n in self.nodes if n not in reached]
