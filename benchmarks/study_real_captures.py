"""Study: fitkit on the real captures of ../shared/reference/real-captures, with no options.

For each file: the exit status, the form, the checked quantities against the
ranges of tests/support/real_corpus.py (from that folder's SOURCE.md), and the verdict
(right, refused naming a fix, or wrong). Writes results/real_captures.{json,md}.

    python benchmarks/study_real_captures.py
"""

from __future__ import annotations

import json
import sys
import time
from pathlib import Path

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE.parent / "tests"))

from _common import corpus_study_output  # noqa: E402
from support.real_corpus import CASES, judge, run_fitkit  # noqa: E402


def _fmt(x: float | None) -> str:
    return "-" if x is None else f"{x:.4g}"


def main(argv: list[str] | None = None) -> int:
    folder = corpus_study_output(__doc__.splitlines()[0], argv, CASES[0].path.parent)
    if folder is None:
        return 1
    rows = []
    for case in CASES:
        start = time.perf_counter()
        status, data, stderr = run_fitkit(case.path, case.options)
        seconds = time.perf_counter() - start
        out = judge(case, status, data, stderr.replace(str(case.path), case.file))
        rows.append({"file": case.file, "options": " ".join(case.options), "circuit": case.circuit,
                     "status": status, "form": out.form,
                     "answer": out.answer, "expected": {e.name: [e.low, e.high, e.source] for e in case.expected},
                     "verdict": out.verdict, "why": out.why, "message": out.message, "seconds": round(seconds, 2)})
        print(f"{out.verdict:8s} {case.file}: {out.why}", flush=True)
    counts = {v: sum(r["verdict"] == v for r in rows) for v in ("right", "refused", "wrong")}
    folder.mkdir(parents=True, exist_ok=True)
    (folder / "real_captures.json").write_text(json.dumps({"counts": counts, "rows": rows}, indent=1))
    lines = ["| file | options | exit | form | answer | expected | verdict |", "|---|---|---|---|---|---|---|"]
    for r in rows:
        answer = ", ".join(f"{k} {_fmt(v)}" for k, v in r["answer"].items()) or r["message"][:90]
        expected = ", ".join(f"{k} {_fmt(lo)}-{_fmt(hi)}" for k, (lo, hi, _) in r["expected"].items()) \
            or "refusal"
        lines.append(f"| {r['file']} | {r['options'] or 'none'} | {r['status']} | {r['form'] or '-'} | {answer} | "
                     f"{expected} | {r['verdict']} |")
    lines.append("")
    lines.append(f"right {counts['right']}, refused naming a fix {counts['refused']}, wrong {counts['wrong']}")
    (folder / "real_captures.md").write_text("\n".join(lines) + "\n")
    print(lines[-1])
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
