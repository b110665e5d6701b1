"""Simulate a production line of Wrenmoor Sensing's load-cell front-end board (an invented scenario).

Production test bench 2 captures the two-stage RC ladder (R21, C21, R22, C22)
of every board, shift after shift, in the key,value layout of
good_board.csv (header fields Board, Bench and Date). The line's story:

* boards 1 to ``FIXTURE_CHANGE`` - 1 are tested with the fixture's first
  probe set; at board ``FIXTURE_CHANGE`` a probe is swapped, and the new one
  reads every time constant 2 % long (a fixture effect, not the boards).
  Nobody logged the swap: the header's Bench field stays the same;
* from board ``LOT_CHANGE`` on, C22 comes from a new capacitor lot whose
  values drift down steadily, reaching 6 % below the old lot's mean by the
  last board (the tolerance is 5 %): boards keep passing their check for a
  long while, and the line's history shows the drift well before the parts
  leave their tolerance;
* every ``RETEST_EVERY``-th board is captured ``RETEST_COUNT`` times (a
  re-test on the same fixture), for the repeatability check.

Uses numpy and scipy and the circuit equations of make_demo_captures.py
(never fitkit). Deterministic: a fixed seed, exact number formatting. The
true part values of every board go to line_truth.json beside the captures
(JSON, so that a batch over the folder does not take it for a capture).

Usage:  python demo_captures/make_demo_line.py OUTPUT_DIR [--boards N]
"""

from __future__ import annotations

import argparse
import json
import datetime as dt
import os
import sys
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parent))
import make_demo_captures as demo  # noqa: E402  (the bench, the scope and the circuit equations)

SEED = 20261123
BOARDS = 300
FIRST_SERIAL = 10001
FIXTURE_CHANGE = 101       # first board on probe set B
LOT_CHANGE = 181           # first board with a C22 from the new lot
LOT_DRIFT = -0.06          # C22 of the new lot at the last board, relative to the old lot's mean
PROBE_SET_B_FACTOR = 1.02  # every time constant read 2 % long on probe set B
RETEST_EVERY = 25
RETEST_COUNT = 3
SHIFT_HOURS = 8
BOARDS_PER_SHIFT = 50
LINE_START = dt.datetime(2026, 11, 23, 6, 0, 0)
TIMEBASE = demo.Timebase(interval_ns=10_000, points=2000, pretrigger=200)
# Part spreads within the reels (relative standard deviations; common practice, no source).
RESISTOR_SPREAD, CAPACITOR_SPREAD = 0.003, 0.010
OLD_LOT_OFFSET = {"C21": 0.002, "C22": 0.003}


def c22_lot_factor(board: int, boards: int) -> float:
    """The mean of C22 relative to the old lot's, for board number ``board`` (1-based)."""
    if board < LOT_CHANGE:
        return 1.0
    span = max(1, boards - LOT_CHANGE)
    return 1.0 + LOT_DRIFT * (board - LOT_CHANGE) / span


def board_parts(rng: np.random.Generator, board: int, boards: int) -> dict[str, float]:
    """True part values (ohms, farads) of one board, by designator."""
    r = lambda: 10e3 * (1 + RESISTOR_SPREAD * rng.standard_normal())  # noqa: E731
    c21 = 100e-9 * (1 + OLD_LOT_OFFSET["C21"] + CAPACITOR_SPREAD * rng.standard_normal())
    c22 = 100e-9 * (1 + OLD_LOT_OFFSET["C22"]) * c22_lot_factor(board, boards) \
        * (1 + CAPACITOR_SPREAD * rng.standard_normal())
    return {"R21": r(), "C21": c21, "R22": r(), "C22": c22}


def capture_time(board: int, attempt: int) -> dt.datetime:
    """When board number ``board`` (1-based) was captured: BOARDS_PER_SHIFT boards per shift."""
    shift, slot = divmod(board - 1, BOARDS_PER_SHIFT)
    spacing = SHIFT_HOURS * 3600 / BOARDS_PER_SHIFT
    return LINE_START + dt.timedelta(hours=SHIFT_HOURS * shift, seconds=round(spacing * slot + 40 * attempt))


def simulate_board(parts: dict[str, float], probe_set_b: bool, rng: np.random.Generator) -> dict:
    """Quantised input and output counts of one capture of the ladder stage."""
    scale = PROBE_SET_B_FACTOR if probe_set_b else 1.0
    circuit = {"R1": parts["R21"], "C1": parts["C21"] * scale, "R2": parts["R22"], "C2": parts["C22"] * scale}
    in_pad, out_pad, generator = demo.rc_ladder_transfer(circuit, demo.BENCH)
    drive = demo.generator_drive(TIMEBASE, None, 0)
    counts = {}
    for name, numerator in (("input", in_pad), ("output", out_pad)):
        clean = demo.simulate(numerator, generator, drive, TIMEBASE.sample_interval)
        counts[name] = demo.digitise(clean + demo.band_limited_noise(rng, TIMEBASE.points), demo.SCREEN)
    return counts


def write_capture(path: Path, serial: int, bench: str, when: dt.datetime, counts: dict) -> None:
    """The key,value layout of good_board.csv, with the board's serial, the bench and the time."""
    tb = TIMEBASE
    lines = ["Capture,step response of one filter stage", f"Company,{demo.COMPANY}",
             f"Board,{demo.PRODUCT} serial {serial}", "Stage,two-stage RC ladder (R21 C21 R22 C22)",
             f"Bench,{bench}", f"Stimulus,{demo.STEP_STIMULUS}", f"Sample interval (s),{tb.sample_interval:g}",
             f"Record length,{tb.points}", "Trigger,input rising edge at t = 0 s",
             f"Output,{demo.probe_line('TP22', 'output')}", f"Input,{demo.probe_line('TP21', 'input')}",
             f"Date,{when:%Y-%m-%d %H:%M:%S}", "", "Time (s),Output (V),Input (V)"]
    lines += [f"{demo.fixed_text(t // 1000, 6)},{demo.volts_text(o)},{demo.volts_text(i)}"
              for t, o, i in zip(tb.times_ns(), counts["output"], counts["input"])]
    path.write_text("\n".join(lines) + "\n", newline="")
    stamp = when.timestamp()
    os.utime(path, (stamp, stamp))


def make_line(out_dir: Path, boards: int = BOARDS) -> list[Path]:
    """Write every capture of the simulated line into out_dir (one folder per shift); return the paths."""
    out_dir.mkdir(parents=True, exist_ok=True)
    written, truth = [], []
    for board in range(1, boards + 1):
        rng = np.random.default_rng([SEED, board])
        parts = board_parts(rng, board, boards)
        probe_set_b = board >= FIXTURE_CHANGE
        bench = "production test bench 2"  # the probe swap was not logged
        serial = FIRST_SERIAL + board - 1
        attempts = RETEST_COUNT if board % RETEST_EVERY == 0 else 1
        shift_dir = out_dir / f"shift_{(board - 1) // BOARDS_PER_SHIFT + 1}"
        shift_dir.mkdir(exist_ok=True)
        for attempt in range(attempts):
            name = f"board_{serial}.csv" if attempt == 0 else f"board_{serial}_retest{attempt}.csv"
            path = shift_dir / name
            write_capture(path, serial, bench, capture_time(board, attempt),
                          simulate_board(parts, probe_set_b, rng))
            written.append(path)
        truth.append({"board": board, "serial": serial, "probe": "swapped" if probe_set_b else "first",
                      "c22_lot": "new" if board >= LOT_CHANGE else "old", "captures": attempts,
                      **{k: float(f"{v:.6g}") for k, v in parts.items()}})
    story = {"boards": boards, "fixture_change_board": FIXTURE_CHANGE, "lot_change_board": LOT_CHANGE,
             "lot_drift_at_last_board": LOT_DRIFT, "probe_swap_time_constant_factor": PROBE_SET_B_FACTOR,
             "first_serial": FIRST_SERIAL, "per_board": truth}
    (out_dir / "line_truth.json").write_text(json.dumps(story, indent=1) + "\n")
    return written


def main(argv: list[str] | None = None) -> None:
    parser = argparse.ArgumentParser(description="Simulate the demo production line's captures.")
    parser.add_argument("out_dir", help="folder to write the captures into (created if needed)")
    parser.add_argument("--boards", type=int, default=BOARDS, help=f"boards to simulate [{BOARDS}]")
    args = parser.parse_args(argv)
    paths = make_line(Path(args.out_dir), args.boards)
    print(f"{len(paths)} captures of {args.boards} boards in {args.out_dir}")


if __name__ == "__main__":
    main()
