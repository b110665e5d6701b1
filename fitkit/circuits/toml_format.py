"""fitkit's circuit file: a small TOML format of our own (full guide: docs/circuit-format.md).

Example (two RC stages with a follower between them; the capacitors are to be found)::

    name = "RC ladder, board 7"
    ground = "gnd"            # "gnd" or "0" (default: the one the parts use, else "gnd")
    drive = "in"              # the node the step drives (ideal source from ground)
    measure = "out"           # the node whose voltage is captured

    [parts.R1]
    kind = "resistor"         # resistor, capacitor, inductor or amplifier
    between = ["in", "n1"]
    value = "10k"             # engineering notation; a unit is optional ("10 kOhm")

    [parts.C1]
    kind = "capacitor"
    between = ["n1", "gnd"]
    value = "?"               # unknown, to be solved (no design value)

    [parts.U1]                # an ideal voltage amplifier (voltage-controlled source)
    kind = "amplifier"
    output = "n2"             # output node, driven from ground
    sense = ["n1", "gnd"]     # [plus, minus]: V(output) = gain * (V(plus) - V(minus))
    gain = 1                  # 1 = voltage follower; "inf" = ideal op-amp

    [parts.R2]
    kind = "resistor"
    between = ["n2", "out"]
    value = "4k7"             # RKM code for 4.7 kOhm

    [parts.C2]
    kind = "capacitor"
    between = ["out", "gnd"]
    solve = true              # unknown, to be solved ...
    design = "220n"           # ... with a design value (ranks several solutions)

    [measurement]             # optional: the measurement chain
    source_resistance = "50"  # generator output resistance; true = 50 Ohm
    probe = "10x-passive"     # or "1x-direct"; or probe_resistance / probe_capacitance

Values are read with fitkit.units.parse_value ("4.7k", "10n", "2.2u", "1M" =
1e6, RKM "4k7"). With ``solve = true`` a ``value`` is taken as the design value.
Every problem raises CircuitError naming the file, the line of the part when
it can be found, and what to do.
"""

from __future__ import annotations

import math
import re
import tomllib
from pathlib import Path
from typing import Any

from ..errors import CircuitError, OptionError
from ..units import format_value, parse_value
from .description import (DEFAULT_SOURCE_RESISTANCE, PART_UNITS, PROBE_PRESETS, Circuit,
                          MeasurementChain, Part)

TOP_KEYS = {"name", "ground", "drive", "measure", "parts", "measurement"}
PART_KEYS = {"kind", "between", "value", "solve", "design", "output", "sense", "gain"}
CHAIN_KEYS = {"source_resistance", "probe", "probe_resistance", "probe_capacitance"}
KIND_WORDS = {"resistor": "resistor", "capacitor": "capacitor", "inductor": "inductor",
              "amplifier": "amplifier"}


def read_toml_text(path: str | Path, error: type, what: str, hint_missing: str) -> str:
    """The text of a TOML file, or ``error`` (a FitkitError class) naming the file.
    ``what`` names the kind of file in the message ("circuit file")."""
    path = Path(path)
    try:
        return path.read_text(encoding="utf-8")
    except FileNotFoundError:
        raise error(f"{what} not found", path=str(path), hint=hint_missing) from None
    except (OSError, UnicodeDecodeError) as exc:
        raise error(f"cannot read {what} ({exc.__class__.__name__})", path=str(path),
                    hint="give a UTF-8 TOML text file") from None


def parse_toml(text: str, path: str, error: type, hint: str) -> dict:
    """Parse TOML text; ``error`` (a FitkitError class) with the file and line when it is not valid."""
    try:
        return tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        m = re.search(r"line (\d+)", str(exc))
        raise error(f"not valid TOML: {str(exc).split(' (at')[0]}", path=path,
                    line=int(m.group(1)) if m else None, hint=hint) from None


def load_circuit(path: str | Path) -> Circuit:
    """Read a circuit file; CircuitError (naming the file) when it cannot be used."""
    text = read_toml_text(path, CircuitError, "circuit file",
                          "check the path, or use a library topology name")
    return loads_circuit(text, str(path))


def loads_circuit(text: str, path: str = "<circuit>") -> Circuit:
    """Parse circuit TOML text; ``path`` is used in error messages."""
    data = parse_toml(text, path, CircuitError, "see docs/circuit-format.md for the format")
    reader = CircuitReader(text, path)
    return reader.circuit(data)


class CircuitReader:
    """Turns the parsed TOML into a Circuit, with errors pointing at lines."""

    def __init__(self, text: str, path: str) -> None:
        self.lines = text.splitlines()
        self.path = path

    def line_of(self, pattern: str) -> int | None:
        rx = re.compile(pattern)
        for i, line in enumerate(self.lines, start=1):
            if rx.search(line):
                return i
        return None

    def line_in_table(self, header: str, key: str | None) -> int | None:
        """Line of ``key = ...`` inside the table whose header matches, else of the header."""
        start = self.line_of(header)
        if start is None or key is None:
            return start
        rx = re.compile(r"^\s*\"?" + re.escape(key) + r"\"?\s*=")
        for i in range(start, len(self.lines)):
            line = self.lines[i]
            if line.lstrip().startswith("["):
                break
            if rx.search(line):
                return i + 1
        return start

    def fail(self, message: str, hint: str, part: str | None = None, key: str | None = None) -> CircuitError:
        line = None
        if part is not None:
            line = self.line_in_table(r"^\s*\[\s*parts\.\"?" + re.escape(part) + r"\"?\s*\]", key)
            message = f"part {part}: {message}"
        elif message.startswith("[measurement]"):
            line = self.line_in_table(r"^\s*\[\s*measurement\s*\]", key)
        return CircuitError(message, path=self.path, line=line, hint=hint)

    def circuit(self, data: dict[str, Any]) -> Circuit:
        extra = set(data) - TOP_KEYS
        if extra:
            raise self.fail(f"unknown key {sorted(extra)[0]!r}",
                            "top-level keys are " + ", ".join(sorted(TOP_KEYS)))
        for key in ("drive", "measure"):
            if not isinstance(data.get(key), str) or not data[key]:
                raise self.fail(f"missing {key!r} (the node the step {'drives' if key == 'drive' else 'is measured at'})",
                                f'add e.g. {key} = "{"in" if key == "drive" else "out"}"')
        parts_table = data.get("parts")
        ground = str(data.get("ground", _ground_used(parts_table)))
        if not isinstance(parts_table, dict) or not parts_table:
            raise self.fail("no parts", 'add parts as [parts.R1] tables with kind, between and value')
        parts = tuple(self.part(name, spec) for name, spec in parts_table.items())
        chain = self.chain(data.get("measurement", {}))
        name = str(data.get("name", Path(self.path).stem))
        circuit = Circuit(name, parts, data["drive"], data["measure"], ground, chain, self.path)
        return circuit.validate()

    def value(self, raw: Any, part: str, unit: str, what: str, key: str) -> float:
        try:
            return parse_value(raw, unit or None)
        except OptionError as exc:
            raise self.fail(f"bad {what}: {exc.message}", "write e.g. 10k, 4.7n, 2.2u, 4k7 or ?",
                            part, key) from None

    def part(self, name: str, spec: Any) -> Part:
        if not isinstance(spec, dict):
            raise self.fail("must be a table", "write it as [parts.NAME] with kind, between and value", name)
        extra = set(spec) - PART_KEYS
        if extra:
            raise self.fail(f"unknown key {sorted(extra)[0]!r}", "part keys are " + ", ".join(sorted(PART_KEYS)),
                            name, sorted(extra)[0])
        kind = KIND_WORDS.get(str(spec.get("kind", "")).strip().lower())
        if kind is None:
            raise self.fail(f"kind {spec.get('kind')!r} is not known",
                            'give kind = "resistor", "capacitor", "inductor" or "amplifier"', name, "kind")
        unit = PART_UNITS[kind]
        if kind == "amplifier":
            sense = spec.get("sense")
            if not isinstance(spec.get("output"), str) or not (isinstance(sense, list) and len(sense) == 2):
                raise self.fail("an amplifier needs output = NODE and sense = [PLUS, MINUS]",
                                'e.g. output = "out", sense = ["n1", "0"]', name, "sense")
            nodes = (spec["output"], str(sense[0]), str(sense[1]))
            gain_raw = spec.get("gain", 1)
            if isinstance(gain_raw, str) and gain_raw.strip().lower() in ("inf", "infinite", "ideal"):
                gain = math.inf
            elif isinstance(gain_raw, float) and math.isinf(gain_raw):
                gain = math.inf
            else:
                gain = self.value(gain_raw, name, "", "gain", "gain")
            return Part(name, kind, nodes, gain)
        between = spec.get("between")
        if not (isinstance(between, list) and len(between) == 2 and all(isinstance(n, str) for n in between)):
            raise self.fail("needs between = [NODE_A, NODE_B]", 'e.g. between = ["in", "out"]', name, "between")
        raw = spec.get("value")
        solve = spec.get("solve", False)
        if not isinstance(solve, bool):
            raise self.fail("solve must be true or false", "write solve = true", name, "solve")
        design = self.value(spec["design"], name, unit, "design value", "design") if "design" in spec else None
        if isinstance(raw, str) and raw.strip() == "?":
            unknown, value = True, design
        elif raw is None:
            if not (solve or design is not None):
                raise self.fail("has no value", 'give value = "10k" (or "?" to solve it)', name)
            unknown, value = True, design
        else:
            v = self.value(raw, name, unit, "value", "value")
            unknown = solve
            if unknown and design is None:
                design = v
            value = design if unknown else v
        return Part(name, kind, (between[0], between[1]), value, unknown, design if unknown else None)

    def chain(self, spec: Any) -> MeasurementChain:
        if not isinstance(spec, dict):
            raise self.fail("[measurement] must be a table", "see docs/circuit-format.md")
        extra = set(spec) - CHAIN_KEYS
        if extra:
            raise self.fail(f"[measurement] unknown key {sorted(extra)[0]!r}",
                            "keys are " + ", ".join(sorted(CHAIN_KEYS)))
        rs = spec.get("source_resistance")
        if rs is True:
            rs = DEFAULT_SOURCE_RESISTANCE
        elif rs is False:
            rs = None
        elif rs is not None:
            rs = self._chain_value(rs, "Ohm", "source_resistance")
        rp = cp = None
        name = ""
        if "probe" in spec:
            name = str(spec["probe"])
            if name not in PROBE_PRESETS:
                raise self.fail(f"[measurement] unknown probe {name!r}",
                                "use " + " or ".join(PROBE_PRESETS) + ", or probe_resistance and probe_capacitance",
                                key="probe")
            rp, cp = PROBE_PRESETS[name]
        if "probe_resistance" in spec:
            rp, name = self._chain_value(spec["probe_resistance"], "Ohm", "probe_resistance"), ""
        if "probe_capacitance" in spec:
            cp, name = self._chain_value(spec["probe_capacitance"], "F", "probe_capacitance"), ""
        return MeasurementChain(rs, rp, cp, name)

    def _chain_value(self, raw: Any, unit: str, key: str) -> float:
        try:
            v = parse_value(raw, unit)
        except OptionError as exc:
            raise self.fail(f"[measurement] {key}: {exc.message}", "write e.g. 50, 10M, 12p", key=key) from None
        if not v > 0:
            raise self.fail(f"[measurement] {key} must be positive", "write e.g. 50, 10M, 12p", key=key)
        return v


# -- writing ---------------------------------------------------------------

def _text(value: float, unit: str) -> str:
    if math.isinf(value):
        return "inf"
    return format_value(value, unit, digits=12)


def dumps_circuit(circuit: Circuit) -> str:
    """The circuit as TOML text in the format above (reads back to the same circuit)."""
    out = [f"name = {_q(circuit.name)}", f"ground = {_q(circuit.ground)}",
           f"drive = {_q(circuit.drive)}", f"measure = {_q(circuit.measure)}"]
    for p in circuit.parts:
        out += ["", f"[parts.{p.name}]", f"kind = {_q(p.kind)}"]
        if p.kind == "amplifier":
            gain = "\"inf\"" if math.isinf(p.value) else repr(float(p.value))
            out += [f"output = {_q(p.nodes[0])}", f"sense = [{_q(p.nodes[1])}, {_q(p.nodes[2])}]",
                    f"gain = {gain}"]
            continue
        out.append(f"between = [{_q(p.nodes[0])}, {_q(p.nodes[1])}]")
        if p.unknown:
            if p.design is not None:
                out += ["solve = true", f"design = {_q(_text(p.design, p.unit))}"]
            else:
                out.append('value = "?"')
        else:
            out.append(f"value = {_q(_text(p.value, p.unit))}")
    ch = circuit.chain
    if not ch.is_empty:
        out += ["", "[measurement]"]
        if ch.source_resistance is not None:
            out.append(f"source_resistance = {_q(_text(ch.source_resistance, 'Ohm'))}")
        if ch.probe_name and (ch.probe_resistance, ch.probe_capacitance) == PROBE_PRESETS.get(ch.probe_name):
            out.append(f"probe = {_q(ch.probe_name)}")
        else:
            if ch.probe_resistance is not None:
                out.append(f"probe_resistance = {_q(_text(ch.probe_resistance, 'Ohm'))}")
            if ch.probe_capacitance is not None:
                out.append(f"probe_capacitance = {_q(_text(ch.probe_capacitance, 'F'))}")
    return "\n".join(out) + "\n"


def _q(s: str) -> str:
    return '"' + str(s).replace("\\", "\\\\").replace('"', '\\"') + '"'


def _ground_used(parts_table: Any) -> str:
    """The ground name a file without a ``ground`` key uses: "0" when its parts name
    node "0" and never "gnd" (older files), else "gnd"."""
    nodes: set[str] = set()
    for spec in (parts_table.values() if isinstance(parts_table, dict) else ()):
        if isinstance(spec, dict):
            for key in ("between", "sense"):
                if isinstance(spec.get(key), list):
                    nodes.update(str(n) for n in spec[key])
            if isinstance(spec.get("output"), str):
                nodes.add(spec["output"])
    return "0" if "0" in nodes and "gnd" not in nodes else "gnd"
