"""Board-check study over the grid of issue 16: topology x part x fault kind x capture
kind x time unit x ADC bits, plus nominal boards of each kind.

    python benchmarks/bench_check.py                 # the full grid (hours on two cores)
    python benchmarks/bench_check.py --cover         # a covering subset: every level of every factor
    python benchmarks/bench_check.py --cover --workers 2
    python benchmarks/bench_check.py --sample 24     # a reproducible random sample of the grid
    python benchmarks/bench_check.py --sample 24 --budget 240   # ... stopping after 240 s
    python benchmarks/bench_check.py --kinds "measured input,output only" --sample 40
    python benchmarks/bench_check.py --resume        # go on with a stopped run of the same options

The covering subset keeps every board (topology x part x fault, swaps, nominal)
in every capture kind, and rotates the time unit and the ADC bits across those
cells, so every level of every factor appears and each capture kind sees every
time unit and both bit depths; it is a sixth of the full grid.

Faults: a decade low, the neighbouring E24 value up, drifted 30 % low, and two
parts of one kind with different nominal values swapped. Capture kinds: a
step with the input pad measured, the output alone, and a square wave (four
edges, input measured). Time units: the capture is written as CSV with its
time column in s, ms or us (the unit in the header) and read back by
fitkit's reader. ADC: 8 or 12 bits over the scope's vertical range. Boards
come from tests/support/check_simulator.py (closed-form transfer functions from
circuit textbooks simulated with scipy.signal.lsim on a grid 16 times finer
than the scope's, so a drive edge takes a sixteenth of a sample; 3 mV rms
band-limited noise), independent of fitkit's circuit code.

Figures per capture kind: the share of faulty boards whose wrong part is the
first suspect (alone or first of tied leaders), whose wrong part is first or
tied with the first where the two are interchangeable at this node (the same
response for any value of one, or a swapped board and one part at one value;
fitkit.check.ties), and whose wrong part is
among the tied leaders at all (or whose swap is named); the share whose
implied value's 95 % interval holds the truth, the share of nominal boards
that fail or list a part outside, the number of reported values at a search
bound, and the mean seconds per check. Writes benchmarks/results/check.json
and check.md for the covering subset, check_sample.* for a sample, check_grid.json and
check_grid.md for the full grid, each with its rows log (.rows.jsonl) that
--resume goes on from.
"""

from __future__ import annotations

import argparse
import itertools
import json
import math
import random
import sys
import tempfile
import time
from concurrent.futures import ProcessPoolExecutor, as_completed
from pathlib import Path

import numpy as np
from scipy import signal

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT / "tests"))

from support.check_simulator import closed_form_tf  # noqa: E402
from test_check_diagnosis import design_for, faulty_value  # noqa: E402

from fitkit.check import check_capture  # noqa: E402
from fitkit.check.hypotheses import PLAUSIBLE_SPAN  # noqa: E402
from fitkit.check.ties import swap_reason, tie_reason  # noqa: E402
from fitkit.circuits import TOPOLOGIES  # noqa: E402
from fitkit.io import load_capture  # noqa: E402

FAULTS = ("decade", "neighbour", "drift", "swap")
KINDS = ("measured input", "output only", "square wave")
UNITS = {"s": 1.0, "ms": 1e-3, "us": 1e-6}
BITS = (8, 12)
NOISE = 3e-3
#: The drive and response are simulated this many times finer than the scope samples them.
OVERSAMPLE = 16


def boards(nominal_repeats: int = 1) -> list[tuple]:
    """Every board: (topology, fault, parts); faulty ones, then ``nominal_repeats`` nominal
    ones per topology (each checked on its own noise)."""
    out = []
    for topo, t in TOPOLOGIES.items():
        parts = [(p, k) for p, k, _, _ in t.parts if k != "amplifier"]
        design = design_for(topo)
        out += [(topo, f, (p,)) for p, _ in parts for f in FAULTS[:3]]
        out += [(topo, "swap", (a, b)) for (a, ka), (b, kb) in itertools.combinations(parts, 2)
                if ka == kb and abs(design.parts[a].nominal / design.parts[b].nominal - 1) > 0.01]
        out += [(topo, "nominal", ())] * nominal_repeats
    return out


def grid() -> list[tuple]:
    """Every cell: (topology, fault, parts, capture kind, time unit, bits)."""
    return [(*board, kind, unit, bits) for board, kind, unit, bits in itertools.product(boards(), KINDS, UNITS, BITS)]


def covering(nominal_repeats: int = 1) -> list[tuple]:
    """Every board in every capture kind; the time unit and the bits rotated across the cells
    (board b in kind k: unit (b + k) mod 3, bits (b div 3 + k) mod 2), so each kind meets
    every unit, both bit depths and every pair of them."""
    units = list(UNITS)
    return [(*board, kind, units[(b + k) % len(units)], BITS[(b // len(units) + k) % len(BITS)])
            for b, board in enumerate(boards(nominal_repeats)) for k, kind in enumerate(KINDS)]


def board_values(topo: str, fault: str, which: tuple) -> dict[str, float]:
    values = design_for(topo).nominal_values()
    if fault == "swap":
        a, b = which
        values[a], values[b] = values[b], values[a]
    elif fault != "nominal":
        values[which[0]] = faulty_value(values[which[0]], fault)
    return values


def simulate(topo: str, values: dict[str, float], kind: str, bits: int, seed: int):
    """(time s, input V, output V): a 1 V step or a four-edge square wave, scope noise and ADC.

    The drive is simulated on a grid OVERSAMPLE times finer than the scope's and both traces
    are sampled from it: scipy.signal.lsim draws straight lines between input samples, so a
    drive given at the scope's own rate switches over a whole sample interval, a drive edge
    as slow as the sampling; the response of a Q = 32 series RLC sampled 14 times a cycle to
    that ramp read Q 0.7 % low against its exact step response (Ogata's closed form), which
    the fit reproduces exactly. A generator's edge is far faster than a scope's sample.

    Where the drive's edges fall between the scope's samples is drawn at random for each
    seed: a scope's sample clock runs free of the generator. With one fixed placement (the
    grid once put every step 0.94 of an interval after a sample), the measured-input fits,
    which take a jump as centred in its interval, read every board's values late by the
    same 0.44 of a sample, and their intervals held the truth in 92.5 % of cells."""
    num, den = closed_form_tf(topo, values)
    slow = 1.0 / np.min(np.abs(np.roots(den).real))
    rng = np.random.default_rng(seed)
    if kind == "square wave":
        half = 7 * slow
        start, stop, n = -0.1 * half, 4 * half, 4000
    else:
        start, stop, n = -0.7 * slow, 6.3 * slow, 1000
    late = np.random.default_rng([seed, 1]).uniform() * (stop - start) / (n - 1)
    start, stop = start - late, stop - late
    fine = np.linspace(start, stop, (n - 1) * OVERSAMPLE + 1)
    if kind == "square wave":
        u_fine = ((np.floor(np.maximum(fine, 0) / half) % 2 == 0) & (fine >= 0)).astype(float)
    else:
        u_fine = (fine >= 0).astype(float)
    _, y_fine, _ = signal.lsim(signal.lti(num, den), u_fine, fine - fine[0])
    t, u, y = fine[::OVERSAMPLE], u_fine[::OVERSAMPLE], y_fine[::OVERSAMPLE]
    b, a = signal.butter(2, 0.2)

    def scope(x):
        lo, hi = min(-1.2, 1.2 * x.min() - 0.1), max(1.2, 1.2 * x.max() + 0.1)
        w = signal.lfilter(b, a, rng.normal(0, 1, x.size))
        lsb = (hi - lo) / 2 ** bits
        return np.clip(np.round((x + NOISE * w / w.std()) / lsb) * lsb, lo, hi)
    return t, scope(u), scope(y)


def write_capture(path: Path, t, u, y, kind: str, unit: str) -> None:
    columns = [t / UNITS[unit], y] if kind == "output only" else [t / UNITS[unit], u, y]
    header = f"time ({unit}),output (V)" if kind == "output only" else f"time ({unit}),input (V),output (V)"
    np.savetxt(path, np.column_stack(columns), delimiter=",", header=header, comments="", fmt="%.9g")


def run_cell(cell: tuple, seed: int, folder: Path) -> dict:
    topo, fault, which, kind, unit, bits = cell
    values = board_values(topo, fault, which)
    path = folder / f"board_{seed}.csv"
    write_capture(path, *simulate(topo, values, kind, bits, seed), kind, unit)
    capture = load_capture(path)
    roles = {} if kind == "output only" else {"input": "input", "output": "output"}
    t0 = time.perf_counter()
    try:
        r = check_capture(capture, design_for(topo), envelope_trials=40, **roles)
    except Exception as exc:  # noqa: BLE001 - a study records every outcome
        # the message names the temporary file; the results keep only its name (no machine path)
        message = str(exc).replace(f"{folder}/", "")
        return {"cell": list(map(str, cell)), "seed": seed, "error": f"{type(exc).__name__}: {message}"}
    out = {"cell": list(map(str, cell)), "seed": seed, "seconds": time.perf_counter() - t0, "verdict": r.verdict,
           "at_bound": sum(1 for s in r.suspects if s.value is not None and s.nominal
                           and abs(math.log(s.value / s.nominal)) >= math.log(PLAUSIBLE_SPAN))}
    if fault == "nominal":
        out["flagged"] = r.verdict == "fail" or any(c.verdict == "outside" for c in r.components)
        return out
    leaders = [s for s in r.suspects if s.tied]
    if fault == "swap":
        out["leads"] = any(s.kind == "swap" and set(s.parts) == set(which) for s in leaders)
        out["first"] = bool(leaders) and leaders[0].kind == "swap" and set(leaders[0].parts) == set(which)
        out["interchangeable"] = out["first"] or (out["leads"] and _interchangeable_with_first(
            design_for(topo), leaders[0], which, r.measured_input))
        return out
    part = which[0]
    lead = next((s for s in leaders if s.parts == (part,)), None)
    out["leads"] = lead is not None
    out["first"] = bool(leaders) and leaders[0].parts == (part,)
    out["interchangeable"] = out["first"] or (lead is not None and _interchangeable_with_first(
        design_for(topo), leaders[0], part, r.measured_input))
    out["holds"] = bool(lead is not None and lead.ci95 and lead.ci95[0] <= values[part] <= lead.ci95[1])
    return out


def _interchangeable_with_first(design, first, truth, measured: bool) -> bool:
    """The right part (a name) or swap (two names) is tied with the first leader, and the two
    give the same response (fitkit.check.ties): for any value of one part, a value of the
    other; or the swapped board and the single part at one value. No capture of this node
    can tell them apart."""
    if isinstance(truth, tuple):   # the board's swap against a single part first
        if first.kind != "single part":
            return False
        reason = swap_reason(design, *truth, first.parts[0], measured)
    elif first.kind == "swap":
        reason = swap_reason(design, *first.parts, truth, measured)
    elif first.kind == "single part" and first.value is not None:
        reason = tie_reason(design, first.parts[0], first.value, truth, measured)
    else:
        return False
    return bool(reason is not None and reason.interchangeable)


def summarise(rows: list[dict]) -> dict:
    table = {}
    for kind in KINDS:
        mine = [r for r in rows if r["cell"][3] == kind and "error" not in r]
        faulty = [r for r in mine if r["cell"][1] != "nominal"]
        single = [r for r in faulty if r["cell"][1] != "swap"]
        nominal = [r for r in mine if r["cell"][1] == "nominal"]
        share = lambda xs, key: (sum(bool(x.get(key)) for x in xs) / len(xs)) if xs else None  # noqa: E731
        table[kind] = {"faulty": len(faulty), "right_part_first": share(faulty, "first"),
                       "right_part_first_or_interchangeable": share(faulty, "interchangeable"),
                       "right_part_among_tied_leaders": share(faulty, "leads"),
                       "interval_holds_truth": share(single, "holds"), "nominal": len(nominal),
                       "nominal_flagged": share(nominal, "flagged"),
                       "values_at_bound": sum(r["at_bound"] for r in mine),
                       "errors": sum(1 for r in rows if r["cell"][3] == kind and "error" in r),
                       "seconds_per_check": (sum(r["seconds"] for r in mine) / len(mine)) if mine else None}
    return table


def choose(args) -> tuple[list[tuple], int]:
    """(cells to check in order, size of the full grid) for the command's options."""
    kinds = [k.strip() for k in args.kinds.split(",")]
    full = grid()
    pool = [c for c in (covering(args.nominal_repeats) if args.cover else full) if c[3] in kinds]
    chosen = random.Random(args.seed).sample(pool, min(args.sample, len(pool))) if args.sample else pool
    chosen = list(enumerate(chosen))[args.start:]
    return (chosen[:args.limit] if args.limit else chosen), len(full)


def run_cells(cells: list[tuple[int, tuple]], seed: int, workers: int, budget: float, log: Path) -> list[dict]:
    """Check every (index, cell) (on ``workers`` processes), one JSON line per cell appended to
    ``log`` as it ends; a cell's seed is its index among the chosen cells, so the rows do not
    depend on the workers or on where a run started (--start, --resume)."""
    rows, start = [], time.perf_counter()
    with tempfile.TemporaryDirectory() as tmp, ProcessPoolExecutor(max_workers=workers) as pool:
        pending = {pool.submit(run_cell, cell, 1000 * seed + i, Path(tmp)) for i, cell in cells}
        for done in as_completed(pending):
            row = done.result()
            rows.append(row)
            with log.open("a") as f:
                f.write(json.dumps(row) + "\n")
            if budget and time.perf_counter() - start > budget:
                for other in pending:
                    other.cancel()
                break
    return rows


def write_report(rows: list[dict], n_grid: int, elapsed: float, workers: int, cover: bool, stem: str) -> list[str]:
    table = summarise(rows)
    out = ROOT / "benchmarks" / "results"
    (out / f"{stem}.json").write_text(json.dumps({"grid_cells": n_grid, "covering_subset": cover, "checked": len(rows),
                                                "seconds": elapsed, "workers": workers,
                                                "by_capture_kind": table, "rows": rows}, indent=2))
    pct = lambda x: "-" if x is None else f"{x:.0%}"  # noqa: E731
    timed = [r["seconds"] for r in rows if "seconds" in r]
    per = sum(timed) / max(len(timed), 1)   # the checks' own times: a resumed run's rows count too
    lines = ["# Board-check study", "",
             f"{len(rows)} of {n_grid} grid cells checked ({'covering subset' if cover else 'grid'}); "
             f"this run {elapsed:.0f} s on {workers} worker(s); {per:.1f} s a check (the full grid is "
             f"about {n_grid * per / 3600:.1f} worker-hours of checks).", "",
             "| capture | faulty | right part first | first or interchangeable tie | among tied leaders | "
             "interval holds truth | nominal | nominal flagged | values at a bound | errors | s per check |",
             "| --- | --- | --- | --- | --- | --- | --- | --- | --- | --- | --- |"]
    lines += [f"| {k} | {r['faulty']} | {pct(r['right_part_first'])} | "
              f"{pct(r['right_part_first_or_interchangeable'])} | {pct(r['right_part_among_tied_leaders'])} | "
              f"{pct(r['interval_holds_truth'])} | {r['nominal']} | {pct(r['nominal_flagged'])} | "
              f"{r['values_at_bound']} | {r['errors']} | "
              f"{'-' if r['seconds_per_check'] is None else format(r['seconds_per_check'], '.1f')} |"
              for k, r in table.items()]
    misses = [r for r in rows if r.get("leads") is False or r.get("holds") is False or r.get("flagged")
              or "error" in r]
    lines += ["", "Misses (faulty boards not led by their part or whose interval misses the truth, "
              "nominal boards flagged, errors):", ""]
    lines += [f"- {' / '.join(r['cell'])}: " + (r.get("error") or f"{r.get('verdict')}"
              + ("" if r.get("leads", True) else ", not a leader")
              + ("" if r.get("holds", True) else ", interval misses the truth")) for r in misses] or ["- none"]
    (out / f"{stem}.md").write_text("\n".join(lines) + "\n")
    return lines


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--cover", action="store_true", help="the covering subset instead of the full grid")
    parser.add_argument("--nominal-repeats", type=int, default=1,
                        help="nominal boards per topology and capture kind in the covering subset")
    parser.add_argument("--sample", type=int, default=0, help="check a random sample of this many cells (0: all)")
    parser.add_argument("--start", type=int, default=0,
                        help="skip the first N chosen cells (continue a run; the rows log is appended to)")
    parser.add_argument("--resume", action="store_true",
                        help="go on with a stopped run: skip the cells its rows log already holds")
    parser.add_argument("--limit", type=int, default=0, help="check only the first N chosen cells (0: all)")
    parser.add_argument("--budget", type=float, default=0.0, help="stop after this many seconds (0: none)")
    parser.add_argument("--workers", type=int, default=1, help="processes checking cells at once")
    parser.add_argument("--seed", type=int, default=0)
    parser.add_argument("--kinds", default=",".join(KINDS), help="capture kinds, comma-separated")
    args = parser.parse_args()
    cells, n_grid = choose(args)
    out = ROOT / "benchmarks" / "results"
    out.mkdir(parents=True, exist_ok=True)
    start = time.perf_counter()
    stem = "check" if args.cover else "check_sample" if args.sample else "check_grid"
    log = out / f"{stem}.rows.jsonl"
    earlier = [json.loads(line) for line in log.read_text().splitlines() if line.strip()] \
        if (args.start or args.resume) and log.exists() else []
    if args.resume:   # a cell's seed names it: 1000 * seed + its index among the chosen cells
        done = {row["seed"] for row in earlier if "seed" in row}
        cells = [(i, cell) for i, cell in cells if 1000 * args.seed + i not in done]
    if not earlier:
        log.write_text("")
    rows = earlier + run_cells(cells, args.seed, max(args.workers, 1), args.budget, log)
    elapsed = time.perf_counter() - start   # this run's time only (a resumed run's rate is per its own cells)
    print("\n".join(write_report(rows, n_grid, elapsed, max(args.workers, 1), args.cover, stem)))


if __name__ == "__main__":
    main()
