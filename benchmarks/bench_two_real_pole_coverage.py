"""Coverage of the two-real-pole 95 % intervals when the two time constants are equal or close.

For tau2/tau1 in (1.0, 0.9, 0.5) (tau1 = 100 us), simulated captures with
white noise at 40 dB (noise rms = step / 100), the same sampling as the
accuracy benchmark's base cell (10 samples per fast time constant, a record
of 6 slow time constants after the edge and a fifth of that before it), are
fitted with ``--form two-real-pole``; the study counts how often each 95 %
interval of tau1 and tau2 contains the truth, how often the fit fails, and
how often the equal-pole warning is given.

The clean response is the textbook partial-fraction step response of
1/((1 + s tau1)(1 + s tau2)) (any control text), and 1 - exp(-t/tau)(1 + t/tau)
at equality, written out here independently of fitkit's forms.

Run:  python benchmarks/bench_two_real_pole_coverage.py [--trials 200]
(about 3 minutes on one core for the default 200 trials per ratio).
Results: benchmarks/results/two_real_pole_coverage.json and .md.
"""

from __future__ import annotations

import argparse
import collections
import math
import time

import numpy as np

RATIOS = (1.0, 0.9, 0.5)
TAU1 = 100e-6
SNR_DB = 40.0
BASELINE, STEP = 0.5, 2.5


def textbook_step(t: np.ndarray, tau1: float, tau2: float) -> np.ndarray:
    """Unit-step response of 1/((1 + s tau1)(1 + s tau2)), 0 before t = 0."""
    tc = np.clip(t, 0.0, None)
    if tau1 == tau2:
        x = tc / tau1
        y = 1.0 - np.exp(-x) * (1.0 + x)
    else:
        y = 1.0 - (tau1 * np.exp(-tc / tau1) - tau2 * np.exp(-tc / tau2)) / (tau1 - tau2)
    return np.where(t >= 0, y, 0.0)


def capture(ratio: float, trial: int, seed: int = 2026):
    """(segment, tau1, tau2) of one simulated capture."""
    from fitkit.conditioning.segment import StepSegment

    tau1, tau2 = TAU1, TAU1 * ratio
    dt = tau2 / 10.0
    n_post = int(math.ceil(6.0 * tau1 / dt))
    n_pre = max(20, n_post // 5)
    t = np.arange(-n_pre, n_post) * dt
    sigma = STEP / 10 ** (SNR_DB / 20.0)
    rng = np.random.default_rng([seed, int(round(ratio * 1000)), trial])
    y = BASELINE + STEP * textbook_step(t, tau1, tau2) + rng.normal(0.0, sigma, t.size)
    seg = StepSegment(0, t.size, t, y, None, 0.0, 1, float(y[t < 0].mean()), float(y[-8:].mean()),
                      noise_rms=sigma, quantisation_step=None)
    return seg, tau1, tau2


def coverage(ratio: float, trials: int, seed: int = 2026) -> dict:
    """Counts over ``trials`` captures at tau2/tau1 = ratio: fits, failures, coverage of tau1/tau2
    and of Q, and equal-pole warnings."""
    from fitkit.errors import FitError
    from fitkit.fitting import fit_segments

    counts: collections.Counter = collections.Counter()
    q_true = math.sqrt(ratio) / (1.0 + ratio)
    for trial in range(trials):
        seg, tau1, tau2 = capture(ratio, trial, seed)
        try:
            r = fit_segments([seg], "two-real-pole", intervals="auto", derived=True)
        except FitError:
            counts["failed"] += 1
            continue
        counts["fitted"] += 1
        counts["tau1 covered"] += r.parameters["tau1"].contains(tau1)
        counts["tau2 covered"] += r.parameters["tau2"].contains(tau2)
        counts["Q covered"] += r.derived["Q"].contains(q_true)
        counts["equal-pole warning"] += any("cannot tell the two poles apart" in w for w in r.warnings)
    return dict(counts)


def main() -> None:
    try:  # run as a script, or imported
        from _common import clean, machine, write_results
    except ImportError:  # pragma: no cover
        from benchmarks._common import clean, machine, write_results

    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--trials", type=int, default=200)
    parser.add_argument("--seed", type=int, default=2026)
    args = parser.parse_args()
    rows, lines = [], []
    for ratio in RATIOS:
        start = time.perf_counter()
        c = coverage(ratio, args.trials, args.seed)
        n = max(c.get("fitted", 0), 1)
        row = {"ratio": ratio, "trials": args.trials, "fitted": c.get("fitted", 0), "failed": c.get("failed", 0),
               **{f"{k} coverage": c.get(f"{k} covered", 0) / n for k in ("tau1", "tau2", "Q")},
               "equal_pole_warnings": c.get("equal-pole warning", 0), "seconds": time.perf_counter() - start}
        rows.append(row)
        lines.append(f"| {ratio:g} | {row['fitted']} | {row['failed']} | {100 * row['tau1 coverage']:.1f} "
                     f"| {100 * row['tau2 coverage']:.1f} | {100 * row['Q coverage']:.1f} "
                     f"| {row['equal_pole_warnings']} |")
        print(lines[-1], flush=True)
    info = machine()
    se = 100 * math.sqrt(0.95 * 0.05 / args.trials)
    markdown = "\n".join([
        "# Two-real-pole intervals at equal and close time constants", "",
        f"{info['date_utc']}; {info['cpu_model']}, {info['nproc']} cores. {args.trials} captures per ratio "
        f"(seed {args.seed}), 40 dB white noise, `--form two-real-pole`; coverage of the 95 % intervals "
        f"in % of the fitted captures (standard error {se:.1f} %).", "",
        "| tau2/tau1 | fitted | failed | tau1 covered % | tau2 covered % | Q covered % | equal-pole warnings |",
        "|---|---|---|---|---|---|---|", *lines, ""])
    write_results("two_real_pole_coverage", clean({"study": "two-real-pole coverage", "machine": info,
                                                    "settings": vars(args), "rows": rows}), markdown)


if __name__ == "__main__":
    main()
