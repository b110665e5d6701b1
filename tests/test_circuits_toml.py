"""The circuit file format: reading, writing, and errors that name the file, part and line."""

from __future__ import annotations

import math
from pathlib import Path

import pytest

from fitkit.circuits.description import Circuit, MeasurementChain, probe_chain
from fitkit.circuits.toml_format import dumps_circuit, load_circuit, loads_circuit
from fitkit.circuits.topologies import TOPOLOGIES, topology
from fitkit.circuits.transfer import transfer_function
from fitkit.errors import CircuitError

EXAMPLES = Path(__file__).resolve().parents[1] / "fitkit" / "circuits" / "examples"

LADDER = """
name = "ladder"
drive = "in"
measure = "out"

[parts.R1]
kind = "resistor"
between = ["in", "n1"]
value = "4k7"

[parts.C1]
kind = "capacitor"
between = ["n1", "0"]
value = "?"

[parts.R2]
kind = "resistor"
between = ["n1", "out"]
value = "10 kOhm"

[parts.C2]
kind = "capacitor"
between = ["out", "0"]
solve = true
value = "220n"

[measurement]
source_resistance = true
probe = "10x-passive"
"""


def test_reads_values_unknowns_and_chain():
    c = loads_circuit(LADDER, "ladder.toml")
    assert c.part("R1").value == pytest.approx(4700.0)          # RKM code (IEC 60062)
    assert c.part("R2").value == pytest.approx(10e3)
    assert c.part("C1").unknown and c.part("C1").value is None and c.part("C1").design is None
    assert c.part("C2").unknown and c.part("C2").design == pytest.approx(220e-9)
    assert c.unknowns == ("C1", "C2")
    assert c.chain == MeasurementChain(50.0, 10e6, 12e-12, "10x-passive")


@pytest.mark.parametrize("name", list(TOPOLOGIES))
def test_round_trip_of_every_topology(name):
    c = topology(name, unknown=topology(name).part_names[:1]).with_chain(probe_chain("1x-direct", 50.0))
    back = loads_circuit(dumps_circuit(c), "x.toml")
    assert back.parts == c.parts
    assert back.chain == c.chain
    assert (back.drive, back.measure, back.ground) == (c.drive, c.measure, c.ground)


def test_round_trip_keeps_odd_values_exactly():
    c = topology("rc-low-pass", R1=12345.6789012, C1=3.3e-13)
    back = loads_circuit(dumps_circuit(c))
    assert back.part("R1").value == pytest.approx(12345.6789012, rel=1e-11)
    assert back.part("C1").value == pytest.approx(3.3e-13, rel=1e-11)


@pytest.mark.parametrize("path", sorted(EXAMPLES.glob("*.toml")))
def test_example_files_load_and_analyse(path):
    c = load_circuit(path)
    assert c.unknowns
    tf = transfer_function(c.with_chain(MeasurementChain()), {n: c.part(n).design for n in c.unknowns})
    assert tf.order == 2 and math.isclose(tf.dc_gain, 1.0, rel_tol=1e-9)


@pytest.mark.parametrize("edit,words,line", [
    (("4k7", "4.7kF"), "part R1: bad value", 9),
    (('value = "?"', 'vlaue = "1n"'), "part C1: unknown key 'vlaue'", 14),
    (('kind = "capacitor"\nbetween = ["n1", "0"]', 'kind = "capacitor"\nbetween = ["n1"]'), "part C1: needs between", 13),
    (('kind = "resistor"\nbetween = ["in", "n1"]', 'kind = "resistr"\nbetween = ["in", "n1"]'), "part R1: kind", 7),
    (('between = ["out", "0"]', 'between = ["out", "gnd"]'), "looks like ground", None),
    (('between = ["n1", "out"]', 'between = ["n1", "ouy"]'), "loose end", None),
    (('probe = "10x-passive"', 'probe = "100x"'), "unknown probe", 29),
    (('drive = "in"\n', ''), "missing 'drive'", None),
    (('[parts.R2]', '[parts.R2'), "not valid TOML", 16),
])
def test_errors_name_file_part_and_line(edit, words, line):
    text = LADDER.replace(*edit)
    assert text != LADDER
    with pytest.raises(CircuitError) as err:
        loads_circuit(text, "board7.toml")
    msg = err.value.one_line()
    assert msg.startswith("board7.toml"), msg
    assert words in msg, msg
    if line is not None:
        assert err.value.line == line, msg
    assert err.value.hint


def test_missing_file_and_amplifier_gain():
    with pytest.raises(CircuitError, match="not found"):
        load_circuit("/nonexistent/board.toml")
    text = LADDER.replace('[measurement]', '[parts.U1]\nkind = "amplifier"\noutput = "n2"\n'
                          'sense = ["out", "0"]\ngain = "inf"\n[parts.RL]\nkind = "resistor"\n'
                          'between = ["n2", "0"]\nvalue = "1k"\n[measurement]')
    c = loads_circuit(text)
    assert math.isinf(c.part("U1").value) and c.part("U1").nodes == ("n2", "out", "0")
    with pytest.raises(CircuitError, match="gain"):
        loads_circuit(text.replace('gain = "inf"', 'gain = "lots"'), "b.toml")


def test_circuit_dict_is_json_ready():
    import json
    c = topology("mfb-low-pass")
    d = json.loads(json.dumps(c.to_dict()))
    assert d["parts"][-1]["value"] == "inf" and d["measure"] == "out"
    assert isinstance(c, Circuit)


def _toml_blocks_of_docs() -> list[str]:
    import re
    docs = (Path(__file__).resolve().parents[1] / "docs" / "circuit-format.md").read_text()
    return re.findall(r"```toml\n(.*?)```", docs, re.S)


def test_documented_examples_parse():
    # The full example in docs/circuit-format.md and in the module docstring are valid files.
    import textwrap
    import fitkit.circuits.toml_format as fmt
    full = _toml_blocks_of_docs()[0]
    c = loads_circuit(full, "docs-example.toml")
    assert c.unknowns == ("C1", "C2") and c.part("C2").design == pytest.approx(220e-9)
    assert c.chain.source_resistance == 50.0
    doc = fmt.__doc__.split("::\n", 1)[1].split("\nValues are read", 1)[0]
    c2 = loads_circuit(textwrap.dedent(doc), "docstring-example.toml")
    assert c2.part("U1").nodes == ("n2", "n1", "gnd")
    assert c2.part("R2").value == pytest.approx(4700.0)


def test_ground_is_gnd_by_default_and_0_still_accepted():
    # the library and the examples name ground "gnd"; a file of node "0" without a ground key
    # (written before the default changed) still reads, its ground then "0"
    from fitkit.circuits import topology
    assert topology("rc-low-pass").ground == "gnd"
    body = ('drive = "in"\nmeasure = "out"\n[parts.R1]\nkind = "resistor"\nbetween = ["in", "out"]\nvalue = "1k"\n'
            '[parts.C1]\nkind = "capacitor"\nbetween = ["out", "{g}"]\nvalue = "1u"\n')
    assert loads_circuit(body.format(g="0"), "old.toml").ground == "0"
    assert loads_circuit(body.format(g="gnd"), "new.toml").ground == "gnd"
    with pytest.raises(CircuitError, match="looks like ground"):
        loads_circuit('ground = "gnd"\n' + body.format(g="0"), "mixed.toml")
