"""`fitkit circuits`: the circuit topology library, and one circuit in detail.

    fitkit circuits                      list the topologies with a sketch and their parts
    fitkit circuits rc-ladder-2          one topology: parts, transfer function, its TOML
    fitkit circuits board.toml           the same for a circuit file
    fitkit circuits rc-ladder-2 --part C1=? --part C2=?   which unknowns a capture determines
    fitkit circuits rc-low-pass --probe 10x-passive --source-resistance 50
"""

from __future__ import annotations

import json
import math
from pathlib import Path

import click

from ..errors import OptionError
from ..units import format_value


def _polynomial(coefs) -> str:
    terms = []
    n = len(coefs) - 1
    for i, c in enumerate(coefs):
        if c == 0:
            continue
        k = n - i
        power = "" if k == 0 else (" s" if k == 1 else f" s^{k}")
        terms.append(f"{c:.6g}{power}")
    return " + ".join(terms).replace("+ -", "- ") or "0"


def _parse_parts(items: tuple[str, ...]) -> dict[str, str]:
    out: dict[str, str] = {}
    for item in items:
        for piece in item.split(","):
            piece = piece.strip()
            if not piece:
                continue
            if "=" not in piece:
                raise OptionError(f"--part {piece!r} is not NAME=VALUE",
                                  hint="write e.g. --part R1=4.7k or --part C1=? (unknown)")
            name, value = (s.strip() for s in piece.split("=", 1))
            out[name] = value
    return out


def _load(name: str, parts: dict[str, str]):
    from ..circuits.toml_format import load_circuit
    from ..circuits.topologies import TOPOLOGIES, topology
    looks_like_file = name.endswith(".toml") or Path(name).exists()
    if name.strip().lower() in TOPOLOGIES or not looks_like_file:
        return topology(name, **parts), TOPOLOGIES.get(name.strip().lower())
    circuit = load_circuit(name)
    if parts:
        from ..circuits.topologies import apply_part_settings
        circuit = apply_part_settings(circuit, parts)
    return circuit, None


def _detail(name: str, parts: dict[str, str], probe: str | None, source_resistance: str | None) -> dict:
    from ..circuits.description import MeasurementChain, probe_chain
    from ..circuits.fixture import measurement_chain_effect
    from ..circuits.identifiability import analysis_point, identifiability
    from ..circuits.toml_format import dumps_circuit
    from ..circuits.transfer import transfer_function
    from ..units import parse_value

    circuit, topo = _load(name, parts)
    if probe is not None or source_resistance is not None:
        rs = None
        if source_resistance is not None:
            rs = parse_value(source_resistance, "Ohm")
            if not rs > 0:
                raise OptionError("--source-resistance must be positive", hint="e.g. --source-resistance 50")
        chain = probe_chain(probe, rs) if probe is not None else MeasurementChain(rs)
        circuit = circuit.with_chain(chain)
    # Unknown parts are analysed at their design value, else the library default, else a typical value.
    defaults = {n: v for n, _, _, v in topo.parts} if topo else {}
    point = analysis_point(circuit, circuit.unknowns,
                           {n: defaults[n] for n in circuit.unknowns
                            if n in defaults and circuit.part(n).value is None})
    bare = circuit.with_chain(MeasurementChain())
    tf = transfer_function(bare, point)
    info = identifiability(bare, values=point) if circuit.unknowns else None
    chain_effect = None if circuit.chain.is_empty else measurement_chain_effect(circuit, values=point)
    return {
        "name": circuit.name,
        "summary": topo.summary if topo else "",
        "sketch": topo.sketch if topo else "",
        "circuit": circuit.to_dict(),
        "transfer_function": tf.to_dict(),
        "identifiability": None if info is None else info.to_dict(),
        "measurement_chain": None if chain_effect is None else chain_effect.to_dict(),
        "analysis_values": point,
        "toml": dumps_circuit(circuit),
        "_objects": (circuit, tf, info, chain_effect, point),
    }


def _print_detail(d: dict) -> None:
    circuit, tf, info, chain_effect, point = d["_objects"]
    click.echo(f"{d['name']}" + (f": {d['summary']}" if d["summary"] else ""))
    if d["sketch"]:
        click.echo(f"  {d['sketch']}")
    click.echo(f"  driven node {circuit.drive}, measured node {circuit.measure}, ground {circuit.ground}")
    click.echo("")
    click.echo("Parts")
    for p in circuit.parts:
        if p.kind == "amplifier":
            gain = "inf (ideal op-amp)" if math.isinf(p.value) else f"{p.value:g}"
            where = f"{p.nodes[0]} = gain x ({p.nodes[1]} - {p.nodes[2]})"
            click.echo(f"  {p.name:<6} {p.kind:<10} {where:<22} gain {gain}")
            continue
        where = f"{p.nodes[0]} - {p.nodes[1]}"
        if p.unknown:
            value = "unknown" + (f" (design {format_value(p.design, p.unit)})" if p.design is not None
                                 else f" (analysed at {format_value(point[p.name], p.unit)})")
        else:
            value = format_value(p.value, p.unit)
        click.echo(f"  {p.name:<6} {p.kind:<10} {where:<22} {value}")
    click.echo("")
    click.echo("Transfer function (at the values above, without the measurement chain)")
    click.echo(f"  H(s) = ({_polynomial(tf.num)}) / ({_polynomial(tf.den)})")
    q = tf.quantities()
    units = {"tau": "s", "f0": "Hz", "tau1": "s", "tau2": "s", "tau_dominant": "s"}
    shown = ", ".join(f"{k} {format_value(v, units.get(k, ''))}" for k, v in q.items())
    click.echo(f"  {shown}")
    poles = ", ".join(f"{format_value(p.real)}{'' if p.imag == 0 else f' {p.imag:+.4g}j'}" for p in tf.poles)
    click.echo(f"  poles (rad/s): {poles}")
    if len(tf.zeros):
        zeros = ", ".join(f"{format_value(z.real)}{'' if z.imag == 0 else f' {z.imag:+.4g}j'}" for z in tf.zeros)
        click.echo(f"  zeros (rad/s): {zeros}")
    if info is not None:
        click.echo("")
        click.echo("What one step capture determines")
        for m in info.messages:
            click.echo(f"  {m}")
    if chain_effect is not None:
        click.echo("")
        click.echo(f"Measurement chain: {circuit.chain.describe()}")
        for m in chain_effect.messages:
            click.echo(f"  {m}")
    click.echo("")
    click.echo("As a circuit file (TOML)")
    for line in d["toml"].splitlines():
        click.echo(f"  {line}" if line else "")


@click.command("circuits")
@click.argument("name", required=False)
@click.option("--part", "part_items", multiple=True, metavar="NAME=VALUE",
              help="Set a part value (4.7k, 10n, 2.2u) or mark it unknown with ?; repeat or separate with commas.")
@click.option("--probe", type=click.Choice(["10x-passive", "1x-direct"]),
              help="Add probe loading at the measured node and show how it shifts tau, f0 and Q.")
@click.option("--source-resistance", metavar="OHMS",
              help="Add the generator's source resistance (e.g. 50) and show its effect.")
@click.option("--json", "as_json", is_flag=True, help="Print JSON instead of text.")
def circuits(name: str | None, part_items: tuple[str, ...], probe: str | None,
             source_resistance: str | None, as_json: bool) -> None:
    """List the circuit topologies fitkit knows, or show one (NAME or a circuit .toml file)."""
    from ..circuits.topologies import TOPOLOGIES

    if name is None:
        if part_items or probe or source_resistance:
            raise OptionError("--part, --probe and --source-resistance need a topology NAME or a circuit file",
                              hint="e.g. fitkit circuits rc-low-pass --probe 10x-passive")
        if as_json:
            click.echo(json.dumps({"topologies": [t.to_dict() for t in TOPOLOGIES.values()]}, indent=2))
            return
        click.echo("Circuit topologies (driven at node in, measured at node out; "
                   "`fitkit circuits NAME` shows one in detail)")
        click.echo("")
        width = max(len(n) for n in TOPOLOGIES)
        for t in TOPOLOGIES.values():
            click.echo(f"{t.name:<{width}}  {t.sketch}")
            click.echo(f"{'':<{width}}  {t.summary}; parts {', '.join(t.part_names)}")
        return
    detail = _detail(name, _parse_parts(part_items), probe, source_resistance)
    if as_json:
        click.echo(json.dumps({k: v for k, v in detail.items() if not k.startswith("_")}, indent=2))
        return
    _print_detail(detail)
