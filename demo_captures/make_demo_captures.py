"""Make fitkit's demo captures: an invented product on an invented test bench.

Wrenmoor Sensing (an invented company) tests its load-cell front-end board one
filter stage at a time: an input RC low-pass, an unbuffered two-stage RC ladder
and a unity-gain Sallen-Key low-pass. A generator with a 50 ohm source drives
the stage's input pad with a 0 V / 1 V step or square wave; a two-channel 8-bit
scope records the input and output pads through 10:1 probes (10 Mohm || 12 pF).
See README.md beside this script for the boards and the truth behind each file.

Simulation is exact: the transfer function from the generator's open-circuit
voltage to each probed pad comes from the part values by closed-form circuit
equations (source resistance and probe loading included) and scipy.signal.lsim
computes the response. Each generator edge is a linear ramp over one sample,
starting on a sample instant, which lsim's linear interpolation represents
exactly. Band-limited Gaussian noise is added and each channel is quantised
like an 8-bit scope. The truth (parts, time constants, f0, Q) goes to truth.json.

Uses numpy and scipy only, never fitkit: the demo data must be independent of
the code that analyses it. Deterministic (fixed seed, exact integer-based
number formatting): running it twice writes byte-identical files.

Usage:  python demo_captures/make_demo_captures.py [OUTPUT_DIR]   (default: this folder)
"""

from __future__ import annotations

import argparse
import datetime as dt_module
import json
import math
from dataclasses import dataclass
from pathlib import Path

import numpy as np
from scipy import signal

SEED = 20261118
COMPANY = "Wrenmoor Sensing (invented)"
PRODUCT = "load-cell front-end board rev C"
TRIGGER_WALL_CLOCK = dt_module.datetime(2026, 11, 18, 15, 22, 41, 318204)

GENERATOR_LOW, GENERATOR_HIGH = 0.0, 1.0  # volts, generator open-circuit levels
COUNTS_PER_DIVISION = 32  # 8 divisions on screen = 256 counts of the 8-bit converter
NOISE_RMS = 0.003  # volts at the probe tip, per channel, before quantisation
NOISE_CUTOFF_FRACTION = 0.1  # noise bandwidth (2nd-order Butterworth) / sample rate


@dataclass(frozen=True)
class Fixture:
    """Source resistance of the generator (ohms) and loading of each probe (ohms, farads)."""
    source_resistance: float
    probe_resistance: float
    probe_capacitance: float

    def probe_admittance(self) -> np.ndarray:
        """1/Rp + s Cp as a polynomial in s (siemens)."""
        return np.array([self.probe_capacitance, 1.0 / self.probe_resistance])


# 50 ohm generator; 10:1 passive probe about 10 Mohm || 12 pF (typical figures;
# common practice, no source).
BENCH = Fixture(50.0, 10e6, 12e-12)
IDEAL = Fixture(0.0, math.inf, 0.0)  # the stage alone: ideal source, no probes

# IEC 60063 E24 series, one decade: used only to report how far an
# out-of-tolerance part sits from the nearest preferred value.
E24 = (1.0, 1.1, 1.2, 1.3, 1.5, 1.6, 1.8, 2.0, 2.2, 2.4, 2.7, 3.0,
       3.3, 3.6, 3.9, 4.3, 4.7, 5.1, 5.6, 6.2, 6.8, 7.5, 8.2, 9.1)

# ---- the design and the three boards ------------------------------------------
# Per stage: part role -> (designator, nominal value in SI units, tolerance fraction).
DESIGN = {
    "rc-low-pass": {"R1": ("R11", 10e3, 0.01), "C1": ("C11", 100e-9, 0.05)},
    "rc-ladder-2": {"R1": ("R21", 10e3, 0.01), "C1": ("C21", 100e-9, 0.05),
                    "R2": ("R22", 10e3, 0.01), "C2": ("C22", 100e-9, 0.05)},
    "sallen-key-low-pass": {"R1": ("R31", 10e3, 0.01), "R2": ("R32", 10e3, 0.01),
                            "C1": ("C31", 22e-9, 0.05), "C2": ("C32", 10e-9, 0.05)},
}
STAGE_NAMES = {"rc-low-pass": "input RC low-pass", "rc-ladder-2": "two-stage RC ladder",
               "sallen-key-low-pass": "unity-gain Sallen-Key low-pass"}
PADS = {"rc-low-pass": ("TP11", "TP12"), "rc-ladder-2": ("TP21", "TP22"),
        "sallen-key-low-pass": ("TP31", "TP32")}

# The parts actually fitted on each board (what a meter would read), SI units.
BOARDS = {
    "good": {
        "serial": "0417",
        "rc-low-pass": {"R1": 10.04e3, "C1": 98.2e-9},
        "rc-ladder-2": {"R1": 9.97e3, "C1": 101.8e-9, "R2": 10.06e3, "C2": 97.6e-9},
        "sallen-key-low-pass": {"R1": 10.03e3, "R2": 9.95e3, "C1": 22.6e-9, "C2": 9.86e-9},
    },
    "drifted": {  # C31: an X7R ceramic fitted where C0G is specified; lost 37 % to ageing and DC bias
        "serial": "0431",
        "rc-ladder-2": {"R1": 10.05e3, "C1": 99.1e-9, "R2": 9.93e3, "C2": 102.4e-9},
        "sallen-key-low-pass": {"R1": 9.96e3, "R2": 10.02e3, "C1": 13.86e-9, "C2": 10.12e-9},
    },
    "wrong_part": {  # C22: a 10 nF part (marked 103) placed where 100 nF (104) belongs
        "serial": "0452",
        "rc-ladder-2": {"R1": 10.02e3, "C1": 103.1e-9, "R2": 9.98e3, "C2": 9.71e-9},
        "sallen-key-low-pass": {"R1": 9.99e3, "R2": 10.04e3, "C1": 21.7e-9, "C2": 10.05e-9},
    },
}


# ---- transfer functions: polynomials in s, highest power first ------------------

def ladder_node_polynomials(series_ohms: list[float], shunt_admittances: list[np.ndarray]) -> list[np.ndarray]:
    """Voltage at every node of an R-C ladder as a polynomial in s, for V_last = 1.

    The ladder runs generator -> series_ohms[0] -> node 1 (shunt_admittances[0]
    to ground) -> series_ohms[1] -> node 2 -> ... -> the last node (open).
    Walking back from the open end with V = 1, I = 0, Kirchhoff's laws give at
    each node I += Y V and across each series resistor V += R I. Every Y is a
    polynomial G + sC and every R a constant, so all voltages stay polynomials.
    Returns [V_generator, V_node1, ..., V_last]; V_node / V_generator is the
    transfer function from the generator's open-circuit voltage to that node.
    """
    voltage, current = np.array([1.0]), np.array([0.0])
    node_voltages = []
    for resistance, admittance in zip(reversed(series_ohms), reversed(shunt_admittances)):
        node_voltages.append(voltage)
        current = np.polyadd(current, np.polymul(admittance, voltage))
        voltage = np.polyadd(voltage, resistance * current)
    node_voltages.append(voltage)
    return node_voltages[::-1]


def rc_lowpass_transfer(parts: dict, fixture: Fixture):
    """(V_input_pad, V_output_pad, V_generator) polynomials; ratios are transfer functions.

    Generator -> source resistance -> input pad (probe) -> R1 -> output pad
    (C1 and probe to ground).
    """
    probe = fixture.probe_admittance()
    generator, in_pad, out_pad = ladder_node_polynomials(
        [fixture.source_resistance, parts["R1"]], [probe, np.polyadd([parts["C1"], 0.0], probe)])
    return in_pad, out_pad, generator


def rc_ladder_transfer(parts: dict, fixture: Fixture):
    """Same for the unbuffered two-stage ladder: R1 in series, C1 to ground, R2 in series, C2 to ground."""
    probe = fixture.probe_admittance()
    generator, in_pad, _middle, out_pad = ladder_node_polynomials(
        [fixture.source_resistance, parts["R1"], parts["R2"]],
        [probe, np.array([parts["C1"], 0.0]), np.polyadd([parts["C2"], 0.0], probe)])
    return in_pad, out_pad, generator


def sallen_key_transfer(parts: dict, fixture: Fixture):
    """Same for the unity-gain Sallen-Key low-pass with an ideal op-amp.

    R1 from the input pad to node b, R2 from b to the + input, C1 from b to
    the output (feedback), C2 from the + input to ground; output = + input.
    Nodal analysis gives V_out / V_pad = 1 / D with
    D = R1 R2 C1 C2 s^2 + C2 (R1 + R2) s + 1 and the stage's input admittance
    s C2 (1 + s R2 C1) / D. With source resistance Rs and probe admittance Yp
    on the pad: V_pad / V_gen = D / (D + Rs (Yp D + s C2 (1 + s R2 C1))).
    (The same V_out / V_pad is in Texas Instruments application report
    SLOA024, "Analysis of the Sallen-Key Architecture"; from memory.)
    """
    r1, r2, c1, c2 = parts["R1"], parts["R2"], parts["C1"], parts["C2"]
    d = np.array([r1 * r2 * c1 * c2, c2 * (r1 + r2), 1.0])
    input_current = np.array([r2 * c1 * c2, c2, 0.0])
    loading = np.polyadd(np.polymul(fixture.probe_admittance(), d), input_current)
    return d, np.array([1.0]), np.polyadd(d, fixture.source_resistance * loading)


TRANSFER = {"rc-low-pass": rc_lowpass_transfer, "rc-ladder-2": rc_ladder_transfer,
            "sallen-key-low-pass": sallen_key_transfer}


def simulate(numerator: np.ndarray, denominator: np.ndarray, drive: np.ndarray, sample_interval: float) -> np.ndarray:
    """Response (volts) of numerator/denominator to the sampled drive, starting at rest.

    Time is measured in sample intervals inside (s = s'/dt), so that the
    polynomial coefficients are of order one when scipy builds the state space.
    """
    def rescaled(poly):
        poly = np.atleast_1d(np.asarray(poly, float))
        return poly / sample_interval ** np.arange(len(poly) - 1, -1, -1)
    num, den = rescaled(numerator), rescaled(denominator)
    steps = np.arange(len(drive), dtype=float)
    _, response, _ = signal.lsim((num / den[0], den / den[0]), drive, steps)
    return np.asarray(response, float)


# ---- the truth: what a correct analysis should find ------------------------------

def response_summary(numerator: np.ndarray, denominator: np.ndarray) -> dict:
    """DC gain, and time constants or f0/Q/overshoot of the dominant poles of numerator/denominator.

    Poles more than 10^4 times faster than the slowest (the input probe's
    capacitance against the 50 ohm source, about 0.6 ns) are listed apart.
    """
    poles = sorted(np.roots(denominator), key=abs)
    main = [p for p in poles if abs(p) < 1e4 * abs(poles[0])]
    fast = [p for p in poles if abs(p) >= 1e4 * abs(poles[0])]
    summary = {"dc_gain": float(np.polyval(numerator, 0.0) / np.polyval(denominator, 0.0))}
    if all(abs(p.imag) <= 1e-9 * abs(p) for p in main):
        summary["time_constants_s"] = sorted((-1.0 / p.real for p in main), reverse=True)
    if len(main) == 2:
        w0 = math.sqrt(abs(main[0] * main[1]))
        summary["f0_hz"] = w0 / (2 * math.pi)
        summary["q"] = w0 / -(main[0] + main[1]).real
        zeta = 1.0 / (2.0 * summary["q"])
        # textbook second-order step overshoot, exp(-pi zeta / sqrt(1 - zeta^2))
        summary["overshoot_percent"] = (100.0 * math.exp(-math.pi * zeta / math.sqrt(1 - zeta ** 2))
                                        if zeta < 1 else 0.0)
    if fast:
        summary["negligible_fast_time_constants_s"] = [-1.0 / p.real for p in fast]
    return summary


def nearest_e24(value: float) -> dict:
    """Nearest E24 value and how far (percent) the value sits from it."""
    decade = 10.0 ** math.floor(math.log10(value))
    candidates = [m * decade * f for m in E24 for f in (1.0, 10.0)]
    nearest = min(candidates, key=lambda c: abs(math.log(value / c)))
    return {"value": nearest, "offset_percent": 100.0 * (value / nearest - 1.0)}


def stage_truth(board: str, topology: str) -> dict:
    """Parts (nominal, actual, within tolerance?) and the responses they give."""
    actual = BOARDS[board][topology]
    parts = {}
    for role, (designator, nominal, tolerance) in DESIGN[topology].items():
        deviation = actual[role] / nominal - 1.0
        parts[role] = {"designator": designator, "nominal": nominal, "tolerance_percent": 100 * tolerance,
                       "actual": actual[role], "deviation_percent": 100 * deviation,
                       "within_tolerance": abs(deviation) <= tolerance}
        if abs(deviation) > tolerance:
            parts[role]["nearest_e24"] = nearest_e24(actual[role])
    in_pad, out_pad, generator = TRANSFER[topology](actual, BENCH)
    _, alone_out, alone_source = TRANSFER[topology](actual, IDEAL)
    nominal_parts = {role: spec[1] for role, spec in DESIGN[topology].items()}
    _, nominal_out, nominal_source = TRANSFER[topology](nominal_parts, IDEAL)
    return {
        "stage": STAGE_NAMES[topology], "topology": topology, "board": board,
        "board_serial": BOARDS[board]["serial"], "pads": {"input": PADS[topology][0], "output": PADS[topology][1]},
        "parts": parts,
        "board_passes_design": all(p["within_tolerance"] for p in parts.values()),
        "design_nominal": response_summary(nominal_out, nominal_source),
        "actual_parts_alone": response_summary(alone_out, alone_source),
        "from_generator_step": response_summary(out_pad, generator),
        "from_measured_input_pad": response_summary(out_pad, in_pad),
    }


def rounded(value):
    """Floats to 6 significant digits, recursively (for truth.json)."""
    if isinstance(value, float):
        return float(f"{value:.6g}")
    if isinstance(value, list):
        return [rounded(v) for v in value]
    if isinstance(value, dict):
        return {k: rounded(v) for k, v in value.items()}
    return value


# ---- the scope -----------------------------------------------------------------

@dataclass(frozen=True)
class Timebase:
    """Sample interval in integer nanoseconds, number of samples, samples before the trigger."""
    interval_ns: int
    points: int
    pretrigger: int

    @property
    def sample_interval(self) -> float:
        return self.interval_ns * 1e-9

    def times_ns(self) -> np.ndarray:
        return (np.arange(self.points, dtype=np.int64) - self.pretrigger) * self.interval_ns


@dataclass(frozen=True)
class Vertical:
    """One channel's setting: volts per division (a 1-2-5 value) and the screen-centre voltage."""
    volts_per_division: float
    centre: float

    @property
    def volts_per_count(self) -> float:
        return self.volts_per_division / COUNTS_PER_DIVISION


SCREEN = Vertical(0.2, 0.5)  # 0.2 V/div centred on 0.5 V: -0.3 V .. +1.29 V, 6.25 mV per count
VOLT_DECIMALS = 5  # 6.25 mV per count and a 0.5 V centre are exact with 5 decimals


def generator_drive(timebase: Timebase, half_period: int | None, lead_in: int) -> np.ndarray:
    """Generator open-circuit voltage at each sample, with `lead_in` extra samples first.

    Low until the trigger sample, then high (or, with `half_period` samples, a
    square wave whose rising edge is at the trigger); each edge ramps linearly
    from one sample to the next.
    """
    index = np.arange(-lead_in, timebase.points) - timebase.pretrigger
    if half_period is None:
        high = index >= 1
    else:
        phase = np.mod(index - 1, 2 * half_period)
        high = phase < half_period
    return np.where(high, GENERATOR_HIGH, GENERATOR_LOW)


def band_limited_noise(rng: np.random.Generator, points: int) -> np.ndarray:
    """Gaussian noise through a 2nd-order Butterworth low-pass at 0.1 x sample rate, rms NOISE_RMS."""
    sos = signal.butter(2, 2.0 * NOISE_CUTOFF_FRACTION, output="sos")  # cutoff as a fraction of Nyquist
    warm_up = 1000
    noise = signal.sosfilt(sos, rng.standard_normal(points + warm_up))[warm_up:]
    return noise * (NOISE_RMS / math.sqrt(float(np.mean(noise ** 2))))


def digitise(volts: np.ndarray, vertical: Vertical) -> np.ndarray:
    """8-bit counts (-128..127 about the screen centre); refuses to clip."""
    counts = np.rint((volts - vertical.centre) / vertical.volts_per_count).astype(np.int64)
    if counts.min() <= -128 or counts.max() >= 127:
        raise RuntimeError("a demo capture would clip: change its vertical setting")
    return counts


def simulate_capture(board: str, topology: str, timebase: Timebase, stream: int,
                     half_period: int | None = None, lead_in: int = 0) -> dict:
    """Clean volts, and quantised counts, at the input and output pads of one board stage."""
    in_pad, out_pad, generator = TRANSFER[topology](BOARDS[board][topology], BENCH)
    drive = generator_drive(timebase, half_period, lead_in)
    rng = np.random.default_rng([SEED, stream])
    result = {}
    for name, numerator in (("input", in_pad), ("output", out_pad)):
        clean = simulate(numerator, generator, drive, timebase.sample_interval)[lead_in:]
        result[name + "_clean"] = clean
        result[name] = digitise(clean + band_limited_noise(rng, timebase.points), SCREEN)
    return result


# ---- exact text for numbers -----------------------------------------------------

def fixed_text(units: int, decimals: int, comma: bool = False) -> str:
    """The integer `units` * 10^-decimals as exact fixed-point text."""
    sign = "-" if units < 0 else ""
    whole, frac = divmod(abs(int(units)), 10 ** decimals)
    text = f"{sign}{whole}.{frac:0{decimals}d}" if decimals else f"{sign}{whole}"
    return text.replace(".", ",") if comma else text


def volts_text(count: int, comma: bool = False) -> str:
    """Exact decimal text of a quantised voltage on SCREEN."""
    scale = 10 ** VOLT_DECIMALS
    units = round(SCREEN.centre * scale) + int(count) * round(SCREEN.volts_per_count * scale)
    return fixed_text(units, VOLT_DECIMALS, comma)


def seconds_sci(time_ns: int) -> str:
    """Seconds in scientific notation with explicit signs, e.g. +1.250000e-03."""
    return f"{int(time_ns) * 1e-9:+.6e}"


# ---- the file layouts (each header is our own design) -------------------------------

#: The settings file beside a capture that does not state them (fitkit.io.sidecar; not imported:
#: this script uses numpy and scipy only).
SIDECAR_SUFFIX = ".fitkit.toml"

def board_line(board: str) -> str:
    return f"{PRODUCT} serial {BOARDS[board]['serial']}"


def stage_line(topology: str) -> str:
    designators = " ".join(spec[0] for spec in DESIGN[topology].values())
    return f"{STAGE_NAMES[topology]} ({designators})"


def probe_line(pad: str, role: str) -> str:
    return (f"{pad} {role} pad / 10:1 probe / {SCREEN.volts_per_division:g} V/div"
            f" / screen centre {SCREEN.centre:g} V")


STEP_STIMULUS = "one rising edge 0 V to 1 V open circuit from a 50 ohm source"
SQUARE_STIMULUS = "200 Hz square wave 0 V to 1 V open circuit from a 50 ohm source"


def write_metadata_block(paths: list[Path], board: str, topology: str, tb: Timebase, cap: dict) -> None:
    """Layout 1: key,value lines, a blank line, then a header row; output before input."""
    pad_in, pad_out = PADS[topology]
    lines = ["Capture,step response of one filter stage", f"Company,{COMPANY}",
             f"Board,{board_line(board)}", f"Stage,{stage_line(topology)}", "Bench,production test bench 2",
             f"Stimulus,{STEP_STIMULUS}", f"Sample interval (s),{tb.sample_interval:g}",
             f"Record length,{tb.points}", "Trigger,input rising edge at t = 0 s",
             f"Output,{probe_line(pad_out, 'output')}", f"Input,{probe_line(pad_in, 'input')}",
             f"Date,{TRIGGER_WALL_CLOCK:%Y-%m-%d %H:%M:%S}", "", "Time (s),Output (V),Input (V)"]
    lines += [f"{fixed_text(t // 1000, 6)},{volts_text(o)},{volts_text(i)}"
              for t, o, i in zip(tb.times_ns(), cap["output"], cap["input"])]
    paths[0].write_text("\n".join(lines) + "\n", newline="")


def write_commented(paths: list[Path], board: str, topology: str, tb: Timebase, cap: dict) -> None:
    """Layout 2: '# key: value' lines, then a header row; time negative before the trigger."""
    pad_in, pad_out = PADS[topology]
    span = 8 * SCREEN.volts_per_division
    lines = [f"# bench: production test bench 2 at {COMPANY}", f"# board: {board_line(board)}",
             f"# stage: {stage_line(topology)}", f"# stimulus: {STEP_STIMULUS}",
             f"# sample rate: {round(1e9 / tb.interval_ns)} Sa/s", f"# sample count: {tb.points}",
             f"# trigger: CH1 rising edge at t = 0 s ({tb.pretrigger} samples before it)",
             f"# CH1: {pad_in} input pad with 10:1 probe", f"# CH1 range: {span:g} V",
             f"# CH1 offset: {SCREEN.centre:g} V (screen centre)",
             f"# CH2: {pad_out} output pad with 10:1 probe", f"# CH2 range: {span:g} V",
             f"# CH2 offset: {SCREEN.centre:g} V (screen centre)", "t (s),CH1 (V),CH2 (V)"]
    lines += [f"{seconds_sci(t)},{volts_text(i)},{volts_text(o)}"
              for t, i, o in zip(tb.times_ns(), cap["input"], cap["output"])]
    paths[0].write_text("\n".join(lines) + "\n", newline="")


def write_units_row_with_timing(paths: list[Path], board: str, topology: str, tb: Timebase, cap: dict) -> None:
    """Layout 3: names row, then a units row that also carries the start time and time step; no time column."""
    pad_in, pad_out = PADS[topology]
    first = tb.times_ns()[0]
    lines = [f"{pad_in} input,{pad_out} output,start time (s),time step (s)",
             f"V,V,{seconds_sci(first)},{seconds_sci(tb.interval_ns)}"]
    lines += [f"{volts_text(i)},{volts_text(o)}" for i, o in zip(cap["input"], cap["output"])]
    paths[0].write_text("\n".join(lines) + "\n", newline="")


def write_names_then_units(paths: list[Path], board: str, topology: str, tb: Timebase, cap: dict) -> None:
    """Layout 4: names row, units row; semicolon-delimited with decimal commas, time in ms."""
    pad_in, pad_out = PADS[topology]
    lines = [f"Time;{pad_in} input;{pad_out} output", "ms;V;V"]
    lines += [f"{fixed_text(t // 1000, 3, comma=True)};{volts_text(i, True)};{volts_text(o, True)}"
              for t, i, o in zip(tb.times_ns(), cap["input"], cap["output"])]
    paths[0].write_text("\n".join(lines) + "\n", newline="")


def write_settings_beside_data(paths: list[Path], board: str, topology: str, tb: Timebase, cap: dict) -> None:
    """Layout 5: one file per channel; settings in the first two columns beside time and volts; CRLF."""
    for path, number, pad, channel in zip(paths, (1, 2), PADS[topology], ("input", "output")):
        _write_one_channel(path, number, pad, board, topology, tb, cap[channel], channel)


def _write_one_channel(path: Path, number: int, pad: str, board: str, topology: str, tb: Timebase,
                       counts: np.ndarray, role: str) -> None:
    """One channel's file of layout 5; fields space-padded."""
    settings = [("Board serial", BOARDS[board]["serial"]), ("Stage", STAGE_NAMES[topology]),
                ("Pad", f"{pad} {role}"), ("Channel", f"CH{number}"), ("Points", str(tb.points)),
                ("Time step (s)", f"{tb.sample_interval:.6e}"), ("Pretrigger samples", str(tb.pretrigger)),
                ("Value unit", "V"), ("Screen", f"{SCREEN.volts_per_division:g} V/div"),
                ("Screen centre", f"{SCREEN.centre:g} V"), ("Probe", "10:1"),
                ("Date", f"{TRIGGER_WALL_CLOCK:%Y-%m-%d}")]
    lines = [f"{'Bench record':<19},{'':<19},,{'Time (s)':>14},{pad + ' (V)':>9}"]
    for row, (t, count) in enumerate(zip(tb.times_ns(), counts)):
        key, value = settings[row] if row < len(settings) else ("", "")
        lines.append(f"{key:<19},{value:<19},,{seconds_sci(t):>14},{volts_text(count):>9}")
    path.write_text("\r\n".join(lines) + "\r\n", newline="")


def write_raw_counts(paths: list[Path], board: str, topology: str, tb: Timebase, cap: dict) -> None:
    """Layout 6: a settings block (vertical scale, offset, sampling period), then integer counts."""
    pad_in, pad_out = PADS[topology]
    lines = ["Raw 8-bit capture", f"Board,{board_line(board)}", f"Stage,{stage_line(topology)}",
             f"Stimulus,{SQUARE_STIMULUS}", f"Sampling period (s),{tb.sample_interval:g}", f"Samples,{tb.points}",
             f"Time of first sample (s),{tb.times_ns()[0] * 1e-9:g}"]
    for number, pad in ((1, f"{pad_in} input"), (2, f"{pad_out} output")):
        lines += [f"CH{number} pad,{pad}", f"CH{number} vertical scale (V per count),{SCREEN.volts_per_count:g}",
                  f"CH{number} vertical offset (V at count 0),{SCREEN.centre:g}"]
    lines += ["Conversion,volts = offset + count x scale", "", "CH1,CH2"]
    lines += [f"{i},{o}" for i, o in zip(cap["input"], cap["output"])]
    paths[0].write_text("\n".join(lines) + "\n", newline="")


def write_no_header(paths: list[Path], board: str, topology: str, tb: Timebase, cap: dict) -> None:
    """Layout 7: no header at all; two space-separated columns, input and output volts."""
    lines = [f"{volts_text(i):>9} {volts_text(o):>9}" for i, o in zip(cap["input"], cap["output"])]
    paths[0].write_text("\n".join(lines) + "\n", newline="")
    # what the file does not say, in the settings file fitkit reads beside it (FILE.fitkit.toml)
    first_us = tb.times_ns()[0] // 1000
    sidecar = [f"# what {paths[0].name} does not say (fitkit reads this file beside it)",
               f'sample_interval = "{tb.interval_ns // 1000}u"', f'time_origin = "{first_us}u"', 'value_unit = "V"']
    paths[0].with_name(paths[0].name + SIDECAR_SUFFIX).write_text("\n".join(sidecar) + "\n", newline="")


def write_wall_clock(paths: list[Path], board: str, topology: str, tb: Timebase, cap: dict) -> None:
    """Layout 8: a settings block, then wall-clock date-time text (to the millisecond) per row."""
    pad_in, pad_out = PADS[topology]
    lines = ["Scope export", f"Board,{board_line(board)}", f"Stage,{stage_line(topology)}",
             f"Stimulus,{STEP_STIMULUS}", f"Sample interval (s),{tb.sample_interval:g}", f"Points,{tb.points}",
             f"Trigger at,{TRIGGER_WALL_CLOCK:%Y-%m-%d %H:%M:%S.%f}", f"Pretrigger samples,{tb.pretrigger}",
             "Time stamps,wall clock truncated to the millisecond", "",
             f"Date and time,CH1 {pad_in} (V),CH2 {pad_out} (V)"]
    for t, i, o in zip(tb.times_ns(), cap["input"], cap["output"]):
        stamp = TRIGGER_WALL_CLOCK + dt_module.timedelta(microseconds=int(t) // 1000)
        lines.append(f"{stamp:%Y-%m-%d %H:%M:%S}.{stamp.microsecond // 1000:03d},{volts_text(i)},{volts_text(o)}")
    paths[0].write_text("\n".join(lines) + "\n", newline="")


# ---- the set of demo captures --------------------------------------------------------

SK = "sallen-key-low-pass"
SQUARE_HALF_PERIOD = 1250  # samples at 2 us: a 200 Hz square wave
# (file names, layout number, board, stage, timebase, noise stream, writer)
CAPTURES = [
    (["good_board.csv"], 1, "good", "rc-low-pass", Timebase(1000, 8000, 800), 1, write_metadata_block),
    (["good_board_ladder.csv"], 2, "good", "rc-ladder-2", Timebase(5000, 4000, 400), 2, write_commented),
    (["good_board_sallen_key.csv"], 4, "good", SK, Timebase(1000, 5000, 500), 3, write_names_then_units),
    (["good_board_sallen_key_square.csv"], 6, "good", SK, Timebase(2000, 10000, 500), 4, write_raw_counts),
    (["drifted_board_ladder.csv"], 8, "drifted", "rc-ladder-2", Timebase(5000, 4000, 400), 5, write_wall_clock),
    (["drifted_board_sallen_key.csv"], 3, "drifted", SK, Timebase(1000, 5000, 500), 6,
     write_units_row_with_timing),
    (["wrong_part_board_ladder_input.csv", "wrong_part_board_ladder_output.csv"], 5, "wrong_part", "rc-ladder-2",
     Timebase(5000, 4000, 400), 7, write_settings_beside_data),
    (["wrong_part_board_sallen_key.txt"], 7, "wrong_part", SK, Timebase(1000, 5000, 500), 8, write_no_header),
]

def make_all(out_dir: Path) -> list[str]:
    """Write every demo capture and truth.json into out_dir; return the file names written."""
    out_dir.mkdir(parents=True, exist_ok=True)
    written, truth = [], {}
    for names, layout, board, topology, tb, stream, writer in CAPTURES:
        square = writer is write_raw_counts
        cap = simulate_capture(board, topology, tb, stream, SQUARE_HALF_PERIOD if square else None,
                               lead_in=4 * SQUARE_HALF_PERIOD if square else 0)
        writer([out_dir / name for name in names], board, topology, tb, cap)
        written += names + [n + SIDECAR_SUFFIX for n in names if (out_dir / (n + SIDECAR_SUFFIX)).exists()]
        edge_count = -(-(tb.points - tb.pretrigger) // SQUARE_HALF_PERIOD) if square else 1
        edges = [k * SQUARE_HALF_PERIOD * tb.sample_interval for k in range(edge_count)]
        truth[names[0]] = {
            "files": names, "layout": layout, "layout_description": writer.__doc__.split(": ", 1)[1].strip(),
            "sample_interval_s": tb.sample_interval, "points": tb.points, "pretrigger_samples": tb.pretrigger,
            "first_sample_s": float(tb.times_ns()[0]) * 1e-9,
            "edges_start_s": edges, "edge_ramp_s": tb.sample_interval,
            "stimulus": "200 Hz square wave, first edge rising" if square else "one rising edge",
            "volts_per_count": SCREEN.volts_per_count, "noise_rms_before_quantisation_v": NOISE_RMS,
            "noise_bandwidth_hz": NOISE_CUTOFF_FRACTION / tb.sample_interval,
            **stage_truth(board, topology)}
    meta = {"scenario": f"{COMPANY}: {PRODUCT}; production test bench 2",
            "fixture": {"source_resistance_ohm": BENCH.source_resistance,
                        "probe_resistance_ohm": BENCH.probe_resistance,
                        "probe_capacitance_f": BENCH.probe_capacitance,
                        "generator_low_v": GENERATOR_LOW, "generator_high_v": GENERATOR_HIGH},
            "seed": SEED, "captures": truth}
    (out_dir / "truth.json").write_text(json.dumps(rounded(meta), indent=1) + "\n", newline="")
    return written + ["truth.json"]


def main(argv: list[str] | None = None) -> None:
    parser = argparse.ArgumentParser(description="Write fitkit's demo captures (deterministic).")
    parser.add_argument("out_dir", nargs="?", default=str(Path(__file__).resolve().parent),
                        help="folder to write into (default: this script's folder)")
    args = parser.parse_args(argv)
    for name in make_all(Path(args.out_dir)):
        print(name)


if __name__ == "__main__":
    main()
