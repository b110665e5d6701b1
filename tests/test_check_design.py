"""The design file: reading the demo designs, tolerances, limits, and one-line errors."""

from __future__ import annotations

from pathlib import Path

import pytest

from fitkit.check import load_design, loads_design
from fitkit.check.design import resolve_limits
from fitkit.errors import DesignError
from support.check_simulator import RC_DESIGN_TOML, SK_DESIGN_TOML

DEMO = Path(__file__).resolve().parents[1] / "demo_captures" / "designs"

BASE = RC_DESIGN_TOML

# extra cases of the table above: values no part of its kind has (issue 19, item 3); the
# plausible ranges are common practice, no source (fitkit.check.design.PLAUSIBLE_VALUES)
IMPLAUSIBLE = [
    (('value = "100n"', 'value = "10k"'), "part C1: value 10 kF is not a plausible capacitor", 10),
    (('value = "100n"', 'value = 1e300'), "part C1: value", 10),
    (('value = "10k"', 'value = 1e300'), "part R1: value", 7),
    (('value = "10k"', 'value = "1f"'), "is not a plausible resistor", 7),     # a femto-ohm resistor
]


def test_demo_designs_read_with_designators_tolerances_and_fixture():
    # values as stated in demo_captures/README.md: R 10 kOhm +-1 %, C31 22 nF +-5 %, C32 10 nF +-5 %
    d = load_design(DEMO / "sallen_key_lowpass.toml")
    assert [d.label(p) for p in d.parts] == ["R31", "R32", "C31", "C32"]
    assert d.parts["C1"].nominal == pytest.approx(22e-9)
    assert (d.parts["C1"].low, d.parts["C1"].high) == pytest.approx((20.9e-9, 23.1e-9))
    assert d.parts["R1"].relative_half_width == pytest.approx(0.01)
    assert "U1" not in d.parts                       # the ideal op-amp carries no tolerance
    assert d.circuit.chain.source_resistance == 50.0
    assert d.circuit.chain.probe_capacitance == pytest.approx(12e-12)
    for name in ("input_rc_lowpass", "rc_ladder"):
        assert load_design(DEMO / f"{name}.toml").topology in ("rc-low-pass", "rc-ladder-2")


def test_topology_fills_kind_and_nodes():
    d = loads_design(BASE)
    assert d.circuit.part("R1").nodes == ("in", "out")
    assert d.circuit.part("C1").kind == "capacitor"


@pytest.mark.parametrize("text,band", [
    ('"+-2%"', (9.8e3, 10.2e3)), ('"±2 %"', (9.8e3, 10.2e3)), ('"-20%/+80%"', (8e3, 18e3)),
    ('"100"', (9.9e3, 10.1e3)), ('"0.1k"', (9.9e3, 10.1e3)),
])
def test_tolerance_forms(text, band):
    d = loads_design(BASE.replace('tolerance = "1%"', f"tolerance = {text}"))
    assert (d.parts["R1"].low, d.parts["R1"].high) == pytest.approx(band)


def test_limits_relative_and_absolute():
    d = loads_design(BASE + '[limits]\ntau = "+-10%"\n')
    limits = resolve_limits(d, {"tau": 1e-3})
    assert limits["tau"] == pytest.approx((0.9e-3, 1.1e-3))
    d = loads_design(SK_DESIGN_TOML + '[limits]\nQ = [0.6, 0.8]\nf0 = ["1k", "1.2k"]\n')
    limits = resolve_limits(d, {})
    assert limits["Q"] == (0.6, 0.8)
    assert limits["f0"] == (1000.0, 1200.0)


@pytest.mark.parametrize("change,words,line", [
    (('tolerance = "1%"\n', ''), "part R1: has no tolerance", 6),
    (('tolerance = "1%"', 'tolerance = 1'), "part R1: tolerance 1 has no unit", 8),
    (('tolerance = "1%"', 'tolerance = "lots"'), "cannot read tolerance", 8),
    (('tolerance = "1%"', 'tolerance = "150%"'), "not usable", 8),
    (('value = "10k"', 'value = "?"'), "nominal value", 7),
    (('value = "10k"', 'value = "10kF"'), "part R1", 7),
    (('topology = "rc-low-pass"', 'topology = "rc-lowpass"'), "no circuit topology named", 5),
] + IMPLAUSIBLE)
def test_bad_design_files_name_file_line_and_remedy(tmp_path, change, words, line):
    path = tmp_path / "board.toml"
    path.write_text(BASE.replace(*change), encoding="utf-8")
    with pytest.raises(DesignError) as info:
        load_design(path)
    one = info.value.one_line()
    assert words in one
    assert one.startswith(f"{path}:{line}:")
    assert info.value.hint


def test_bad_limits_and_missing_file(tmp_path):
    with pytest.raises(DesignError, match="cannot judge 'overshoot'"):
        loads_design(BASE + '[limits]\novershoot = "5%"\n')
    with pytest.raises(DesignError, match="not below"):
        loads_design(BASE + '[limits]\nQ = [0.8, 0.6]\n')
    with pytest.raises(DesignError, match="design file not found"):
        load_design(tmp_path / "none.toml")
    with pytest.raises(DesignError, match="not valid TOML"):
        loads_design("name = ")
    with pytest.raises(DesignError, match="topology rc-low-pass has no part R9"):
        loads_design(BASE + '[parts.R9]\nvalue = "1k"\ntolerance = "1%"\n')


# -- values no part of its kind has, and limits the design's order does not have (issue 19, item 3) --

@pytest.mark.parametrize("design,limit,ok", [
    (BASE, 'f0 = "+-10%"', False),        # a first-order design has tau, not f0 / Q
    (BASE, 'Q = [0.6, 0.8]', False),
    (BASE, 'tau = "+-10%"', True),
    (BASE, 'gain = [0.9, 1.1]', True),
    (SK_DESIGN_TOML, 'tau = "+-10%"', False),   # a second-order design has f0 and Q
    (SK_DESIGN_TOML, 'f0 = "+-10%"', True),
])
def test_limits_must_apply_to_the_designs_order(design, limit, ok):
    text = design + "[limits]\n" + limit + "\n"
    if ok:
        assert loads_design(text).limits
    else:
        with pytest.raises(DesignError, match="does not apply to this design") as info:
            loads_design(text)
        assert "[limits]" in info.value.one_line() and info.value.hint
