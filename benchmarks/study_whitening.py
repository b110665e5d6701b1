"""Study: generalised least squares by AR prewhitening under band-limited noise.

Run:  python benchmarks/study_whitening.py [--trials 300] [--workers 2] [--quick]

For each cell (a true response and a sampling density, band-limited noise as
in the accuracy benchmark: _common.band_limited_noise), every trial adds
fresh noise (fixed seeds) and fits the true form three ways:

* "ordinary":   least squares with no correction (correlation="off");
* "sandwich":   least squares with the autocorrelation-consistent sandwich
                covariance, whitening switched off (the behaviour before
                fitkit.fitting.whitening);
* "whitened":   fitkit's default: feasible GLS by prewhitening.
* "record":     GLS with the noise model of a separate quiet record of
                RECORD_SAMPLES samples of the same noise (fitkit fit
                --noise-record), whatever the capture's length;
* "exact":      GLS with an AR model fitted to the exact autocorrelation
                (_common.band_limited_autocorrelation): what a perfectly
                known noise model gives, the finite-sample limit of GLS.

Reported per parameter: efficiency (Cramer-Rao bound of the known noise
correlation / MSE; bound from _common.fisher_bounds: Kay, Fundamentals of
Statistical Signal Processing, 1993, ch. 3), coverage of the 95 % intervals
(intervals="auto", as the accuracy benchmark), the ratio of the RMS error to
the RMS reported standard error, and the fraction of trials that were whitened.

Results: benchmarks/results/whitening.json and whitening.md.
"""

from __future__ import annotations

import argparse
import math
import time
import warnings

import numpy as np

try:
    from _common import band_limited_autocorrelation, band_limited_noise, clean, fmt, machine, map_tasks, write_results
    from bench_accuracy import BASE, RESPONSES, cell_setup
except ImportError:  # pragma: no cover
    from benchmarks._common import (band_limited_autocorrelation, band_limited_noise, clean, fmt, machine,
                                    map_tasks, write_results)
    from benchmarks.bench_accuracy import BASE, RESPONSES, cell_setup

#: (response, samples per fastest time constant)
CELLS = [("first-order", 10.0), ("first-order", 20.0), ("first-order", 40.0),
         ("two-pole 0.2", 10.0), ("underdamped Q 0.7", 10.0), ("underdamped Q 0.7", 20.0),
         ("underdamped Q 5", 10.0)]
QUICK_CELLS = [("first-order", 40.0), ("underdamped Q 5", 10.0)]
ARMS = ("ordinary", "sandwich", "whitened", "record", "exact")
#: Samples in the quiet record of the "record" arm, and the AR order limit of the "exact" arm.
RECORD_SAMPLES = 4096
EXACT_ORDER = 80


def run_trials(task: tuple) -> list[dict]:
    """Worker: trials [first, first + count) of one cell and arm."""
    import fitkit.fitting.form_fit as form_fit
    from fitkit.conditioning.segment import StepSegment
    from fitkit.errors import FitError
    from fitkit.fitting import fit_segments
    from fitkit.fitting.noise_record import NoiseRecord, noise_record_from_samples
    from fitkit.fitting.uncertainty import autoregressive_model
    from fitkit.fitting.whitening import Whitener, whitening_applies

    cell_index, response, samples, arm, first, count = task
    form_name, shape, *_ = RESPONSES[response]
    setup = cell_setup(response, {**BASE, "noise": "band", "samples_per_tau": samples})
    t, y0, sigma = setup["t"], setup["clean"], setup["sigma"]
    # the "sandwich" arm: the engine as it was before whitening (a study-only switch)
    form_fit.whitening_applies = (lambda joint: False) if arm == "sandwich" else whitening_applies
    dt = float(t[1] - t[0])
    exact = None
    if arm == "exact":
        rho = band_limited_autocorrelation(EXACT_ORDER + 1)
        model = autoregressive_model(rho, 10**9, max_order=EXACT_ORDER)
        exact = NoiseRecord(Whitener(model, float(rho[1]), rho, record_samples=10**9), dt, 10**9, sigma, "exact")
    records = []
    for trial in range(first, first + count):
        rng = np.random.default_rng([cell_index, trial, 20261202])
        y = y0 + band_limited_noise(rng, t.size, sigma)
        record = exact
        if arm == "record":
            record = noise_record_from_samples(band_limited_noise(rng, RECORD_SAMPLES, sigma), dt)
        seg = StepSegment(0, t.size, t, y, None, 0.0, 1, float(y[t < 0].mean()),
                          float(y[-max(5, t.size // 10):].mean()), noise_rms=sigma)
        rec: dict = {"trial": trial}
        try:
            with warnings.catch_warnings():
                warnings.simplefilter("ignore")
                r = fit_segments([seg], form_name, intervals="auto", derived=False,
                                 correlation="off" if arm == "ordinary" else "auto", noise_record=record)
            rec["value"] = {k: r.parameters[k].value for k in shape}
            rec["stderr"] = {k: r.parameters[k].stderr for k in shape}
            rec["covered"] = {k: bool(r.parameters[k].contains(v)) for k, v in shape.items()}
            rec["whitened"] = "generalised least squares" in r.diagnostics.correction
        except FitError as err:
            rec["error"] = err.message
        records.append(rec)
    return records


def summarise(response: str, samples: float, arm: str, setup: dict, records: list[dict]) -> dict:
    _, shape, *_ = RESPONSES[response]
    ok = [r for r in records if "value" in r]
    params = {}
    for k, truth in shape.items():
        err = np.array([r["value"][k] - truth for r in ok])
        se = np.array([r["stderr"][k] if r["stderr"][k] is not None else math.nan for r in ok])
        mse = float(np.mean(err ** 2)) if err.size else math.nan
        params[k] = {"efficiency": setup["crlb"][k] / mse if mse > 0 else None,
                     "coverage": float(np.mean([r["covered"][k] for r in ok])) if ok else None,
                     "rmse_over_stderr": math.sqrt(mse) / math.sqrt(float(np.nanmean(se ** 2))) if ok else None,
                     "bias_rel": float(np.mean(err)) / truth if err.size else None}
    return {"response": response, "samples_per_tau": samples, "arm": arm, "n_samples": setup["n"],
            "trials": len(records), "failures": len(records) - len(ok),
            "whitened_fraction": float(np.mean([r["whitened"] for r in ok])) if ok else None,
            "parameters": params}


def run_study(trials: int, workers: int, quick: bool) -> dict:
    cells = QUICK_CELLS if quick else CELLS
    chunk = 25
    tasks = [(i, resp, samples, arm, first, min(chunk, trials - first))
             for i, (resp, samples) in enumerate(cells) for arm in ARMS for first in range(0, trials, chunk)]
    started = time.time()
    chunks = map_tasks(run_trials, tasks, workers)
    grouped: dict[tuple, list] = {}
    for tk, recs in zip(tasks, chunks):
        grouped.setdefault((tk[0], tk[3]), []).extend(recs)
    rows = []
    for i, (resp, samples) in enumerate(cells):
        setup = cell_setup(resp, {**BASE, "noise": "band", "samples_per_tau": samples})
        for arm in ARMS:
            rows.append(summarise(resp, samples, arm, setup, grouped[(i, arm)]))
    return clean({"study": "whitening", "machine": machine(), "trials_per_cell": trials, "workers": workers,
                  "wall_seconds": time.time() - started, "rows": rows})


def markdown(data: dict) -> str:
    m = data["machine"]
    lines = ["# Whitened fits under band-limited noise", "",
             f"{m['date_utc']}; {m['cpu_model']}, {m['nproc']} cores; {data['trials_per_cell']} trials per cell "
             f"and arm, {data['workers']} workers, {data['wall_seconds']:.0f} s wall.", "",
             "Band-limited noise as in the accuracy benchmark, 40 dB SNR, record of 6 slowest time constants. "
             "Efficiency = CRLB (known noise correlation) / MSE, relative uncertainty about "
             f"{100 * math.sqrt(2 / data['trials_per_cell']):.0f} %; coverage of 95 % intervals "
             f"(standard error {100 * math.sqrt(0.95 * 0.05 / data['trials_per_cell']):.1f} %).", "",
             "| response | samples per tau | points | arm | whitened | param | efficiency | coverage % | "
             "RMSE / stderr | bias % |", "|---|---|---|---|---|---|---|---|---|---|"]
    for r in data["rows"]:
        for k, p in r["parameters"].items():
            lines.append(f"| {r['response']} | {r['samples_per_tau']:g} | {r['n_samples']} | {r['arm']} | "
                         f"{fmt(None if r['whitened_fraction'] is None else 100 * r['whitened_fraction'], '.0f')} % | "
                         f"{k} | {fmt(p['efficiency'], '.2f')} | "
                         f"{fmt(None if p['coverage'] is None else 100 * p['coverage'], '.1f')} | "
                         f"{fmt(p['rmse_over_stderr'], '.2f')} | "
                         f"{fmt(None if p['bias_rel'] is None else 100 * p['bias_rel'], '.2f')} |")
    return "\n".join(lines) + "\n"


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--trials", type=int, default=300)
    ap.add_argument("--workers", type=int, default=2)
    ap.add_argument("--quick", action="store_true", help="two cells only")
    args = ap.parse_args()
    data = run_study(args.trials, args.workers, args.quick)
    paths = write_results("whitening", data, markdown(data))
    print(markdown(data))
    print("written:", *paths)


if __name__ == "__main__":
    main()
