"""The design file of a board check: the circuit at its nominal values, each
part's tolerance, the measurement fixture and optional acceptance limits.

A design file is a fitkit circuit file (docs/circuit-format.md) with a few
more keys::

    name = "input RC low-pass"
    ground = "gnd"
    drive = "TP11"
    measure = "TP12"

    [circuit]
    topology = "rc-low-pass"     # optional: a library topology; parts may then omit kind/between

    [parts.R1]
    designator = "R11"           # optional: the name printed on the board
    kind = "resistor"
    between = ["TP11", "TP12"]
    value = "10k"                # the nominal value
    tolerance = "1%"             # percent ("1%", "+-1%", "-20%/+80%") or absolute ("50p", "0.5 nF")
    series = "E24"               # optional: the preferred-value series it is chosen from (default E24)

    [measurement]                # optional: source resistance and probe, as in circuit files
    source_resistance = "50"

    [limits]                     # optional acceptance limits on behavioural quantities
    tau = "+-10%"                # relative to the design's own value ...
    Q = [0.6, 0.8]               # ... or an absolute range (engineering notation allowed)

Quantities that may carry limits: tau (first order), f0 and Q (second order
and higher), gain (the DC gain; judged only when the input is measured).
Without limits a quantity is judged against the range the tolerances allow
(see envelope.py). Amplifiers are ideal and carry no tolerance; every
resistor, capacitor and inductor needs one. Every problem raises DesignError
naming the file, the line and part when known, and what to do.
"""

from __future__ import annotations

import math
import re
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Mapping

from ..circuits import Circuit, get_topology
from ..circuits.preferred import SERIES
from ..circuits.toml_format import CircuitReader, parse_toml, read_toml_text
from ..errors import CircuitError, DesignError, OptionError
from ..units import parse_value

#: Keys a design adds to the circuit format.
DESIGN_PART_KEYS = {"designator", "tolerance", "series"}
DESIGN_TOP_KEYS = {"circuit", "limits"}
#: Nominal values a design may give each kind of part (SI): beyond these the value is a
#: mistake of the file, such as "10k" written for a capacitor (10 kF). Common practice,
#: no source: wider than any part on a signal board, from milliohm shunts to teraohm
#: electrometer resistors, femtofarads to farad supercapacitors, picohenries to henries.
PLAUSIBLE_VALUES = {"resistor": (1e-4, 1e13), "capacitor": (1e-16, 10.0), "inductor": (1e-13, 1e3)}
#: Behavioural quantities a design may put limits on, and their SI units.
LIMIT_QUANTITIES = {"tau": "s", "f0": "Hz", "Q": "", "gain": ""}


@dataclass(frozen=True)
class PartSpec:
    """One toleranced part of a design.

    name: the part's name in the circuit (R1, C2, ...).
    designator: the name printed on the board (R21); equals ``name`` when not given.
    kind: resistor, capacitor or inductor.
    nominal: design value, SI units (ohms, farads, henries).
    low, high: the tolerance band, SI units (nominal within [low, high]).
    tolerance_text: the tolerance as written in the file.
    series: the IEC 60063 series the part's value comes from ("E24").
    """

    name: str
    designator: str
    kind: str
    nominal: float
    low: float
    high: float
    tolerance_text: str
    series: str = "E24"

    @property
    def relative_half_width(self) -> float:
        """The larger of the two relative tolerances (fraction, e.g. 0.05)."""
        return max(self.high / self.nominal - 1.0, 1.0 - self.low / self.nominal)

    def to_dict(self) -> dict[str, Any]:
        return {"part": self.name, "designator": self.designator, "kind": self.kind, "nominal": self.nominal,
                "low": self.low, "high": self.high, "tolerance": self.tolerance_text, "series": self.series}


@dataclass(frozen=True)
class Design:
    """A board design: the nominal circuit, tolerances and acceptance limits.

    circuit: every part known at its nominal value; the fixture in ``circuit.chain``.
    parts: toleranced parts by circuit part name, in file order.
    limits: quantity -> (low, high) in SI units, given in the file.
    limit_texts: quantity -> the limit as written.
    topology: the library topology named in [circuit], or "".
    path: the file read ("" in memory).
    """

    name: str
    circuit: Circuit
    parts: Mapping[str, PartSpec]
    limits: Mapping[str, tuple[float, float]] = field(default_factory=dict)
    limit_texts: Mapping[str, str] = field(default_factory=dict)
    topology: str = ""
    path: str = ""

    def label(self, part: str) -> str:
        """The board designator of a circuit part (its name when none)."""
        spec = self.parts.get(part)
        return spec.designator if spec else part

    def nominal_values(self) -> dict[str, float]:
        return {n: s.nominal for n, s in self.parts.items()}

    def to_dict(self) -> dict[str, Any]:
        return {"name": self.name, "path": self.path, "topology": self.topology,
                "parts": [s.to_dict() for s in self.parts.values()],
                "limits": {k: list(v) for k, v in self.limits.items()},
                "measurement": self.circuit.chain.to_dict()}


def load_design(path: str | Path) -> Design:
    """Read a design file; DesignError (naming the file) when it cannot be used."""
    text = read_toml_text(path, DesignError, "design file", "check the path to the .toml file")
    return loads_design(text, str(path))


def loads_design(text: str, path: str = "<design>") -> Design:
    """Parse design TOML text; ``path`` is used in error messages."""
    data = parse_toml(text, path, DesignError, "see docs/design-format.md for the format")
    return _DesignReader(text, path).design(data)


class _DesignReader:
    def __init__(self, text: str, path: str) -> None:
        self.text, self.path = text, path
        self.lines = CircuitReader(text, path)

    def fail(self, message: str, hint: str, part: str | None = None, key: str | None = None,
             table: str | None = None) -> DesignError:
        line = None
        if part is not None:
            line = self.lines.line_in_table(r"^\s*\[\s*parts\.\"?" + re.escape(part) + r"\"?\s*\]", key)
            message = f"part {part}: {message}"
        elif table is not None:
            line = self.lines.line_in_table(r"^\s*\[\s*" + re.escape(table) + r"\s*\]", key)
        return DesignError(message, path=self.path, line=line, hint=hint)

    def design(self, data: dict[str, Any]) -> Design:
        topo_name = self.topology_name(data.get("circuit"))
        parts_in = data.get("parts")
        if not isinstance(parts_in, dict) or not parts_in:
            raise self.fail("no parts", "add one [parts.NAME] table per part, with value and tolerance")
        extras: dict[str, dict[str, Any]] = {}
        circuit_data = {k: v for k, v in data.items() if k not in DESIGN_TOP_KEYS}
        circuit_parts: dict[str, Any] = {}
        topo = get_topology(topo_name) if topo_name else None
        for name, spec in parts_in.items():
            if not isinstance(spec, dict):
                raise self.fail("must be a table", "write it as [parts.NAME] with value and tolerance", name)
            extras[name] = {k: spec[k] for k in DESIGN_PART_KEYS if k in spec}
            plain = {k: v for k, v in spec.items() if k not in DESIGN_PART_KEYS}
            if topo is not None:
                plain = self.fill_from_topology(topo, name, plain, data)
            circuit_parts[name] = plain
        if topo is not None:
            for pname, kind, _, _ in topo.parts:      # an ideal amplifier needs no entry of its own
                if kind == "amplifier" and pname not in parts_in:
                    circuit_parts[pname] = self.fill_from_topology(topo, pname, {}, data)
                    extras[pname] = {}
            missing = [p for p in topo.part_names if p not in circuit_parts]
            if missing:
                raise self.fail(f"topology {topo.name} has part {missing[0]} but the design does not",
                                f"add [parts.{missing[0]}] with its value and tolerance")
        circuit_data["parts"] = circuit_parts
        try:
            circuit = self.lines.circuit(circuit_data)
        except CircuitError as exc:
            raise DesignError(exc.message, path=exc.path, line=exc.line, hint=exc.hint) from None
        for p in circuit.parts:
            if p.unknown:
                raise self.fail("a design part needs its nominal value, not '?' or solve = true",
                                'give value = "10k" and a tolerance', p.name, "value")
        specs = {}
        for p in circuit.parts:
            if p.kind == "amplifier":
                if "tolerance" in extras[p.name]:
                    raise self.fail("amplifiers are taken as ideal and carry no tolerance",
                                    "remove the tolerance key", p.name, "tolerance")
                continue
            specs[p.name] = self.part_spec(p.name, p.kind, p.value, extras[p.name])
        limits, texts = self.limits(data.get("limits", {}))
        self.applicable_limits(circuit, limits)
        name = str(data.get("name", Path(self.path).stem))
        return Design(name, circuit, specs, limits, texts, topo_name or "", self.path)

    def topology_name(self, table: Any) -> str | None:
        if table is None:
            return None
        if not isinstance(table, dict) or set(table) - {"topology"}:
            raise self.fail("[circuit] takes one key, topology", 'write topology = "rc-ladder-2"', table="circuit")
        name = table.get("topology")
        if name is None:
            return None
        try:
            return get_topology(str(name)).name
        except CircuitError as exc:
            raise self.fail(exc.message, exc.hint or "", table="circuit", key="topology") from None

    def fill_from_topology(self, topo, name: str, plain: dict[str, Any], data: dict[str, Any]) -> dict[str, Any]:
        """Kind and nodes from the library topology for a part that omits them."""
        entry = next((p for p in topo.parts if p[0] == name), None)
        if entry is None:
            raise self.fail(f"topology {topo.name} has no part {name}",
                            "its parts are " + ", ".join(topo.part_names), name)
        _, kind, nodes, default = entry
        rename = {"in": data.get("drive", "in"), "out": data.get("measure", "out"), "gnd": data.get("ground", "gnd")}
        nodes = tuple(rename.get(n, n) for n in nodes)
        out = dict(plain)
        if "kind" in out and str(out["kind"]).strip().lower() != kind:
            raise self.fail(f"kind {out['kind']!r} differs from topology {topo.name}'s {kind}",
                            "fix the kind or the topology", name, "kind")
        out.setdefault("kind", kind)
        if kind == "amplifier":
            out.setdefault("output", nodes[0])
            out.setdefault("sense", [nodes[1], nodes[2]])
            out.setdefault("gain", "inf" if math.isinf(default) else default)
        else:
            out.setdefault("between", list(nodes))
        return out

    def part_spec(self, name: str, kind: str, nominal: float, extra: dict[str, Any]) -> PartSpec:
        raw = extra.get("tolerance")
        if raw is None:
            raise self.fail("has no tolerance", 'add tolerance = "1%" (percent) or an absolute value like "50p"',
                            name)
        unit = {"resistor": "Ohm", "capacitor": "F", "inductor": "H"}[kind]
        self.plausible(name, kind, nominal, unit)
        low, high = self.tolerance(raw, nominal, unit, name)
        series = str(extra.get("series", "E24")).strip().upper()
        if series not in SERIES:
            raise self.fail(f"unknown series {series!r}", "use one of " + ", ".join(SERIES), name, "series")
        return PartSpec(name, str(extra.get("designator", name)), kind, float(nominal), low, high, str(raw), series)

    def plausible(self, name: str, kind: str, nominal: float, unit: str) -> None:
        """Refuse a nominal value no part of this kind has (PLAUSIBLE_VALUES)."""
        from ..units import format_value
        lo, hi = PLAUSIBLE_VALUES[kind]
        if not (math.isfinite(nominal) and lo <= nominal <= hi):
            raise self.fail(f"value {format_value(nominal, unit)} is not a plausible {kind} "
                            f"(expected {format_value(lo, unit)} to {format_value(hi, unit)})",
                            f"check the value and its suffix (for a {kind}, e.g. "
                            + {"resistor": '"10k"', "capacitor": '"100n"', "inductor": '"10m"'}[kind] + ")",
                            name, "value")

    def applicable_limits(self, circuit: Circuit, limits: Mapping[str, Any]) -> None:
        """Refuse a limit on a quantity the design's response does not have (an f0 limit
        on a first-order design, a tau limit on a second-order one)."""
        from ..circuits import transfer_function
        try:
            quantities = transfer_function(circuit.with_chain_parts()).quantities()
        except (CircuitError, ValueError, ArithmeticError):
            return
        has = {"gain"} | {q for q in ("tau", "f0", "Q") if q in quantities}
        for q in limits:
            if q not in has:
                raise self.fail(f"[limits] {q} does not apply to this design: its response has "
                                + ", ".join(sorted(has - {"gain"})) + " (and gain)",
                                "remove the limit, or put it on " + " or ".join(sorted(has)),
                                table="limits", key=q)

    def tolerance(self, raw: Any, nominal: float, unit: str, name: str) -> tuple[float, float]:
        hint = 'write tolerance = "1%", "+-5%", "-20%/+80%" or an absolute value such as "50p"'
        if not isinstance(raw, str):
            raise self.fail(f"tolerance {raw!r} has no unit", hint, name, "tolerance")
        text = raw.strip().replace("±", "+-").replace(" ", "")
        asym = re.fullmatch(r"-(\d+(?:\.\d*)?)%/\+(\d+(?:\.\d*)?)%", text)
        if asym:
            lo, hi = float(asym.group(1)) / 100, float(asym.group(2)) / 100
        else:
            sym = text[2:] if text.startswith("+-") else text
            try:
                if sym.endswith("%"):
                    lo = hi = float(sym[:-1]) / 100
                else:
                    lo = hi = parse_value(sym, unit) / nominal
            except (ValueError, OptionError):
                raise self.fail(f"cannot read tolerance {raw!r}", hint, name, "tolerance") from None
        if not (0 < lo < 1 and 0 < hi and math.isfinite(hi)):
            raise self.fail(f"tolerance {raw!r} is not usable (must be above 0 and below 100 % downwards)",
                            hint, name, "tolerance")
        return nominal * (1 - lo), nominal * (1 + hi)

    def limits(self, table: Any) -> tuple[dict[str, tuple[float, float]], dict[str, str]]:
        if not isinstance(table, dict):
            raise self.fail("[limits] must be a table", 'e.g. [limits] with tau = "+-10%"', table="limits")
        out, texts = {}, {}
        for q, raw in table.items():
            if q not in LIMIT_QUANTITIES:
                raise self.fail(f"[limits] cannot judge {q!r}", "limits may be set on " + ", ".join(LIMIT_QUANTITIES),
                                table="limits", key=q)
            hint = f'write {q} = "+-10%" or {q} = [LOW, HIGH]'
            texts[q] = str(raw)
            if isinstance(raw, list) and len(raw) == 2:
                try:
                    lo, hi = (parse_value(v, LIMIT_QUANTITIES[q] or None) for v in raw)
                except (ValueError, OptionError):
                    raise self.fail(f"[limits] {q}: cannot read {raw!r}", hint, table="limits", key=q) from None
                if not lo < hi:
                    raise self.fail(f"[limits] {q}: low {lo} is not below high {hi}", hint, table="limits", key=q)
                out[q] = (float(lo), float(hi))
            elif isinstance(raw, str) and raw.strip().endswith("%"):
                try:
                    frac = float(raw.strip().replace("±", "").replace("+-", "").rstrip("%")) / 100
                except ValueError:
                    raise self.fail(f"[limits] {q}: cannot read {raw!r}", hint, table="limits", key=q) from None
                if not 0 < frac < 1:
                    raise self.fail(f"[limits] {q}: {raw!r} must be between 0 and 100 %", hint, table="limits", key=q)
                out[q] = (-frac, frac)   # relative; resolved against the design's own value later
                texts[q] = "relative " + raw.strip()
            else:
                raise self.fail(f"[limits] {q}: cannot read {raw!r}", hint, table="limits", key=q)
        return out, texts


def resolve_limits(design: Design, nominal_quantities: Mapping[str, float]) -> dict[str, tuple[float, float]]:
    """The design's limits in SI units: relative ones ("+-10%") applied to the nominal quantity."""
    out = {}
    for q, (lo, hi) in design.limits.items():
        if design.limit_texts.get(q, "").startswith("relative"):
            v = nominal_quantities.get(q)
            if v is None or not math.isfinite(v):
                continue
            a, b = sorted((v * (1 + lo), v * (1 + hi)))
            out[q] = (a, b)
        else:
            out[q] = (lo, hi)
    return out


__all__ = ["Design", "PartSpec", "load_design", "loads_design", "resolve_limits"]


def analysed_circuit(circuit: Circuit, measured_input: bool) -> Circuit:
    """The circuit with its measurement chain as known parts, as a capture sees it:
    without the generator's source resistance when the input is measured at the
    driven pad (the model is then driven from that pad; the probe stays in)."""
    from dataclasses import replace
    from ..circuits.description import SOURCE_PART
    full = circuit.with_chain_parts()
    if measured_input and circuit.chain.source_resistance is not None:
        parts = tuple(p for p in full.parts if p.name != SOURCE_PART)
        return replace(full, parts=parts, drive=circuit.drive)
    return full
