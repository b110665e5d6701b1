"""What a right answer is for each real capture in ../shared/reference/real-captures.

Each case names the file, what fitkit must report with no options, and the
accepted range of each quantity. The ranges come from that folder's SOURCE.md:
the stated parts (nominal or measured by the capture's authors) with their
tolerance, widened to the independent fit quoted there where SOURCE.md says the
stated values are off. A capture whose quantities cannot be known from the file
alone accepts only an honest refusal. Used by tests/test_real_corpus.py and
benchmarks/study_real_captures.py.

Verdicts:
- "right": exit status 0 and every checked quantity inside its range;
- "refused": a non-zero exit status whose message names a fix (an option, a
  channel, a window, a form, a sample interval or a unit);
- "wrong": exit status 0 with a quantity outside its range or missing (the
  confident wrong answer this corpus exists to catch), or a refusal that names
  no fix, or an internal error.
"""

from __future__ import annotations

import json
import re
import subprocess
import sys
from dataclasses import dataclass, field
from pathlib import Path

from support.reference_paths import REAL_CAPTURES


@dataclass(frozen=True)
class Expected:
    """One checked quantity: its name in fitkit's output and the accepted range (SI units)."""

    name: str
    low: float
    high: float
    source: str
    #: another name the same quantity may be reported under (tau of a first-order form for tau1)
    alias: str = ""


@dataclass(frozen=True)
class Case:
    """A corpus file and what counts as right for it."""

    file: str
    circuit: str
    expected: tuple[Expected, ...]
    #: True when the file alone cannot give the right answer, so only a refusal
    #: that names the fix is acceptable (see ``why_refusal``)
    refusal_only: bool = False
    why_refusal: str = ""
    #: quantities that may also be reported "not determined" (a poorly resolved pole)
    may_be_undetermined: tuple[str, ...] = field(default=())
    #: those quantities may be absent when the fit reports any of these (a pole hidden by a dead time)
    may_be_absent_with: tuple[str, ...] = field(default=())
    #: options beyond none, only those fitkit itself asks for in its output, with the fact from
    #: SOURCE.md that answers the question (see ``why_options``)
    options: tuple[str, ...] = field(default=())
    why_options: str = ""

    @property
    def path(self) -> Path:
        return REAL_CAPTURES / self.file


CASES: tuple[Case, ...] = (
    Case("rc-ladder-adc-step.csv", "two-stage RC ladder, DAC drive, ADC at 1 kHz",
         (Expected("tau1", 4.1e-3, 6.1e-3, "stated parts 4.56 ms; seen 5.5 ms (SOURCE.md)", alias="tau"),
          Expected("tau2", 0.25e-3, 0.65e-3, "stated parts 0.44 ms; seen 0.36 ms, poorly resolved: it may be "
                   "reported not determined, or not at all behind a fitted dead time it cannot be told from")),
         may_be_undetermined=("tau2",), may_be_absent_with=("delay",)),
    Case("rl-square-scope.csv", "series RL, voltage across the inductor",
         (Expected("tau", 8.0e-6, 10.5e-6, "the capture's decay near 9 us (SOURCE.md; stated L/R = 1 us is off); "
                   "reported as tau1 when the edge's own rise (a few samples) is fitted as a fast second pole "
                   "of a band-pass", alias="tau1"),)),
    Case("AldousFinn--ECE2260/scope_1.csv", "series RLC, capacitor voltage, underdamped",
         (Expected("f0", 1.45e3, 1.60e3, "measured parts 1508.7 Hz, nominal 1591.5 Hz; seen 1522 Hz"),
          Expected("Q", 1.8, 2.3, "measured parts 2.09, nominal 2.13; seen 2.00"))),
    Case("AldousFinn--ECE2260/scope_6.csv", "series RLC, capacitor voltage, overdamped",
         (Expected("tau1", 160e-6, 205e-6, "measured parts 178 us; seen 189 us"),
          Expected("tau2", 45e-6, 70e-6, "measured parts 62 us; seen 51 us"))),
    Case("AldousFinn--ECE2260/scope_8.csv", "series RLC, capacitor voltage (slower than stated)",
         (Expected("tau1", 310e-6, 380e-6, "seen 344 us (stated parts do not describe it)"),
          Expected("tau2", 10e-6, 40e-6, "seen about 20 us, poorly determined")),
         may_be_undetermined=("tau2",)),
    Case("JustSimone--Impulsive_RLC_Experiment/Dati0511_1.txt", "series RLC ring-down after a 20 us pulse",
         (Expected("f0", 14.2e3, 15.0e3, "seen alpha 12,090 /s, wd 91,060 rad/s: f0 14.62 kHz"),
          Expected("Q", 3.3, 4.3, "seen Q 3.8 (stated parts give 7.99: a parasitic resistance)"))),
    Case("JustSimone--Impulsive_RLC_Experiment/Dati1105_Maxati.txt", "series RLC ring-down, ringing drive",
         (Expected("f0", 7.1e3, 7.7e3, "seen wd 44,850 rad/s, alpha 12,390 /s: f0 7.41 kHz; stated 7.36 kHz"),
          Expected("Q", 1.6, 2.2, "seen 1.88; stated 2.26"))),
    Case("Tom2718--Phy-Lab-2/TEK0001.CSV", "series RC, home-made capacitor",
         (Expected("tau", 0.686e-3, 0.838e-3, "R 14.74 k x C 51.70 nF (LCR) = 0.762 ms +- 10 %: a foil and wax "
                   "paper capacitor is lossy, its C depends on frequency; edges 0.793 and 0.670 ms"),)),
    Case("alikehribar--Rc-circuit/ch1.txt", "series RC from a PWM pin; the file's time column is wrong",
         (Expected("tau", 44e-6, 52e-6, "R C = 47.0 us nominal, 47.9 us measured parts; 48.7 us from the PWM period"),),
         options=("--drive-frequency", "2k"),
         why_options="the file's time column is wrong and nothing in the file says so; fitkit prints the drive's "
                     "period on the file's axis (5.08 kHz) and asks for --drive-frequency when the generator was "
                     "set otherwise; SOURCE.md: the PWM ran at 2 kHz"),
    Case("david-therincourt--microcontroleurs/data.txt", "RC charge, on-chip 12-bit ADC, clipped",
         (), refusal_only=True,
         why_refusal="49 of 100 rows are clipped at 4095 before the final level: the final value and so tau "
                     "are not observable from the file (SOURCE.md)"),
    Case("david-therincourt--microcontroleurs/data_220nF_100k.txt", "RC charge, 16-bit ADC",
         (Expected("tau", 20.9e-3, 23.2e-3, "100 k x 220 nF = 22 ms; seen 22.06 ms"),)),
    Case("david-therincourt--microcontroleurs/data_4700nF_100k.txt", "RC charge, 16-bit ADC",
         (Expected("tau", 440e-3, 510e-3, "100 k x 4.7 uF = 470 ms; seen 486.5 ms"),)),
    Case("nickdpz--Simulacion-de-filtros-en-mathlab/PrimerOrdenp.csv", "first-order active low-pass",
         (Expected("tau", 0.47e-3, 0.56e-3, "5 k x 100 nF = 0.50 ms; seen 0.536 ms"),)),
    Case("nickdpz--Simulacion-de-filtros-en-mathlab/SegundoOrden1p.csv", "unity-gain Sallen-Key, zeta 0.5",
         (Expected("f0", 148.0, 162.0, "stated 159.2 Hz; seen 151 Hz"),
          Expected("Q", 0.85, 1.05, "stated 1.0; seen 0.90"))),
    Case("nickdpz--Simulacion-de-filtros-en-mathlab/SegundoOrden2p.csv", "active low-pass, zeta 0.7",
         (Expected("f0", 455.0, 490.0, "stated 477.5 Hz; seen 468 Hz"),
          Expected("Q", 0.66, 0.75, "stated 0.714; seen 0.70"))),
)

#: Words a refusal uses when it names a fix: an option, a channel, a window, a form, an interval, a
#: unit, a vertical scale.
FIX_WORDS = re.compile(r"(--[a-z][a-z-]+|channel|window|form|sample interval|unit|vertical scale)", re.IGNORECASE)


@dataclass(frozen=True)
class Outcome:
    """What fitkit did with one corpus file, and the verdict."""

    case: Case
    status: int
    answer: dict[str, float | None]
    form: str
    message: str
    verdict: str
    why: str


def run_fitkit(path: Path, options: tuple[str, ...] = (), timeout: float = 600.0) -> tuple[int, dict | None, str]:
    """(exit status, the JSON result or None, stderr) of `fitkit fit PATH --json OPTIONS`."""
    proc = subprocess.run([sys.executable, "-m", "fitkit", "fit", str(path), "--json", *options],
                          capture_output=True, text=True, timeout=timeout)
    try:
        data = json.loads(proc.stdout) if proc.stdout.strip() else None
    except json.JSONDecodeError:
        data = None
    return proc.returncode, data, proc.stderr


def quantity(data: dict, name: str) -> tuple[float | None, bool]:
    """(value, determined) of a quantity in a fit's JSON (parameters, then derived)."""
    for table in ("parameters", "derived"):
        entry = (data.get(table) or {}).get(name)
        if entry is not None:
            return entry.get("value"), bool(entry.get("determined", True))
    return None, False


def judge(case: Case, status: int, data: dict | None, stderr: str) -> Outcome:
    """The verdict on one run (see the module docstring)."""
    message = stderr.strip().splitlines()[-1] if stderr.strip() else ""
    form = (data or {}).get("model", "") if data else ""
    answer: dict[str, float | None] = {}
    if status == 70 or "Traceback" in stderr:
        return Outcome(case, status, answer, form, message, "wrong", "internal error")
    if status != 0:
        if FIX_WORDS.search(message):
            return Outcome(case, status, answer, form, message, "refused", "non-zero exit naming a fix")
        return Outcome(case, status, answer, form, message, "wrong", "refused without naming a fix")
    if case.refusal_only:
        return Outcome(case, status, answer, form, message, "wrong",
                       f"answered with exit 0, but {case.why_refusal}")
    misses = []
    for exp in case.expected:
        value, determined = quantity(data or {}, exp.name)
        if value is None and exp.alias:
            value, determined = quantity(data or {}, exp.alias)
        answer[exp.name] = value
        hidden = any(quantity(data or {}, n)[0] is not None for n in case.may_be_absent_with)
        if value is None and hidden and exp.name in case.may_be_undetermined:
            continue
        if value is None:
            misses.append(f"{exp.name} missing (form {form})")
        elif not determined and exp.name in case.may_be_undetermined:
            continue
        elif not exp.low <= value <= exp.high:
            misses.append(f"{exp.name} = {value:.4g} outside [{exp.low:.4g}, {exp.high:.4g}]")
    if misses:
        return Outcome(case, status, answer, form, message, "wrong", "; ".join(misses))
    return Outcome(case, status, answer, form, message, "right", "every quantity in range")
