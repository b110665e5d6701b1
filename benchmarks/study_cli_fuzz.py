"""CLI fuzz study: random argument combinations over the demo captures.

Run:  python benchmarks/study_cli_fuzz.py [--cases 120] [--seed 1]

Each case draws a command (inspect, fit, check, batch), one or two inputs
(a demo capture, a folder, a missing file, a design file given as a capture,
a capture given twice) and 0 to 4 options, each with a value drawn from a pool
of good and bad values (numbers out of range, wrong units, unknown names,
text where a number belongs). The case runs in this process through the same
entry point as the `fitkit` command (fitkit.cli.errors_to_exit), with a
60-second alarm, and is scored by its exit status and its stderr:

* internal error: exit status 70 (a bug: must be 0 cases);
* traceback, Python warning or LAPACK message on stderr (must be 0 cases;
  the file descriptor is captured, so text printed by compiled code counts);
* more than 3 lines on stderr for a failed case (one-line errors promised);
* otherwise the documented statuses of the README (0, 1, 2, 3, 4, 5, 6, 73).

Results go to benchmarks/results/cli_fuzz.json and cli_fuzz.md; the failing
argument lists, if any, are in the JSON for reproduction.
"""

from __future__ import annotations

import argparse
import contextlib
import io
import json
import os
import random
import signal
import sys
import tempfile
import time
from collections import Counter
from pathlib import Path

HERE = Path(__file__).resolve().parent
ROOT = HERE.parent
sys.path.insert(0, str(HERE))
from _common import load_average, machine, write_results  # noqa: E402

DEMO = ROOT / "demo_captures"
CAPTURES = sorted(str(p) for p in DEMO.glob("*.csv")) + [str(DEMO / "wrong_part_board_sallen_key.txt")]
DESIGNS = sorted(str(p) for p in (DEMO / "designs").glob("*.toml"))

VALUES = {
    "--sample-interval": ["1u", "4e-8", "0", "-1", "1e-300", "1e300", "abc", "1k", "nan", "inf", "2 ms"],
    "--time-origin": ["0", "-10u", "1e300", "x", "nan"],
    "--time-column": ["none", "1", "2", "Time", "nope", "0", "99"],
    "--time-unit": ["s", "ms", "us", "ns", "parsec", "V", ""],
    "--value-unit": ["V", "mV", "counts", "bananas", "s", ""],
    "--vertical-scale": ["1m", "0", "-1", "1e300", "x"],
    "--vertical-offset": ["0", "1", "x", "1e300"],
    "--delimiter": ["comma", "semicolon", "tab", "space", "pipe"],
    "--decimal": ["point", "comma", "dot"],
    "--skip-rows": ["0", "1", "5", "-3", "1000000", "x"],
    "--header-rows": ["0", "1", "2", "3", "-1"],
    "--encoding": ["utf-8", "latin-1", "klingon", "utf-16", "ascii"],
    "--channel": ["1", "2", "Output", "nope", "0"],
    "--input": ["1", "Input", "nope", ""],
    "--output": ["2", "Output", "nope", "1"],
    "--edge-time": ["1m", "abc", "0", "-1", "1e300"],
    "--form": ["auto", "first-order", "underdamped", "two-real-pole", "nonsense", ""],
    "--intervals": ["auto", "covariance", "profile", "bogus"],
    "--topology": ["rc-lowpass", "rc-ladder-2", "nonsense"],
    "--known": ["R1=10k", "R1=10k,R1=20k", "R1=x", "R9=1k", "=5", "R1"],
    "--trials": ["10", "200", "0", "100000000", "x"],
    "--seed": ["0", "-5", "7", "99999999999", "x"],
    "--design": DESIGNS + ["missing.toml", str(DEMO / "good_board.csv")],
}
FLAGS = ["--average", "--json", "--quiet"]
PER_COMMAND = {
    "inspect": ["--sample-interval", "--time-origin", "--time-column", "--time-unit", "--value-unit",
                "--vertical-scale", "--delimiter", "--decimal", "--skip-rows", "--header-rows", "--encoding",
                "--channel", "--input", "--output", "--edge-time"],
    "fit": ["--sample-interval", "--time-column", "--time-unit", "--value-unit", "--vertical-scale",
            "--skip-rows", "--encoding", "--channel", "--input", "--output", "--edge-time", "--form",
            "--intervals", "--topology", "--known"],
    "check": ["--design", "--sample-interval", "--time-unit", "--value-unit", "--encoding", "--input",
              "--output", "--edge-time", "--trials", "--seed"],
    "batch": ["--form", "--design", "--sample-interval", "--value-unit", "--encoding", "--skip-rows"],
}
DOCUMENTED = {0, 1, 2, 3, 4, 5, 6, 73}


class CaseTimeout(BaseException):
    """Raised by the alarm; a BaseException so the command's error handling lets it through."""


def draw_case(rng: random.Random, scratch: Path) -> list[str]:
    command = rng.choices(["inspect", "fit", "check", "batch"], weights=[3, 4, 3, 1])[0]
    pick = rng.random()
    if pick < 0.75:
        files = [rng.choice(CAPTURES)]
    elif pick < 0.82:
        files = [str(DEMO)]
    elif pick < 0.88:
        files = [str(scratch / "missing.csv")]
    elif pick < 0.94:
        files = [rng.choice(DESIGNS)]
    else:
        same = rng.choice(CAPTURES)
        files = [same, same]
    argv = [command, *files]
    if command == "check" and rng.random() < 0.85:
        argv += ["--design", rng.choice(DESIGNS)]
    if command == "batch":
        argv += ["--out", str(scratch / f"out{rng.randrange(10**9)}"), "--workers", "1", "--no-plots"]
    options = PER_COMMAND[command]
    for option in rng.sample(options, k=min(len(options), rng.randint(0, 4))):
        argv += [option, rng.choice(VALUES[option])]
    if command != "batch" and rng.random() < 0.3:
        argv.append(rng.choice(FLAGS))
    return argv


def run_case(argv: list[str]) -> tuple[int, str, float]:
    from fitkit.cli import cli
    from fitkit.cli.errors_to_exit import run_with_error_handling

    out, err = io.StringIO(), io.StringIO()

    def alarm(signum, frame):
        raise CaseTimeout

    previous = signal.signal(signal.SIGALRM, alarm)
    signal.alarm(60)
    started = time.perf_counter()
    # the file descriptors too: compiled numerical code (LAPACK's error
    # handler) prints to them directly, past Python's streams
    saved = {fd: os.dup(fd) for fd in (1, 2)}
    with tempfile.TemporaryFile() as raw:
        for fd in saved:
            os.dup2(raw.fileno(), fd)
        try:
            with contextlib.redirect_stdout(out), contextlib.redirect_stderr(err):
                status = run_with_error_handling(cli, argv)
        except CaseTimeout:
            status = -1
        finally:
            signal.alarm(0)
            signal.signal(signal.SIGALRM, previous)
            for fd, copy in saved.items():
                os.dup2(copy, fd)
                os.close(copy)
        raw.seek(0)
        direct = raw.read().decode(errors="replace")
    return status, err.getvalue() + direct, time.perf_counter() - started


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--cases", type=int, default=120)
    parser.add_argument("--seed", type=int, default=1)
    parser.add_argument("--out", default=None, help="results folder (default benchmarks/results)")
    args = parser.parse_args()
    rng = random.Random(args.seed)
    load_before = load_average()
    statuses: Counter = Counter()
    problems = {"internal": [], "traceback_or_warning": [], "long_error": [], "undocumented_status": [],
                "timeout": []}
    started = time.perf_counter()
    with tempfile.TemporaryDirectory(prefix="fitkit_fuzz_") as tmp:
        scratch = Path(tmp)
        for _ in range(args.cases):
            argv = draw_case(rng, scratch)
            status, err, seconds = run_case(argv)
            statuses[status] += 1
            lines = [ln for ln in err.splitlines() if ln.strip() and not ln.startswith("[")]
            record = {"argv": argv, "status": status, "stderr": err[-400:], "seconds": round(seconds, 2)}
            if status == 70:
                problems["internal"].append(record)
            if "Traceback" in err or "Warning:" in err or ".py:" in err or "** On entry" in err:
                problems["traceback_or_warning"].append(record)
            if status not in (0, -1) and status != 2 and len(lines) > 3:
                problems["long_error"].append(record)
            if status == -1:
                problems["timeout"].append(record)
            elif status not in DOCUMENTED:
                problems["undocumented_status"].append(record)
    elapsed = time.perf_counter() - started
    data = {"machine": machine(), "load_before": load_before, "load_after": load_average(),
            "cases": args.cases, "seed": args.seed, "seconds": round(elapsed, 1),
            "statuses": {str(k): v for k, v in sorted(statuses.items())},
            "counts": {k: len(v) for k, v in problems.items()}, "problems": problems}
    md = ["| cases | internal errors (70) | tracebacks or warnings | errors over 3 lines | "
          "undocumented statuses | timeouts (60 s) | exit statuses seen | seconds |",
          "| --- | --- | --- | --- | --- | --- | --- | --- |",
          f"| {args.cases} | {len(problems['internal'])} | {len(problems['traceback_or_warning'])} | "
          f"{len(problems['long_error'])} | {len(problems['undocumented_status'])} | {len(problems['timeout'])} | "
          + ", ".join(f"{k}: {v}" for k, v in sorted(statuses.items())) + f" | {elapsed:.0f} |", ""]
    # paths in the records relative to the checkout: no machine path in the results
    data = json.loads(json.dumps(data).replace(str(ROOT) + os.sep, ""))
    jpath, mpath = write_results("cli_fuzz", data, "\n".join(md), args.out)
    print("\n".join(md))
    print(f"written {jpath} and {mpath}")
    for kind, records in problems.items():
        for rec in records[:5]:
            print(f"{kind}: fitkit {' '.join(rec['argv'])} -> {rec['status']}: {rec['stderr'][-200:]!r}")


if __name__ == "__main__":
    main()
