"""Study: output-only band-pass captures, one step or a square wave, read from the file alone.

Without a drive channel the edges are found in the output, and a band-pass response
comes back by itself: its return, or its ringing, crosses the levels like a drive
that switched. This study fits `fit_capture` (form chosen automatically, no option)
to simulated captures of the series RLC with the voltage taken across R,
H(s) = (w0/Q) s / (s^2 + (w0/Q) s + w0^2), f0 = 15.915 kHz, for Q from 0.3 to 32:

- one step: the exact response (Nilsson & Riedel, *Electric Circuits*, RLC step
  responses, from memory: the current after a step V is V/(wd L) exp(-alpha t)
  sin(wd t), or the difference of two exponentials when overdamped; the voltage
  across R is R i), 7 slowest decay times after the edge, 1,000 samples;
- a square wave of four edges, half period 7 decay times, 4,000 samples
  (scipy.signal.lsim of the drive drawn 16 times finer than the samples);

each under white noise of 3 mV and under the same noise low-passed at a fifth of the
Nyquist frequency (scipy.signal.butter, as the board-check grid draws it), 20 seeds.
A trial is counted: refused (no edge found or the fit does not describe the capture),
read as a band-pass form, or read as another form (wrong); for band-pass reads, how
often f0 and Q's 95 % intervals hold the truth (the two-real-pole band-pass reports
its time constants, compared with the true poles' 1/|p|).

    python benchmarks/study_band_pass_shapes.py [--seeds 20]
Writes results/band_pass_shapes.{json,md}.
"""

from __future__ import annotations

import argparse
import json
import math
import sys
import time
from collections import Counter
from pathlib import Path

import numpy as np
import scipy.signal

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE.parent))

from fitkit.capture import Capture  # noqa: E402
from fitkit.errors import FitkitError  # noqa: E402
from fitkit.fitting import fit_capture  # noqa: E402

F0 = 15915.494
NOISE = 3e-3
QS = (0.3, 0.7, 1.0, 2.0, 4.0, 8.0, 32.0)
BAND_PASS = ("underdamped-band-pass", "two-real-pole-band-pass")


def _poles(q: float) -> np.ndarray:
    w0 = 2 * math.pi * F0
    return np.roots([1.0, w0 / q, w0 * w0])


def _slow(q: float) -> float:
    return 1.0 / float(np.min(np.abs(_poles(q).real)))


def one_step(q: float, t: np.ndarray) -> np.ndarray:
    """The unit step's response across R (Nilsson & Riedel's current times R, as H above)."""
    w0 = 2 * math.pi * F0
    alpha = w0 / (2 * q)
    a = np.clip(t, 0, None)
    if q > 0.5:
        wd = math.sqrt(w0 * w0 - alpha * alpha)
        v = 2 * alpha * np.exp(-alpha * a) * np.sin(wd * a) / wd
    else:
        s1, s2 = _poles(q)
        v = 2 * alpha * (np.exp(s1 * a) - np.exp(s2 * a)) / (s1 - s2)
    return np.where(t > 0, v, 0.0)


def square(q: float, t: np.ndarray, half: float) -> np.ndarray:
    w0 = 2 * math.pi * F0
    fine = np.linspace(t[0], t[-1], (t.size - 1) * 16 + 1)
    drive = ((np.floor(np.maximum(fine, 0) / half) % 2 == 0) & (fine >= 0)).astype(float)
    _, y, _ = scipy.signal.lsim(scipy.signal.lti([w0 / q, 0.0], [1.0, w0 / q, w0 * w0]), drive, fine - fine[0])
    return y[::16]


def noise(seed: int, n: int, kind: str) -> np.ndarray:
    w = np.random.default_rng(seed).normal(0.0, 1.0, n)
    if kind == "band-limited":
        b, a = scipy.signal.butter(2, 0.2)
        w = scipy.signal.lfilter(b, a, w)
    return NOISE * w / w.std()


def trial(q: float, shape: str, noise_kind: str, seed: int) -> dict:
    slow = _slow(q)
    if shape == "one step":
        t = np.linspace(-0.7 * slow, 7 * slow, 1000)
        y = one_step(q, t)
    else:
        half = 7 * slow
        t = np.linspace(-0.1 * half, 4 * half, 4000)
        y = square(q, t, half)
    capture = Capture.from_arrays(t, {"output": y + noise(seed, t.size, noise_kind)})
    try:
        r = fit_capture(capture)
    except FitkitError as err:
        return {"outcome": "refused", "why": err.message[:80]}
    if not r.describes_data:
        return {"outcome": "refused", "why": "does not describe"}
    if r.model not in BAND_PASS:
        return {"outcome": "wrong form", "form": r.model}
    out = {"outcome": "band-pass", "form": r.model, "one_response": any(w.startswith("read as one response")
                                                                          for w in r.warnings)}
    if r.model == "underdamped-band-pass":
        truths = {"f0": F0, "Q": q}
    else:
        taus = sorted(1.0 / np.abs(_poles(q).real), reverse=True)
        truths = {"tau1": taus[0], "tau2": taus[1]}
    for name, truth in truths.items():
        est = r.parameters.get(name)
        out[name] = bool(est is not None and est.ci95 is not None and est.ci95[0] <= truth <= est.ci95[1])
    return out


def main(argv: list[str] | None = None) -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--seeds", type=int, default=20)
    parser.add_argument("--out", type=Path, default=HERE / "results")
    args = parser.parse_args(argv)
    start = time.perf_counter()
    rows = []
    for shape in ("one step", "square wave"):
        for noise_kind in ("white", "band-limited"):
            for q in QS:
                trials = [trial(q, shape, noise_kind, seed) for seed in range(args.seeds)]
                outcomes = Counter(t["outcome"] for t in trials)
                reads = [t for t in trials if t["outcome"] == "band-pass"]
                held = {k: sum(t[k] for t in reads if k in t) for k in ("f0", "Q", "tau1", "tau2")}
                rows.append({"shape": shape, "noise": noise_kind, "Q": q, "trials": len(trials),
                             "band_pass": outcomes["band-pass"], "refused": outcomes["refused"],
                             "wrong_form": outcomes["wrong form"],
                             "one_response": sum(t.get("one_response", False) for t in reads),
                             "held": {k: v for k, v in held.items() if any(k in t for t in reads)},
                             "wrong_forms": sorted({t["form"] for t in trials if t["outcome"] == "wrong form"}),
                             "refusals": sorted({t["why"] for t in trials if t["outcome"] == "refused"})[:3]})
                print(json.dumps(rows[-1]), flush=True)
    args.out.mkdir(parents=True, exist_ok=True)
    (args.out / "band_pass_shapes.json").write_text(json.dumps({"seconds": time.perf_counter() - start,
                                                                 "rows": rows}, indent=1))
    lines = ["| shape | noise | Q | band-pass read | read as one response | refused | other form | "
             "intervals holding the truth |", "|---|---|---|---|---|---|---|---|"]
    for r in rows:
        held = ", ".join(f"{k} {v}/{r['band_pass']}" for k, v in r["held"].items()) or "-"
        lines.append(f"| {r['shape']} | {r['noise']} | {r['Q']:g} | {r['band_pass']}/{r['trials']} | "
                     f"{r['one_response']} | {r['refused']} | {r['wrong_form']}"
                     f"{' (' + ', '.join(r['wrong_forms']) + ')' if r['wrong_forms'] else ''} | {held} |")
    (args.out / "band_pass_shapes.md").write_text("\n".join(lines) + "\n")
    print("\n".join(lines))


if __name__ == "__main__":
    main()
