"""Study: fitkit on parts of the real captures, as other scope screens would frame them.

A scope record starts and stops wherever the trigger and time base put it, and
a slower time base keeps every second or third sample. This study cuts each
real capture of ../shared/reference/real-captures into such records (its rows
from 15, 35, 45, 50, 60 % on; up to 40, 50, 55, 65, 70, 85 %; the middle half
and the middle 60 %; every second row; every third from the second) and runs
`fitkit fit --json` on each, with the case's options. Each run is:

- right: exit 0, every checked quantity inside its range (tests/support/real_corpus.py);
- wide: exit 0, a quantity outside its range but its 95 % interval reaches the range
  (or it is reported not determined): honest about what this part of the record holds;
- refused: a non-zero exit with its one-line message;
- wrong: exit 0, a quantity outside its range with an interval that misses the range,
  or missing (the confident wrong answer);
- internal: an internal error.

A first-order answer's tau stands for the slow time constant tau1 (the fast pole
is then hidden in the part of the record kept). Left out: the capture the corpus
only accepts a refusal for, the one whose settings block sits in its first rows
(a cut keeps no settings), and Dati0511_1, whose ring-down frequency rises as it
dies away (a damped sine fitted to rows 125-375 gives 15.86 kHz, to rows 8-125
14.59 kHz: an amplitude-dependent inductor), so the whole record's range does
not hold for its parts. Writes results/real_crops.{json,md}.

    python benchmarks/study_real_crops.py
"""

from __future__ import annotations

import json
import re
import subprocess
import sys
import tempfile
from collections import Counter
from pathlib import Path

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE.parent / "tests"))

from _common import corpus_study_output  # noqa: E402
from support.real_corpus import CASES, quantity  # noqa: E402

LEFT_OUT = {"Tom2718--Phy-Lab-2/TEK0001.CSV": "its settings block sits in its first rows",
            "JustSimone--Impulsive_RLC_Experiment/Dati0511_1.txt": "its ringing frequency depends on amplitude"}
DATA_ROW = re.compile(r"^\s*[-+]?(\d|\.\d)")


def crops(rows: list[str]) -> list[tuple[str, list[str]]]:
    """(name, rows) of each cut of a record's data rows."""
    n = len(rows)
    out = [(f"from {p} %", rows[p * n // 100:]) for p in (15, 35, 45, 50, 60)]
    out += [(f"to {p} %", rows[:p * n // 100]) for p in (40, 50, 55, 65, 70, 85)]
    out += [("middle 50 %", rows[n // 4:3 * n // 4]), ("middle 60 %", rows[n // 5:4 * n // 5]),
            ("every 2nd row", rows[::2]), ("every 3rd row", rows[1::3])]
    return out


def entry(data: dict, name: str) -> dict:
    return (data.get("parameters") or {}).get(name) or (data.get("derived") or {}).get(name) or {}


def judge(case, status: int, stdout: str, stderr: str) -> tuple[str, str]:
    """(verdict, what was read) of one run (see the module docstring)."""
    message = stderr.strip().splitlines()[-1] if stderr.strip() else ""
    if status == 70 or "Traceback" in stderr:
        return "internal", message
    if status != 0:
        return "refused", message
    data = json.loads(stdout)
    verdict, read = "right", [data.get("model", "")]
    for exp in case.expected:
        names = [exp.name] + ([exp.alias] if exp.alias else []) + (["tau"] if exp.name == "tau1" else [])
        name = next((n for n in names if quantity(data, n)[0] is not None), None)
        if name is None:
            if exp.name not in case.may_be_undetermined and not (exp.name == "tau2" and quantity(data, "tau")[0]):
                verdict = "wrong"
                read.append(f"{exp.name} missing")
            continue
        value, determined = quantity(data, name)
        ci = entry(data, name).get("ci95")
        read.append(f"{name} {value:.4g} {ci and [float(f'{c:.4g}') for c in ci]}")
        if exp.low <= value <= exp.high:
            continue
        reaches = not determined or (ci is not None and ci[0] <= exp.high and ci[1] >= exp.low)
        if reaches:
            verdict = "wide" if verdict == "right" else verdict
        else:
            verdict = "wrong"
    return verdict, ", ".join(read)


def main(argv: list[str] | None = None) -> int:
    out = corpus_study_output(__doc__.splitlines()[0], argv, CASES[0].path.parent)
    if out is None:
        return 1
    rows = []
    for case in CASES:
        if case.refusal_only or case.file in LEFT_OUT:
            continue
        lines = case.path.read_bytes().decode("latin-1").splitlines(keepends=True)
        head = next((i for i, line in enumerate(lines) if DATA_ROW.match(line)), len(lines))
        for name, part in crops(lines[head:]):
            with tempfile.TemporaryDirectory() as tmp:
                path = Path(tmp) / Path(case.file).name
                path.write_bytes("".join(lines[:head] + part).encode("latin-1"))
                proc = subprocess.run([sys.executable, "-m", "fitkit", "fit", str(path), "--json", *case.options],
                                      capture_output=True, text=True, timeout=600)
                verdict, read = judge(case, proc.returncode, proc.stdout, proc.stderr.replace(str(path), "FILE"))
            rows.append({"file": case.file, "part": name, "status": proc.returncode, "verdict": verdict,
                         "read": read})
            print(f"{verdict:8s} {case.file} ({name}): {read[:160]}", flush=True)
    counts = Counter(r["verdict"] for r in rows)
    out.mkdir(parents=True, exist_ok=True)
    (out / "real_crops.json").write_text(json.dumps({"counts": counts, "left_out": LEFT_OUT, "rows": rows},
                                                         indent=1))
    lines = ["| file | part | exit | verdict | read |", "|---|---|---|---|---|"]
    lines += [f"| {r['file']} | {r['part']} | {r['status']} | {r['verdict']} | {r['read'][:140]} |" for r in rows]
    lines += ["", ", ".join(f"{v} {counts.get(v, 0)}" for v in ("right", "wide", "refused", "wrong", "internal"))]
    (out / "real_crops.md").write_text("\n".join(lines) + "\n")
    print(lines[-1])
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
