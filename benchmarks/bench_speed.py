"""Speed and memory: import, fit and the whole `fitkit fit` command, against doing it by hand.

Run:  python benchmarks/bench_speed.py [--sizes 10000 1000000 10000000] [--repeats 3] [--quick]

For each size N, writes a CSV capture of N rows: time (s), the drive
("input", a 0/1 V square wave with four edges) and the response ("output",
an RC low-pass, tau = 1/10 of the half period, the exact continuous response
to edges half way between samples, sampled, plus white
noise at 40 dB SNR). Then, each in a fresh child process under /usr/bin/time
(wall time, CPU time and peak resident memory of that child):

* pandas.read_csv alone on the file;
* fitkit.io.load_capture (the importer) and fitkit.fit_capture (model auto,
  intervals auto), timed inside one child;
* the whole `fitkit fit FILE --json` command;
* a hand-written pandas + scipy.optimize.curve_fit script of the right single
  form (first-order) with good starting values, fitting the first rising edge;
* `fitkit --help` start-up (best of several).

Times are best of REPEATS (one run for N >= 5M). To show that fitkit's
binning of long records keeps the estimate efficient, the fit child also
reports tau's standard error next to the Cramer-Rao bound of the full-rate
record (Fisher information of the record's own three-parameter model,
tau, offset and gain, edge times known; see tau_bound).

With --many-edges: the many-edges study of issue 20 instead (square waves of
10 to 1,000 edges, joint fit against --average, with the Cramer-Rao bound of
the joint model; see benchmarks/_many_edges.py), results in
benchmarks/results/many_edges.json and many_edges.md.

Targets (issue 9): `fitkit fit` of 1M samples within 3x the hand script and
under 2 s; `fitkit --help` under 0.5 s; 10M samples within 2 GiB peak memory.
Results: benchmarks/results/speed.json and speed.md.
"""

from __future__ import annotations

import argparse
import json
import math
import os
import signal
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

try:
    from _common import clean, fisher_bounds, fmt, jacobian, load_average, machine, write_results
except ImportError:  # pragma: no cover - imported as benchmarks.bench_speed
    from benchmarks._common import clean, fisher_bounds, fmt, jacobian, load_average, machine, write_results

PY = sys.executable
FITKIT = str(Path(PY).with_name("fitkit"))
SNR_DB, EDGES, STEP = 40.0, 4, 1.0
DT = 1e-7  # s per sample
QUICK_SIZE = 2000

FIT_CHILD = r"""
import json, sys, time
t0 = time.perf_counter()
from fitkit.io import load_capture
from fitkit.fitting import fit_capture
t1 = time.perf_counter()
cap = load_capture(sys.argv[1])
t2 = time.perf_counter()
r = fit_capture(cap)
t3 = time.perf_counter()
tau = r.parameters.get("tau")
print(json.dumps({"module_import_s": t1 - t0, "load_s": t2 - t1, "fit_s": t3 - t2, "model": r.model,
                  "tau": tau and tau.value, "tau_stderr": tau and tau.stderr,
                  "bin_size": r.details.bin_size}))
"""

READ_CSV_CHILD = r"""
import sys, time
import pandas as pd
t = time.perf_counter()
df = pd.read_csv(sys.argv[1])
print(time.perf_counter() - t, len(df))
"""

#: What an engineer writes by hand: read, cut the first rising edge, curve_fit one form with good starts.
HAND_SCRIPT = r"""
import sys
import numpy as np
import pandas as pd
from scipy.optimize import curve_fit

df = pd.read_csv(sys.argv[1])
t, u, y = (df.iloc[:, i].to_numpy() for i in range(3))
k = int(np.argmax(u > 0.5))                 # first rising edge of the drive
end = k + int(np.argmax(u[k:] < 0.5))       # until the drive falls again
tt, yy = t[k:end] - t[k], y[k:end]
y0, y1 = yy[:10].mean(), yy[-len(yy) // 10:].mean()
tau0 = tt[int(np.argmax(yy > y0 + 0.632 * (y1 - y0)))]   # 63 % crossing as the starting tau

def rc(t, a, b, tau):
    return a + b * (1 - np.exp(-t / tau))

p, cov = curve_fit(rc, tt, yy, p0=(y0, y1 - y0, tau0))
print(p[2], np.sqrt(cov[2, 2]))
"""


def truth(n: int) -> dict:
    """The capture's layout: sample interval, half period and tau (s), noise rms (V)."""
    half = n // (EDGES)  # samples per half period: edges at half/2, 3 half/2, ...
    return {"dt": DT, "half_period_samples": half, "tau": half * DT / 10, "sigma": STEP / 10 ** (SNR_DB / 20)}


def make_capture(path: Path, n: int, seed: int = 9) -> dict:
    """Write the N-row CSV (time, input, output) with pyarrow; returns truth(n) and the file size."""
    import pyarrow as pa
    import pyarrow.csv as pacsv

    tr = truth(n)
    half = tr["half_period_samples"]
    k = np.arange(n)
    u = (((k + half // 2) // half) % 2 == 1).astype(float)  # first rising edge at half/2
    # the drive steps half way between two samples (edge times known to the
    # model as the input's first-order-hold ramp, whose centre is that instant);
    # the response is the exact continuous RC response, sampled
    from fitkit.forms.first_order import unit_step

    t = k * tr["dt"]
    y = np.zeros(n)
    for i, e in enumerate(half // 2 + j * half for j in range(EDGES)):
        y += (1.0 if i % 2 == 0 else -1.0) * STEP * unit_step(t - (e - 0.5) * tr["dt"], tau=tr["tau"])
    y += np.random.default_rng(seed).normal(0.0, tr["sigma"], n)
    table = pa.table({"time": np.round(k * tr["dt"], 12), "input": u, "output": np.round(y, 6)})
    pacsv.write_csv(table, str(path))
    tr["file_mb"] = path.stat().st_size / 1e6
    tr["edge_samples"] = [half // 2 + i * half for i in range(EDGES)]
    return tr


def _descendants(pid: int) -> list[int]:
    """Direct children of a process (Linux /proc)."""
    try:
        return [int(x) for x in open(f"/proc/{pid}/task/{pid}/children").read().split()]
    except OSError:
        return []


def run_child(cmd: list[str], timeout: float) -> dict:
    """Run ``cmd`` once under /usr/bin/time; wall and CPU seconds, peak RSS (MiB), stdout/stderr.

    /usr/bin/time reports the command's own getrusage(RUSAGE_CHILDREN):
    ru_maxrss (its peak resident set) and user + system CPU time. (Reading
    the rusage straight from os.wait4 in this process would not do: a child
    forked from a big Python process inherits its high-water mark.) A command
    still running after ``timeout`` seconds is killed; /usr/bin/time then still
    reports what it had used.
    """
    t = time.perf_counter()
    proc = subprocess.Popen(["/usr/bin/time", "-f", "@@usage %M %U %S", *cmd], stdout=subprocess.PIPE,
                            stderr=subprocess.PIPE, text=True)
    timed_out = False
    try:
        out, err = proc.communicate(timeout=timeout)
    except subprocess.TimeoutExpired:
        timed_out = True
        for child in _descendants(proc.pid):
            os.kill(child, signal.SIGKILL)
        out, err = proc.communicate()
    wall = time.perf_counter() - t
    usage = [ln for ln in err.splitlines() if ln.startswith("@@usage")]
    kib, user, system = (usage[-1].split()[1:] if usage else ("0", "nan", "nan"))
    return {"wall_s": wall, "cpu_s": float(user) + float(system), "peak_mib": int(kib) / 1024,
            "timed_out": timed_out, "returncode": proc.returncode if not timed_out else -9,
            "stdout": out, "stderr": "\n".join(ln for ln in err.splitlines() if not ln.startswith("@@usage"))}


def measured(cmd: list[str], repeats: int, timeout: float) -> dict:
    """Best wall and CPU time (s) and the largest peak RSS (MiB) of ``cmd`` over up to ``repeats`` runs.

    CPU time is the steadier figure when other jobs load the machine. A run
    slower than 20 s is not repeated; one slower than ``timeout`` is killed and
    reported with the time and memory it had used.
    """
    runs = []
    for _ in range(repeats):
        r = run_child(cmd, timeout)
        runs.append(r)
        if r["timed_out"]:
            return {"error": [f"killed after {r['wall_s']:.0f} s wall, {r['cpu_s']:.0f} s CPU, "
                              f"{r['peak_mib']:.0f} MiB"], "timed_out_after_s": r["wall_s"],
                    "cpu_s_at_kill": r["cpu_s"], "peak_mib_at_kill": r["peak_mib"]}
        if r["returncode"] != 0:
            return {"error": (r["stderr"].strip().splitlines() or ["?"])[-2:], "wall_s": r["wall_s"]}
        if r["wall_s"] > 20:
            break
    return {"wall_s": min(r["wall_s"] for r in runs), "walls_s": [r["wall_s"] for r in runs],
            "cpu_s": min(r["cpu_s"] for r in runs), "peak_mib": max(r["peak_mib"] for r in runs),
            "stdout": runs[-1]["stdout"].strip()[-2000:]}


def tau_bound(tr: dict, n: int) -> float:
    """Cramer-Rao sd of tau (s) for the full-rate N-sample record.

    The record's own model: y = offset + gain * sum_i sign_i unit_step(t - t_i; tau)
    over the four edges (alternately rising and falling, edge times known from
    the input), parameters tau, offset, gain; white noise. fitkit fits more
    nuisance parameters (a baseline per edge), so this bound is a floor it can
    approach but not beat. The information sum over N samples is evaluated on an
    80k-point grid and scaled by samples per grid point (Riemann sum; the
    response is smooth on both grids, tau spans >= 250 samples).
    """
    from fitkit.forms import get_form

    form = get_form("first-order")
    grid = np.linspace(0.0, (n - 1) * tr["dt"], 80001)
    edges = [(k - 0.5) * tr["dt"] for k in tr["edge_samples"]]

    def model(p):
        y = np.full(grid.size, p["offset"])
        for i, te in enumerate(edges):
            y += (1.0 if i % 2 == 0 else -1.0) * p["gain"] * form.unit_step(grid - te, tau=p["tau"])
        return y

    theta = {"tau": tr["tau"], "offset": 0.0, "gain": STEP}
    J = jacobian(model, theta, {"tau": 1e-6 * tr["tau"], "offset": 1e-6, "gain": 1e-6})
    samples_per_point = (grid[1] - grid[0]) / tr["dt"]
    return math.sqrt(fisher_bounds(J, tr["sigma"])[0][0] / samples_per_point)


def bench_size(n: int, repeats: int, workdir: Path, timeout: float) -> dict:
    path = workdir / f"capture_{n}.csv"
    t = time.perf_counter()
    tr = make_capture(path, n)
    hand = workdir / "hand_fit.py"
    hand.write_text(HAND_SCRIPT)
    reps = 1 if n >= 5_000_000 else repeats
    row = {"samples": n, "truth": tr, "write_s": time.perf_counter() - t, "load_average": load_average()}
    row["read_csv"] = measured([PY, "-c", READ_CSV_CHILD, str(path)], reps, timeout)
    row["hand_script"] = measured([PY, str(hand), str(path)], reps, timeout)
    row["fitkit_in_process"] = measured([PY, "-c", FIT_CHILD, str(path)], reps, timeout)
    if "timed_out_after_s" in row["fitkit_in_process"]:  # the command would time out the same way
        row["fitkit_fit_command"] = {"error": ["not run: the same fit in process timed out"]}
    else:
        row["fitkit_fit_command"] = measured([FITKIT, "fit", str(path), "--json"], reps, timeout)
    # the same without the input channel: ideal-step mode (fitkit bins long records there)
    row["fitkit_fit_output_only"] = measured([FITKIT, "fit", str(path), "--channel", "output", "--json"],
                                             reps, timeout)
    inner = row["fitkit_in_process"]
    if "stdout" in inner:
        inner.update(json.loads(inner["stdout"].splitlines()[-1]))
        inner["tau_crlb_sd"] = tau_bound(tr, n)
        if inner.get("tau_stderr"):
            inner["efficiency_implied"] = (inner["tau_crlb_sd"] / inner["tau_stderr"]) ** 2
            inner["tau_error_in_crlb_sd"] = (inner["tau"] - tr["tau"]) / inner["tau_crlb_sd"]
    cmd, hs = row["fitkit_fit_command"], row["hand_script"]
    if "peak_mib" in cmd and "peak_mib" in hs:
        row["command_over_hand"] = cmd["wall_s"] / hs["wall_s"]
    path.unlink()
    return row


def help_startup(repeats: int) -> dict:
    return measured([FITKIT, "--help"], repeats, 60)


def run(sizes: list[int], repeats: int, timeout: float = 900.0) -> dict:
    started = time.time()
    info = machine()
    with tempfile.TemporaryDirectory() as tmp:
        rows = [bench_size(n, repeats, Path(tmp), timeout) for n in sizes]
    help_ = help_startup(max(5, repeats) if repeats > 1 else 2)
    help_.pop("stdout", None)
    by_n = {r["samples"]: r for r in rows}
    targets = {"help_under_0.5_s": help_.get("wall_s", math.inf) < 0.5}
    if 1_000_000 in by_n:
        r = by_n[1_000_000]
        w = r["fitkit_fit_command"].get("wall_s", math.inf)
        targets["fit_1M_under_2_s"] = w < 2.0
        targets["fit_1M_within_3x_hand"] = r.get("command_over_hand", math.inf) <= 3.0
    if 10_000_000 in by_n:
        big = by_n[10_000_000]["fitkit_fit_command"]
        targets["fit_10M_under_2_GiB"] = (big["peak_mib"] < 2048) if "peak_mib" in big else "not finished"
    info["load_average_at_end"] = load_average()
    return clean({"study": "speed", "machine": info, "settings": {"sizes": sizes, "repeats": repeats,
                  "snr_db": SNR_DB, "edges": EDGES, "sample_interval_s": DT},
                  "wall_seconds": time.time() - started, "sizes": rows, "help": help_, "targets": targets})


def _cell(d: dict) -> str:
    """'wall (cpu) / MiB' of one measurement, or what went wrong."""
    if "error" in d:
        return "; ".join(d["error"])
    return f"{fmt(d.get('wall_s'))} ({fmt(d.get('cpu_s'))}) / {fmt(d.get('peak_mib'), '.0f')}"


def markdown(data: dict) -> str:
    m = data["machine"]
    lines = ["# Speed and memory benchmark", "",
             f"{m['date_utc']}; {m['cpu_model']}, {m['nproc']} cores, {m['memory_gib']} GiB; Python {m['python']}, "
             f"numpy {m['numpy']}, scipy {m['scipy']}, BLAS {m['blas']}. Load average (1/5/15 min) "
             f"{m['load_average_1_5_15min']} at start, {m['load_average_at_end']} at end "
             "(other engineers share the two cores, so times are best of several runs).", "",
             "Wall time of the whole child process (interpreter start-up and imports included) and its peak "
             "resident memory (/usr/bin/time). fitkit: model auto (form selection) and 95 % intervals, all four "
             "edges jointly; hand script: pandas + curve_fit of first-order on the first edge, good start. "
             "Cells: wall s (CPU s) / peak MiB; 'fitkit load s' and 'fitkit fit s' are wall times inside one "
             "child.", "",
             "| samples | CSV MB | load avg | read_csv | fitkit load s | fitkit fit s | `fitkit fit` "
             "| `fitkit fit`, output only | hand script | command / hand (wall) |",
             "|---|---|---|---|---|---|---|---|---|---|"]
    for r in data["sizes"]:
        rc, fi, cmd, hs = r["read_csv"], r["fitkit_in_process"], r["fitkit_fit_command"], r["hand_script"]
        oo = r["fitkit_fit_output_only"]
        lines.append(f"| {r['samples']:,} | {r['truth']['file_mb']:.1f} | {r['load_average'].split()[0]} "
                     f"| {_cell(rc)} | {fmt(fi.get('load_s'))} | {fmt(fi.get('fit_s'))} | {_cell(cmd)} "
                     f"| {_cell(oo)} | {_cell(hs)} | {fmt(r.get('command_over_hand'), '.2f')} |")
    lines += ["", "Efficiency of the binned fit (white noise, 40 dB): tau's reported standard error against "
              "the Cramer-Rao bound of the full-rate record.", "",
              "| samples | model chosen | bin size | tau true | tau fitted | stderr | CRLB sd | (CRLB/stderr)^2 "
              "| error / CRLB sd |", "|---|---|---|---|---|---|---|---|---|"]
    for r in data["sizes"]:
        fi = r["fitkit_in_process"]
        lines.append(f"| {r['samples']:,} | {fi.get('model', '-')} | {fi.get('bin_size', '-')} "
                     f"| {fmt(r['truth']['tau'], '.6g')} | {fmt(fi.get('tau'), '.6g')} | {fmt(fi.get('tau_stderr'))} "
                     f"| {fmt(fi.get('tau_crlb_sd'))} | {fmt(fi.get('efficiency_implied'), '.2f')} "
                     f"| {fmt(fi.get('tau_error_in_crlb_sd'), '.2f')} |")
    h = data["help"]
    lines += ["", f"`fitkit --help`: best {fmt(h.get('wall_s'))} s of {len(h.get('walls_s', []))} runs, "
              f"peak {fmt(h.get('peak_mib'), '.0f')} MiB.", "", "Targets:"]
    lines += [f"- {k}: {v if isinstance(v, str) else ('met' if v else 'MISSED')}" for k, v in data["targets"].items()]
    errors = [(r["samples"], k, r[k]["error"]) for r in data["sizes"] for k in
              ("read_csv", "fitkit_in_process", "fitkit_fit_command", "fitkit_fit_output_only", "hand_script")
              if "error" in r[k]]
    lines += [f"- error: {n} samples, {k}: {' / '.join(e)}" for n, k, e in errors]
    return "\n".join(lines) + "\n"


if __name__ == "__main__":
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--sizes", type=int, nargs="+", default=[10_000, 1_000_000, 10_000_000])
    ap.add_argument("--repeats", type=int, default=3)
    ap.add_argument("--quick", action="store_true", help="smoke run: one 10k capture, one repeat")
    ap.add_argument("--timeout", type=float, default=900.0, help="seconds before a child run is killed")
    ap.add_argument("--results-dir", default=None, help="where to write (default benchmarks/results)")
    ap.add_argument("--stem", default=None)
    ap.add_argument("--many-edges", action="store_true",
                    help="the many-edges study instead (issue 20; see benchmarks/_many_edges.py)")
    ap.add_argument("--edges", type=int, nargs="+", default=[10, 40, 200, 1000])
    ap.add_argument("--samples", type=int, nargs="+", default=[100_000, 1_000_000])
    ap.add_argument("--responses", nargs="+", default=["rc", "underdamped"])
    ap.add_argument("--modes", nargs="+", default=["output", "input"])
    ap.add_argument("--coverage-trials", type=int, default=0,
                    help="with --many-edges: instead, the Monte Carlo of coverage and efficiency "
                         "(this many captures of 40 edges, 20,000 samples, per response)")
    ap.add_argument("--auto-form", action="store_true",
                    help="with --coverage-trials: the form chosen automatically (trials choosing another are counted)")
    args = ap.parse_args()
    if args.many_edges and args.coverage_trials:
        import _many_edges

        started = time.time()
        info = machine()
        studies = [_many_edges.coverage(args.coverage_trials, 40, 20_000, response, form_given=not args.auto_form)
                   for response in args.responses]
        data = clean({"study": "many edges: coverage", "machine": info, "wall_seconds": time.time() - started,
                      "settings": vars(args), "studies": studies})
        lines = ["# Many edges: coverage and efficiency of the joint fit", "",
                 f"{info['date_utc']}; {info['cpu_model']}, {info['nproc']} cores.", "",
                 "| response | form | trials | failed | other form chosen | quantity | coverage | efficiency "
                 "| bias / bound sd |",
                 "|---|---|---|---|---|---|---|---|---|"]
        for st in studies:
            for key in ("tau", "f0", "Q"):
                if key in st:
                    q = st[key]
                    lines.append(f"| {st['response']} | {'given' if st['form_given'] else 'chosen'} | "
                                 f"{st['trials']} | {st['failed']} | {st['other_form']} | {key} | "
                                 f"{100 * q['coverage']:.1f} % | {q['efficiency']:.2f} | {q['bias_in_bound_sd']:+.2f} |")
        j, m = write_results(args.stem or "many_edges_coverage", data, "\n".join(lines) + "\n", args.results_dir)
        print(f"wrote {j} and {m} in {data['wall_seconds']:.0f} s")
        sys.exit(0)
    if args.many_edges:
        import _many_edges

        started = time.time()
        info = machine()
        rows = _many_edges.study(args.edges, args.samples, args.responses, args.modes, measured, args.timeout)
        info["load_average_at_end"] = load_average()
        data = clean({"study": "many edges", "machine": info, "wall_seconds": time.time() - started,
                      "settings": vars(args), "rows": rows, "targets": _many_edges.targets(rows)})
        head = [f"# Many edges: joint fit against the coherent average", "",
                f"{info['date_utc']}; {info['cpu_model']}, {info['nproc']} cores; load average "
                f"{info['load_average_1_5_15min']} at start, {info['load_average_at_end']} at end.", ""]
        j, m = write_results(args.stem or "many_edges", data, "\n".join(head + _many_edges.markdown(rows)) + "\n",
                             args.results_dir)
        print(f"wrote {j} and {m} in {data['wall_seconds']:.0f} s")
        sys.exit(0)
    sizes, repeats = ([QUICK_SIZE], 1) if args.quick else (args.sizes, args.repeats)
    data = run(sizes, repeats, args.timeout)
    stem = args.stem or ("speed_quick" if args.quick else "speed")
    j, m = write_results(stem, data, markdown(data), args.results_dir)
    print(f"wrote {j} and {m} in {data['wall_seconds']:.0f} s")
