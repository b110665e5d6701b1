"""The demo captures: reproducible by their script, small, and true to what the README says.

The script demo_captures/make_demo_captures.py must not depend on fitkit, so
these tests check it and its files against outside references only (lcapy,
python-control, scipy, textbook formulas) and read the files with plain numpy.
"""

from __future__ import annotations

import ast
import importlib.util
import json
import math
import subprocess
import sys
import tomllib
from pathlib import Path

import numpy as np
import pytest
from scipy.optimize import curve_fit

ROOT = Path(__file__).resolve().parents[1]
DEMO = ROOT / "demo_captures"
SCRIPT = DEMO / "make_demo_captures.py"
NOT_GENERATED = {"README.md", "make_demo_captures.py", "make_demo_line.py", ".gitattributes"}


@pytest.fixture(scope="module")
def script():
    """The generator script, imported as a module (it runs nothing on import)."""
    spec = importlib.util.spec_from_file_location("make_demo_captures", SCRIPT)
    module = importlib.util.module_from_spec(spec)
    sys.modules[spec.name] = module  # dataclasses need the module registered
    spec.loader.exec_module(module)
    return module


@pytest.fixture(scope="module")
def regenerated(tmp_path_factory):
    """Run the script as a user would, into a fresh folder; return (folder, names written)."""
    out = tmp_path_factory.mktemp("demo")
    done = subprocess.run([sys.executable, str(SCRIPT), str(out)], capture_output=True, text=True,
                          timeout=120, check=True)
    return out, done.stdout.split()


@pytest.fixture(scope="module")
def truth():
    return json.loads((DEMO / "truth.json").read_text())["captures"]


# ---- reproducibility and housekeeping ------------------------------------------

def test_rerunning_the_script_reproduces_the_committed_files_byte_for_byte(regenerated):
    out, names = regenerated
    assert len(names) >= 10
    for name in names:
        assert (out / name).read_bytes() == (DEMO / name).read_bytes(), f"{name} differs from the committed file"


def test_every_committed_data_file_is_made_by_the_script(regenerated):
    _, names = regenerated
    committed = {p.name for p in DEMO.iterdir() if p.is_file()} - NOT_GENERATED
    assert committed == set(names)


def test_script_uses_only_numpy_scipy_and_the_standard_library():
    tree = ast.parse(SCRIPT.read_text())
    roots = {alias.name.split(".")[0] for node in ast.walk(tree) if isinstance(node, ast.Import)
             for alias in node.names}
    roots |= {node.module.split(".")[0] for node in ast.walk(tree)
              if isinstance(node, ast.ImportFrom) and node.module}
    assert "fitkit" not in roots
    assert roots - set(sys.stdlib_module_names) == {"numpy", "scipy"}


def test_files_are_small():
    sizes = {p.name: p.stat().st_size for p in DEMO.rglob("*") if p.is_file() and "__pycache__" not in p.parts}
    assert max(sizes.values()) < 500_000, sizes
    assert sum(sizes.values()) < 2_000_000, sizes


def test_readme_describes_every_capture(truth):
    readme = (DEMO / "README.md").read_text()
    for entry in truth.values():
        for name in entry["files"]:
            assert f"`{name}`" in readme, name
    assert "may be revised" in readme


def test_at_least_three_layouts_and_the_three_kinds_of_board(truth):
    layouts_by_board = {}
    for entry in truth.values():
        layouts_by_board.setdefault(entry["board"], set()).add(entry["layout"])
    assert set(layouts_by_board) == {"good", "drifted", "wrong_part"}
    assert len({layout for layouts in layouts_by_board.values() for layout in layouts}) >= 3
    assert not truth["drifted_board_sallen_key.csv"]["board_passes_design"]
    assert not truth["wrong_part_board_ladder_input.csv"]["board_passes_design"]
    assert all(e["board_passes_design"] for e in truth.values() if e["board"] == "good")


# ---- the design files agree with the script ------------------------------------

_PREFIX = {"p": 1e-12, "n": 1e-9, "u": 1e-6, "m": 1e-3, "": 1.0, "k": 1e3, "M": 1e6}


def _engineering(text: str) -> float:
    number = text.rstrip("pnumkM")
    return float(number) * _PREFIX[text[len(number):]]


@pytest.mark.parametrize("file_name", ["input_rc_lowpass.toml", "rc_ladder.toml", "sallen_key_lowpass.toml"])
def test_design_files_match_the_design_the_captures_were_made_from(script, file_name):
    design = tomllib.loads((DEMO / "designs" / file_name).read_text())
    topology = design["circuit"]["topology"]
    expected = script.DESIGN[topology]
    passive = {role: part for role, part in design["parts"].items() if part["kind"] != "amplifier"}
    assert set(passive) == set(expected)
    for role, part in passive.items():
        designator, nominal, tolerance = expected[role]
        assert part["designator"] == designator
        assert part["kind"] == {"R": "resistor", "C": "capacitor"}[role[0]]
        assert _engineering(part["value"]) == pytest.approx(nominal, rel=1e-12)
        assert float(part["tolerance"].rstrip("%")) / 100 == pytest.approx(tolerance)
    assert (design["drive"], design["measure"]) == script.PADS[topology]
    chain = design["measurement"]
    assert _engineering(chain["source_resistance"]) == script.BENCH.source_resistance
    assert _engineering(chain["probe_resistance"]) == pytest.approx(script.BENCH.probe_resistance)
    assert _engineering(chain["probe_capacitance"]) == pytest.approx(script.BENCH.probe_capacitance)


# ---- the script's circuit equations against outside references ------------------

def _normalised(poly):
    poly = np.trim_zeros(np.asarray(poly, float), "f")
    return poly / poly[-1]


def _lcapy_polynomials(netlist: str, node: str, drive: str = "g") -> tuple[np.ndarray, np.ndarray]:
    """Numerator and denominator of V(node)/V(drive) by lcapy's nodal analysis, ideal op-amp limit."""
    import sympy
    from lcapy import Circuit, s

    circuit = Circuit(netlist)
    ratio = (circuit[node].V(s) / circuit[drive].V(s)).sympy
    symbols = {symbol.name: symbol for symbol in ratio.free_symbols}  # lcapy's symbols carry assumptions
    if "Ad" in symbols:
        ratio = sympy.limit(ratio, symbols["Ad"], sympy.oo)
    num, den = sympy.fraction(sympy.cancel(sympy.together(ratio)))
    variable = symbols["s"]
    return (np.array([float(c) for c in sympy.Poly(num, variable).all_coeffs()]),
            np.array([float(c) for c in sympy.Poly(den, variable).all_coeffs()]))


def test_sallen_key_with_bench_loading_matches_lcapy(script):
    # Reference: lcapy symbolic nodal analysis of the same netlist (op-amp gain -> infinity).
    parts = script.BOARDS["drifted"]["sallen-key-low-pass"]
    bench = script.BENCH
    netlist = f"""
    Vg g 0 s 1
    Rs g a {bench.source_resistance}
    Rp1 a 0 {bench.probe_resistance}
    Cp1 a 0 {bench.probe_capacitance}
    R1 a b {parts['R1']}
    R2 b c {parts['R2']}
    C1 b o {parts['C1']}
    C2 c 0 {parts['C2']}
    E1 o 0 opamp c o Ad
    """
    in_pad, out_pad, generator = script.sallen_key_transfer(parts, bench)
    for node, numerator in (("o", out_pad), ("a", in_pad)):
        ref_num, ref_den = _lcapy_polynomials(netlist, node)
        scale = ref_den[-1] / generator[-1]
        np.testing.assert_allclose(_normalised(generator), _normalised(ref_den), rtol=1e-9)
        np.testing.assert_allclose(np.asarray(numerator) * scale, ref_num * 1.0, rtol=1e-9)


def test_rc_ladder_with_bench_loading_matches_lcapy(script):
    # Reference: lcapy symbolic nodal analysis of the same netlist.
    parts = script.BOARDS["wrong_part"]["rc-ladder-2"]
    bench = script.BENCH
    netlist = f"""
    Vg g 0 s 1
    Rs g a {bench.source_resistance}
    Rp1 a 0 {bench.probe_resistance}
    Cp1 a 0 {bench.probe_capacitance}
    R1 a m {parts['R1']}
    C1 m 0 {parts['C1']}
    R2 m o {parts['R2']}
    C2 o 0 {parts['C2']}
    Rp2 o 0 {bench.probe_resistance}
    Cp2 o 0 {bench.probe_capacitance}
    """
    in_pad, out_pad, generator = script.rc_ladder_transfer(parts, bench)
    for node, numerator in (("o", out_pad), ("a", in_pad)):
        ref_num, ref_den = _lcapy_polynomials(netlist, node)
        scale = ref_den[-1] / generator[-1]
        np.testing.assert_allclose(_normalised(generator), _normalised(ref_den), rtol=1e-9)
        np.testing.assert_allclose(np.asarray(numerator) * scale, ref_num, rtol=1e-9)


def test_equal_part_ladder_has_the_textbook_poles_and_step_response(script):
    # Common practice, no source (also in design notes): equal-part unbuffered
    # ladder has poles at 0.382/RC and 2.618/RC, Q = 1/3, and unit-step response
    # 1 - 1.171 e^(-0.382 t/RC) + 0.171 e^(-2.618 t/RC).
    r, c = 10e3, 100e-9
    parts = {"R1": r, "C1": c, "R2": r, "C2": c}
    _, out_pad, generator = script.rc_ladder_transfer(parts, script.IDEAL)
    summary = script.response_summary(out_pad, generator)
    assert summary["q"] == pytest.approx(1 / 3, rel=1e-9)
    assert summary["time_constants_s"] == pytest.approx([r * c / 0.381966, r * c / 2.618034], rel=1e-5)
    timebase = script.Timebase(2000, 3000, 0)
    response = script.simulate(out_pad, generator, script.generator_drive(timebase, None, 0), 2e-6)
    # The generator edge ramps over the first sample (0 to 2 us); to first order that acts
    # as an ideal step at the ramp's midpoint, 1 us. Tolerance: 4-digit coefficients.
    t = timebase.times_ns()[1:] * 1e-9 - 1e-6
    textbook = 1 - 1.1708 * np.exp(-0.381966 * t / (r * c)) + 0.1708 * np.exp(-2.618034 * t / (r * c))
    assert np.max(np.abs(response[1:] - textbook)) < 5e-5


def test_simulation_agrees_with_python_control(script):
    # Reference: python-control forced_response (independent simulator) on the unscaled transfer function.
    import control

    parts = script.BOARDS["good"]["sallen-key-low-pass"]
    _, out_pad, generator = script.sallen_key_transfer(parts, script.BENCH)
    timebase = script.Timebase(2000, 3000, 300)
    drive = script.generator_drive(timebase, 500, 0)
    ours = script.simulate(out_pad, generator, drive, timebase.sample_interval)
    reference = control.forced_response(control.tf(out_pad, generator), T=timebase.times_ns() * 1e-9, U=drive)
    np.testing.assert_allclose(ours, reference.outputs, atol=1e-8)


def test_first_order_bench_truth_matches_hand_formula(truth):
    # Hand analysis (Thevenin): the generator with the input probe across it is
    # Vg Rp / (Rs + Rp) behind Rs || Rp; the output probe loads the RC node, so
    # tau = (Rth + R) || Rp * (C + Cp) and gain = Vth/Vg * Rp / (Rth + R + Rp).
    # The input probe's capacitance against Rs is a ~0.6 ns pole, neglected here.
    entry = truth["good_board.csv"]
    rs, rp, cp = 50.0, 10e6, 12e-12
    r, c = entry["parts"]["R1"]["actual"], entry["parts"]["C1"]["actual"]
    thevenin_gain, thevenin_r = rp / (rs + rp), rs * rp / (rs + rp)
    series = thevenin_r + r
    assert entry["from_generator_step"]["time_constants_s"][0] == pytest.approx(series * rp / (series + rp) * (c + cp),
                                                                               rel=2e-6)
    assert entry["from_generator_step"]["dc_gain"] == pytest.approx(thevenin_gain * rp / (series + rp), rel=2e-6)
    assert entry["actual_parts_alone"]["time_constants_s"][0] == pytest.approx(r * c, rel=1e-6)


# ---- the data in the files says what truth.json says -------------------------------

def test_good_board_csv_fits_to_the_stated_time_constant(truth):
    # Independent of fitkit: read layout 1 with numpy and fit a delayed first-order step with scipy.
    lines = (DEMO / "good_board.csv").read_text().splitlines()
    header = lines.index("Time (s),Output (V),Input (V)")
    data = np.array([[float(x) for x in line.split(",")] for line in lines[header + 1:]])
    t, out = data[:, 0], data[:, 1]
    assert len(t) == 8000 and np.mean(t < 0) == pytest.approx(0.1)

    def step(t, low, high, tau):
        return low + (high - low) * (1 - np.exp(-np.clip(t, 0, None) / tau))

    (low, high, tau), _ = curve_fit(step, t, out, p0=(0.0, 1.0, 5e-4))
    expected = truth["good_board.csv"]["from_generator_step"]
    assert tau == pytest.approx(expected["time_constants_s"][0], rel=0.01)
    assert high - low == pytest.approx(expected["dc_gain"], rel=0.01)
    volts_per_count = truth["good_board.csv"]["volts_per_count"]
    assert np.allclose(np.round((out - 0.5) / volts_per_count), (out - 0.5) / volts_per_count, atol=1e-9)


def test_sallen_key_overshoot_in_the_decimal_comma_file(truth):
    # Layout 4: names row, units row, semicolons, decimal commas. Overshoot against
    # the textbook second-order value in truth.json (exp(-pi zeta / sqrt(1 - zeta^2))).
    lines = (DEMO / "good_board_sallen_key.csv").read_text().splitlines()
    assert lines[1] == "ms;V;V"
    data = np.array([[float(x.replace(",", ".")) for x in line.split(";")] for line in lines[2:]])
    out = data[:, 2]
    final = np.mean(out[-1000:])
    smoothed = np.convolve(out, np.ones(25) / 25, mode="valid")
    overshoot = 100 * (smoothed.max() - final) / final
    assert overshoot == pytest.approx(truth["good_board_sallen_key.csv"]["from_generator_step"]["overshoot_percent"],
                                      abs=0.8)


def test_square_wave_capture_has_the_stated_edges(truth):
    # Layout 6: counts to volts with the metadata, then count level crossings of the input channel.
    lines = (DEMO / "good_board_sallen_key_square.csv").read_text().splitlines()
    settings = dict(line.split(",", 1) for line in lines[:lines.index("")] if "," in line)
    counts = np.array([[int(x) for x in line.split(",")] for line in lines[lines.index("CH1,CH2") + 1:]])
    volts = float(settings["CH1 vertical offset (V at count 0)"]) + counts[:, 0] * float(
        settings["CH1 vertical scale (V per count)"])
    crossings = np.flatnonzero(np.diff((volts > 0.5).astype(int)) != 0)
    # each edge ramps over one sample, so the first sample past 0.5 V is one sample after the edge starts
    times = float(settings["Time of first sample (s)"]) + crossings * float(settings["Sampling period (s)"])
    expected = truth["good_board_sallen_key_square.csv"]["edges_start_s"]
    assert len(times) == len(expected) >= 6
    np.testing.assert_allclose(times, expected, atol=1e-9)


def test_noise_before_the_edge_is_as_stated(truth):
    # Layout 2: pre-trigger samples of the output are noise about 0 V; 3 mV rms before
    # 6.25 mV quantisation should read as roughly 2.5-4.5 mV rms after it.
    lines = [line for line in (DEMO / "good_board_ladder.csv").read_text().splitlines() if not line.startswith("#")]
    data = np.array([[float(x) for x in line.split(",")] for line in lines[1:]])
    before = data[data[:, 0] < 0, 2]
    assert len(before) == truth["good_board_ladder.csv"]["pretrigger_samples"]
    assert 0.0025 < math.sqrt(np.mean(before ** 2)) < 0.0045


@pytest.mark.parametrize("file_name", ["input_rc_lowpass.toml", "rc_ladder.toml", "sallen_key_lowpass.toml"])
def test_design_file_netlist_is_the_circuit_the_script_simulates(script, file_name):
    # Reference: lcapy nodal analysis of the design file's own netlist (ideal source at
    # the drive pad, no probes) against the script's closed form with nominal values.
    design = tomllib.loads((DEMO / "designs" / file_name).read_text())
    ground = design["ground"]

    def node(name):
        return "0" if name == ground else name

    lines = [f"Vg {node(design['drive'])} 0 s 1"]
    for name, part in design["parts"].items():
        if part["kind"] == "amplifier":
            plus, minus = part["sense"]
            lines.append(f"E{name} {node(part['output'])} 0 opamp {node(plus)} {node(minus)} Ad")
        else:
            a, b = part["between"]
            lines.append(f"{name} {node(a)} {node(b)} {_engineering(part['value'])}")
    ref_num, ref_den = _lcapy_polynomials("\n".join(lines), node(design["measure"]), drive=design["drive"])
    topology = design["circuit"]["topology"]
    nominal = {role: spec[1] for role, spec in script.DESIGN[topology].items()}
    _, out_pad, generator = script.TRANSFER[topology](nominal, script.IDEAL)
    np.testing.assert_allclose(_normalised(generator), _normalised(ref_den), rtol=1e-9)
    np.testing.assert_allclose(np.asarray(out_pad) * ref_den[-1] / generator[-1], ref_num, rtol=1e-9)


def test_the_readme_batch_over_the_demo_folder_runs_clean(tmp_path):
    # README.md's example `fitkit batch demo_captures --out ...`: the one-file-per-channel pair
    # is one capture (fitkit.io.pairs) and the headerless .txt takes its sample interval from the
    # settings file beside it (fitkit.io.sidecar), so every capture is fitted and the status is 0
    readme = (ROOT / "README.md").read_text(encoding="utf-8")
    assert "fitkit batch demo_captures --out" in readme
    run = subprocess.run([sys.executable, "-m", "fitkit", "batch", str(DEMO), "--out", str(tmp_path / "out"),
                          "--workers", "1", "--no-plots"], capture_output=True, text=True, timeout=600)
    assert run.returncode == 0, run.stderr[-2000:]
    rows = (tmp_path / "out" / "summary.csv").read_text().splitlines()
    assert len(rows) == 1 + 8                               # 9 files, the two of the pair as one capture
    assert any("wrong_part_board_ladder_input.csv + " in r for r in rows)
