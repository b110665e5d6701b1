"""Import speed and memory: fitkit.io.load_capture vs pandas.read_csv on one file.

Run:  python benchmarks/bench_import.py [--rows 1000000] [--repeats 9]

Writes a CSV of ROWS rows and 3 columns (time, two channels) to a temporary
directory, then times fitkit's import and a plain ``pandas.read_csv`` of the
same file (best of REPEATS runs each, interleaved; pandas >= 3 reads a local
path on several threads, and so does fitkit), and measures the peak memory
each needs in a fresh child process (rise of the resident-set high-water mark
over the resident set before the import; Linux /proc). Targets (issue 2):
fitkit time <= 1.5 x pandas time; fitkit peak memory <= 3 x the size of the
arrays (ROWS x 3 x 8 bytes). Results go to benchmarks/results/import.json
and .md; the exit status is 0 when both targets are met.
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
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent
TIME_RATIO_LIMIT = 1.5
MEMORY_RATIO_LIMIT = 3.0

_CHILD = r"""
import gc, resource, sys
import numpy as np, pandas as pd
import fitkit.io

def status(key):
    for line in open("/proc/self/status"):
        if line.startswith(key + ":"):
            return int(line.split()[1]) * 1024
    raise KeyError(key)

gc.collect()
try:  # Linux: reset the peak-RSS mark, so only the import below counts
    with open("/proc/self/clear_refs", "w") as fh:
        fh.write("5")
    before, peak = status("VmRSS"), lambda: status("VmHWM")
except OSError:  # elsewhere: the process high-water mark (includes imports)
    before = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss * 1024
    peak = lambda: resource.getrusage(resource.RUSAGE_SELF).ru_maxrss * 1024
path, which = sys.argv[1], sys.argv[2]
if which == "fitkit":
    cap = fitkit.io.load_capture(path)
    n = cap.n_points
else:
    df = pd.read_csv(path)
    n = len(df)
print(n, peak() - before)
"""


def write_capture(path: Path, rows: int, seed: int = 7) -> None:
    """A 3-column capture: time in s and two noisy first-order step responses in V."""
    rng = np.random.default_rng(seed)
    t = (np.arange(rows) - rows // 10) * 1e-8
    step = np.where(t > 0, 1.0 - np.exp(-np.clip(t, 0, None) / 1e-3), 0.0)
    out = step + rng.normal(0, 0.01, rows)
    drive = (t > 0).astype(float) + rng.normal(0, 0.002, rows)
    block = np.column_stack([t, drive, out])
    with open(path, "w", newline="\n") as fh:
        fh.write("Time (s),Vin (V),Vout (V)\n")
        np.savetxt(fh, block, fmt=["%.8e", "%.6f", "%.6f"], delimiter=",")


def best_time(fn, repeats: int) -> float:
    best = float("inf")
    for _ in range(repeats):
        t0 = time.perf_counter()
        fn()
        best = min(best, time.perf_counter() - t0)
    return best


def peak_memory(path: Path, which: str) -> tuple[int, int]:
    out = subprocess.run([sys.executable, "-c", _CHILD, str(path), which], check=True,
                         capture_output=True, text=True).stdout.split()
    return int(out[0]), int(out[1])


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--rows", type=int, default=1_000_000)
    parser.add_argument("--repeats", type=int, default=9)
    parser.add_argument("--out", type=Path, default=HERE / "results")
    args = parser.parse_args(argv)

    import pandas as pd
    from fitkit.io import load_capture

    with tempfile.TemporaryDirectory() as tmp:
        path = Path(tmp) / "bench_capture.csv"
        write_capture(path, args.rows)
        size_bytes = path.stat().st_size
        load_capture(path), pd.read_csv(path)  # warm the page cache and imports
        t_fitkit = t_pandas = float("inf")
        for _ in range(args.repeats):  # interleaved, so drifts in machine load hit both
            t_pandas = min(t_pandas, best_time(lambda: pd.read_csv(path), 1))
            t_fitkit = min(t_fitkit, best_time(lambda: load_capture(path), 1))
        n_fitkit, mem_fitkit = peak_memory(path, "fitkit")
        n_pandas, mem_pandas = peak_memory(path, "pandas")
    arrays_bytes = args.rows * 3 * 8
    result = {
        "rows": args.rows, "columns": 3, "file_bytes": size_bytes, "repeats": args.repeats,
        "fitkit_seconds": t_fitkit, "pandas_read_csv_seconds": t_pandas,
        "time_ratio": t_fitkit / t_pandas, "time_ratio_limit": TIME_RATIO_LIMIT,
        "arrays_bytes": arrays_bytes,
        "fitkit_peak_memory_bytes": mem_fitkit, "pandas_peak_memory_bytes": mem_pandas,
        "memory_ratio": mem_fitkit / arrays_bytes, "memory_ratio_limit": MEMORY_RATIO_LIMIT,
        "rows_read": {"fitkit": n_fitkit, "pandas": n_pandas},
        "python": platform.python_version(), "pandas": pd.__version__, "numpy": np.__version__,
        "machine": platform.machine(), "cpus": os.cpu_count(),
        "load_average_1min": os.getloadavg()[0] if hasattr(os, "getloadavg") else None,
        "timestamp_utc": time.strftime("%Y-%m-%dT%H:%M:%SZ", time.gmtime()),
    }
    result["passed"] = bool(result["time_ratio"] <= TIME_RATIO_LIMIT
                            and result["memory_ratio"] <= MEMORY_RATIO_LIMIT
                            and n_fitkit == n_pandas == args.rows)
    load = result["load_average_1min"]
    load_text = "unknown" if load is None else f"{load:.1f}"
    args.out.mkdir(parents=True, exist_ok=True)
    (args.out / "import.json").write_text(json.dumps(result, indent=2) + "\n")
    md = [
        "# Import benchmark", "",
        f"File: {args.rows:,} rows x 3 columns, {size_bytes / 1e6:.1f} MB of CSV "
        f"(written by benchmarks/bench_import.py). Best of {args.repeats} runs.", "",
        "| | fitkit.io.load_capture | pandas.read_csv | ratio | limit |",
        "|---|---|---|---|---|",
        f"| time | {t_fitkit:.3f} s | {t_pandas:.3f} s | {result['time_ratio']:.2f} | {TIME_RATIO_LIMIT} |",
        f"| peak memory | {mem_fitkit / 1e6:.1f} MB | {mem_pandas / 1e6:.1f} MB | "
        f"{result['memory_ratio']:.2f} x arrays ({arrays_bytes / 1e6:.0f} MB) | {MEMORY_RATIO_LIMIT} |",
        "", f"Result: {'PASS' if result['passed'] else 'FAIL'}. Python {result['python']}, "
        f"pandas {result['pandas']}, numpy {result['numpy']}, {result['cpus']} CPUs, "
        f"1-minute load average {load_text}, {result['timestamp_utc']}.",
        "Timings on a shared machine move with its load; rerun when it is quiet.", "",
    ]
    (args.out / "import.md").write_text("\n".join(md))
    print("\n".join(md))
    return 0 if result["passed"] else 1


if __name__ == "__main__":
    sys.exit(main())
