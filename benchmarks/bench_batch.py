"""Batch throughput, speed-up and memory: `fitkit batch` over simulated captures.

Run:  python benchmarks/bench_batch.py [--count 1000] [--samples 10000] [--workers 1 2]

Writes COUNT simulated captures of SAMPLES samples each as CSV (time, output)
to a temporary folder: a seeded mix of first-order (60 %), two-real-pole
(25 %) and ringing second-order (15 %) step responses, each with its own
parameters (spread +-10 %) and 4 mV of Gaussian noise. The responses are the
textbook closed forms:

  first order     1 - exp(-t/tau)
  two real poles  1 - (tau1 exp(-t/tau1) - tau2 exp(-t/tau2)) / (tau1 - tau2)
  second order    1 - exp(-zeta w0 t) (cos(wd t) + zeta/sqrt(1 - zeta^2) sin(wd t)),
                  wd = w0 sqrt(1 - zeta^2)

Then, for each worker count, runs the batch with automatic form selection
(model "auto") into a fresh output folder, in a fresh child process so that
its resource usage is its own, and records: wall time and throughput
(captures/s) of the batch (run_batch: hashing, fitting, writing each result),
the time to write the summary, CPU seconds used, the peak resident memory per
worker (resource.getrusage: the process itself for 1 worker, which runs in
process; the largest pool process for more), the statuses and chosen forms,
and the load average before and after (other work on the machine slows the
figures down). Target (issue 8): speed-up from 1 to 2 workers >= 1.8.
Results go to benchmarks/results/batch.json and batch.md.
"""

from __future__ import annotations

import argparse
import json
import os
import platform
import subprocess
import sys
import tempfile
import time
from datetime import datetime, timezone
from pathlib import Path

import numpy as np

from fitkit.atomic import write_text_atomic

HERE = Path(__file__).resolve().parent
SPEEDUP_TARGET = 1.8
RECORD_S = 5e-3
EDGE_S = 1e-3
NOISE_V = 0.004

_CHILD = r"""
import json, os, resource, sys, time
from fitkit.batch import BatchSettings, run_batch, write_summary

folder, out, workers = sys.argv[1], sys.argv[2], int(sys.argv[3])
load_before = os.getloadavg()
wall0, cpu0 = time.perf_counter(), os.times()
run = run_batch([folder], BatchSettings(model="auto"), out, workers=workers)
wall1 = time.perf_counter()
write_summary(run, out)
wall2, cpu1 = time.perf_counter(), os.times()
self_usage = resource.getrusage(resource.RUSAGE_SELF)
child_usage = resource.getrusage(resource.RUSAGE_CHILDREN)
models = {}
for r in run.records:
    models[r["model"]] = models.get(r["model"], 0) + 1
print(json.dumps({
    "workers": workers, "n_inputs": len(run.records), "computed": run.computed,
    "batch_s": wall1 - wall0, "summary_s": wall2 - wall1,
    "cpu_self_s": (cpu1.user - cpu0.user) + (cpu1.system - cpu0.system),
    "cpu_children_s": (cpu1.children_user - cpu0.children_user) + (cpu1.children_system - cpu0.children_system),
    "peak_rss_self_mb": self_usage.ru_maxrss / 1024, "peak_rss_largest_child_mb": child_usage.ru_maxrss / 1024,
    "statuses": {s: run.count(s) for s in sorted({r["status"] for r in run.records})},
    "models": {str(k): v for k, v in sorted(models.items(), key=lambda kv: -kv[1])},
    "load_before": load_before, "load_after": os.getloadavg()}))
"""


def simulated_response(kind: str, t: np.ndarray, rng: np.random.Generator) -> np.ndarray:
    """One step response (edge at t = 0, 1 V step), textbook closed forms (see module docstring)."""
    tp = np.clip(t, 0.0, None)
    spread = lambda: rng.uniform(0.9, 1.1)  # noqa: E731 - part-to-part spread
    if kind == "first-order":
        tau = 200e-6 * spread()
        y = 1.0 - np.exp(-tp / tau)
    elif kind == "two-real-pole":
        tau1, tau2 = 300e-6 * spread(), 60e-6 * spread()
        y = 1.0 - (tau1 * np.exp(-tp / tau1) - tau2 * np.exp(-tp / tau2)) / (tau1 - tau2)
    else:
        w0, zeta = 2 * np.pi * 5e3 * spread(), 0.25 * spread()
        wd = w0 * np.sqrt(1 - zeta ** 2)
        y = 1.0 - np.exp(-zeta * w0 * tp) * (np.cos(wd * tp) + zeta / np.sqrt(1 - zeta ** 2) * np.sin(wd * tp))
    return np.where(t > 0, y, 0.0)


def write_captures(folder: Path, count: int, samples: int, seed: int = 2026) -> dict[str, int]:
    """Write the simulated captures; return how many of each kind."""
    rng = np.random.default_rng(seed)
    t = np.arange(samples) * (RECORD_S / samples) - EDGE_S
    kinds = rng.choice(["first-order", "two-real-pole", "second-order"], size=count, p=[0.6, 0.25, 0.15])
    folder.mkdir(parents=True, exist_ok=True)
    for i, kind in enumerate(kinds):
        y = simulated_response(kind, t, rng) + rng.normal(0.0, NOISE_V, samples)
        np.savetxt(folder / f"unit_{i:04d}.csv", np.column_stack([t, y]), delimiter=",",
                   header="time,out", comments="", fmt="%.8g")
    return {k: int(np.sum(kinds == k)) for k in ("first-order", "two-real-pole", "second-order")}


def run_configuration(folder: Path, out: Path, workers: int) -> dict:
    done = subprocess.run([sys.executable, "-c", _CHILD, str(folder), str(out), str(workers)],
                          capture_output=True, text=True, check=True)
    result = json.loads(done.stdout.strip().splitlines()[-1])
    result["throughput_per_s"] = result["n_inputs"] / result["batch_s"]
    result["peak_rss_per_worker_mb"] = (result["peak_rss_self_mb"] if workers == 1
                                        else result["peak_rss_largest_child_mb"])
    return result


def _speedup_text(base: float | None, seconds: float) -> str:
    return f"{base / seconds:.2f}" if base else "n/a"


def markdown(doc: dict) -> str:
    rows = doc["runs"]
    lines = ["# Batch benchmark", "",
             f"{doc['count']} simulated captures of {doc['samples']} samples each (CSV), automatic form "
             f"selection (`model=auto`); mix: " + ", ".join(f"{n} {k}" for k, n in doc["mix"].items()) + ".",
             f"Machine: {doc['cores']} cores, shared with other work (load averages below). "
             f"Command: `{doc['command']}`.", "",
             "| workers | batch time | throughput | speed-up | CPU time | CPU per capture | "
             "peak memory per worker | load before -> after (1 min) |",
             "|---|---|---|---|---|---|---|---|"]
    base = rows[0]["batch_s"] if rows[0]["workers"] == 1 else None
    for r in rows:
        cpu = r["cpu_self_s"] + r["cpu_children_s"]
        lines.append(f"| {r['workers']} | {r['batch_s']:.1f} s | {r['throughput_per_s']:.2f} captures/s | "
                     f"{_speedup_text(base, r['batch_s'])} | {cpu:.0f} s | {cpu / r['n_inputs']:.2f} s | "
                     f"{r['peak_rss_per_worker_mb']:.0f} MB | "
                     f"{r['load_before'][0]:.2f} -> {r['load_after'][0]:.2f} |")
    if doc["speedup"] is None:
        lines += ["", "One worker count only in this run: no speed-up measured here."]
    else:
        lines += ["", f"Speed-up 1 -> {rows[-1]['workers']} workers: {doc['speedup']:.2f} "
                      f"(target {SPEEDUP_TARGET}): {'PASS' if doc['speedup'] >= SPEEDUP_TARGET else 'NOT MET'}."]
    cpu_each = [(r["cpu_self_s"] + r["cpu_children_s"]) / r["n_inputs"] for r in rows]
    if len(rows) > 1:
        lines += ["", "CPU seconds per capture: " + ", ".join(
            f"{c:.2f} s ({r['workers']} worker{'s' if r['workers'] > 1 else ''})" for c, r in zip(cpu_each, rows))
            + f"; the pool itself adds {100 * (cpu_each[-1] / cpu_each[0] - 1):+.0f} % CPU."]
    # the load after a run includes the batch's own workers; only the load before it is other work
    if max(r["load_before"][0] for r in rows) > doc["cores"]:
        lines += ["", f"The 1-minute load average exceeded the {doc['cores']} cores during the runs: the "
                      "workers shared the cores with other work, so wall-clock throughput and speed-up are "
                      "lower than on an idle machine, and the speed-up measured here is not the pool's own."]
    lines += ["", "Statuses: " + "; ".join(f"{r['workers']} worker(s): {r['statuses']}" for r in rows),
              "", f"Forms chosen ({rows[0]['workers']} worker run): " + ", ".join(f"{k} {v}" for k, v in rows[0]["models"].items()),
              "", "Summary writing (CSV, Parquet, JSON) after the batch: "
              + ", ".join(f"{r['summary_s']:.2f} s" for r in rows) + ".",
              "", "Peak memory per worker: getrusage maxrss of the process itself (1 worker runs in "
              "process, so this includes the parent's own records) or of the largest pool process.",
              f"{doc['python']}, {doc['date']}.", ""]
    if doc.get("note"):
        lines += [doc["note"], ""]
    return "\n".join(lines)


def main(argv: list[str] | None = None) -> None:
    parser = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    parser.add_argument("--render", metavar="JSON", help="only write the .md again from a saved .json")
    parser.add_argument("--combine", metavar="JSON", nargs="+",
                        help="only gather saved runs (.json) into results/batch.json and batch.md")
    parser.add_argument("--count", type=int, default=1000)
    parser.add_argument("--samples", type=int, default=10_000)
    parser.add_argument("--workers", type=int, nargs="+", default=[1, 2])
    parser.add_argument("--tag", default="", help="suffix for the result files (e.g. _small)")
    parser.add_argument("--note", default="", help="a line added to the .md (what was run and why)")
    args = parser.parse_args(argv)
    if args.combine:
        docs = [json.loads(Path(p).read_text()) for p in args.combine]
        results = HERE / "results"
        write_text_atomic(results / "batch.json", json.dumps({"runs": docs}, indent=1))
        parts = [f"# Batch benchmark: {len(docs)} runs", "",
                 "Each run below is one command; its own files are " + ", ".join(Path(p).name for p in args.combine)
                 + " (and .md)."]
        for d in docs:
            parts += ["", markdown(d).replace("# Batch benchmark", f"## {d['count']} captures", 1)]
        write_text_atomic(results / "batch.md", "\n".join(parts))
        return
    if args.render:
        saved = Path(args.render)
        write_text_atomic(saved.with_suffix(".md"), markdown(json.loads(saved.read_text())))
        return
    with tempfile.TemporaryDirectory(prefix="fitkit-bench-batch-") as tmp:
        folder = Path(tmp) / "captures"
        t0 = time.perf_counter()
        mix = write_captures(folder, args.count, args.samples)
        print(f"wrote {args.count} captures in {time.perf_counter() - t0:.1f} s", file=sys.stderr)
        runs: list[dict] = []
        for w in args.workers:
            r = run_configuration(folder, Path(tmp) / f"out_{w}", w)
            print(f"{w} worker(s): {r['batch_s']:.1f} s, {r['throughput_per_s']:.2f} captures/s, "
                  f"load {r['load_before'][0]:.2f} -> {r['load_after'][0]:.2f}", file=sys.stderr)
            runs.append(r)
            doc = write_results(args, mix, runs, argv)  # after each run, so a stopped benchmark keeps it
    print(markdown(doc))


def write_results(args, mix: dict, runs: list[dict], argv) -> dict:
    doc = {"count": args.count, "samples": args.samples, "mix": mix, "cores": os.cpu_count(),
           "command": "python benchmarks/bench_batch.py " + " ".join(argv if argv is not None else sys.argv[1:]),
           "runs": runs, "speedup": (runs[0]["batch_s"] / runs[-1]["batch_s"]
                                     if len(runs) > 1 and runs[0]["workers"] == 1 else None),
           "speedup_target": SPEEDUP_TARGET, "python": f"Python {platform.python_version()}",
           "date": datetime.now(timezone.utc).strftime("%Y-%m-%dT%H:%M:%SZ"), "note": args.note}
    results = HERE / "results"
    results.mkdir(exist_ok=True)
    write_text_atomic(results / f"batch{args.tag}.json", json.dumps(doc, indent=1))
    write_text_atomic(results / f"batch{args.tag}.md", markdown(doc))
    return doc


if __name__ == "__main__":
    main()
