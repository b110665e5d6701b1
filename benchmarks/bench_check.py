"""Board-check fault diagnosis study: every library topology, every part, three faults, several seeds.

    python benchmarks/bench_check.py [--seeds N]

Writes benchmarks/results/check.json and check.md: for each fault kind, the
share of boards whose wrong part is the first suspect or among the tied
leaders, the share whose implied value's 95 % interval holds the truth, and
the mean time per diagnosis. The boards come from tests/check_simulator.py
(closed-form transfer functions simulated with scipy.signal.lsim; 3 mV rms
band-limited noise; 10-bit quantisation; 1,000 samples; input and output channels).
"""

from __future__ import annotations

import argparse
import json
import sys
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT / "tests"))

from check_simulator import simulate_board  # noqa: E402
from test_check_diagnosis import CASES, design_for, faulty_value  # noqa: E402

from fitkit.check.diagnosis import diagnose  # noqa: E402
from fitkit.conditioning import analyse_steps  # noqa: E402


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--seeds", type=int, default=3, help="simulated boards per case")
    args = parser.parse_args()
    stats: dict[str, dict[str, float]] = {}
    misses = []
    for i, (topo, part, fault) in enumerate(CASES):
        design = design_for(topo)
        for seed in range(args.seeds):
            values = design.nominal_values()
            truth = faulty_value(values[part], fault)
            values[part] = truth
            capture = simulate_board(topo, values, n=1000, seed=10_000 * seed + i)
            segments = analyse_steps(capture, input="input", output="output").segments
            t0 = time.perf_counter()
            dx = diagnose(design, segments)
            elapsed = time.perf_counter() - t0
            s = stats.setdefault(fault, {"boards": 0, "leads": 0, "interval_holds": 0, "seconds": 0.0})
            s["boards"] += 1
            s["seconds"] += elapsed
            lead = part in dx.leaders
            s["leads"] += lead
            est = dx.estimates.get(part)
            s["interval_holds"] += bool(lead and est is not None and est.contains(truth))
            if not lead:
                misses.append({"topology": topo, "part": part, "fault": fault, "seed": seed,
                               "suspects": [x.part for x in dx.suspects[:3]]})
    table = {f: {"boards": s["boards"], "right_part_leads": s["leads"] / s["boards"],
                 "interval_holds_truth": s["interval_holds"] / s["boards"],
                 "seconds_per_diagnosis": s["seconds"] / s["boards"]} for f, s in stats.items()}
    out = ROOT / "benchmarks" / "results"
    out.mkdir(parents=True, exist_ok=True)
    (out / "check.json").write_text(json.dumps({"seeds": args.seeds, "faults": table, "misses": misses}, indent=2))
    lines = ["# Board-check diagnosis study", "", f"{len(CASES)} cases x {args.seeds} seeds.", "",
             "| fault | boards | right part leads | interval holds truth | s per diagnosis |",
             "| --- | --- | --- | --- | --- |"]
    lines += [f"| {f} | {r['boards']} | {r['right_part_leads']:.1%} | {r['interval_holds_truth']:.1%} | "
              f"{r['seconds_per_diagnosis']:.2f} |" for f, r in table.items()]
    (out / "check.md").write_text("\n".join(lines) + "\n")
    print("\n".join(lines))


if __name__ == "__main__":
    main()
