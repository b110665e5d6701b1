"""Shared helpers for the accuracy and speed benchmarks.

* :func:`machine` - a description of the machine and the load on it;
* :func:`fisher_bounds` - Cramer-Rao lower bounds (and the variance of an
  unweighted least-squares estimator) from a numerical Jacobian of a model;
* :func:`band_limited_noise` and :func:`band_limited_autocorrelation` - the
  scope-like coloured noise the studies use, and its exact autocorrelation;
* :func:`write_results` - JSON + Markdown side by side in benchmarks/results/.

Units: seconds, volts, hertz (SI) throughout.
"""

from __future__ import annotations

import datetime as _dt
import json
import math
import os
import platform
import subprocess
from pathlib import Path
from typing import Callable, Mapping, Sequence

import numpy as np

HERE = Path(__file__).resolve().parent
RESULTS = HERE / "results"

#: Band-limited noise: 4th-order Butterworth low-pass at this fraction of Nyquist ...
BAND_CUTOFF = 0.15
#: ... plus a white floor carrying this fraction of the noise variance (the ADC's own noise).
WHITE_FLOOR = 0.01


# -- the machine -------------------------------------------------------------------

def _run(cmd: Sequence[str]) -> str:
    try:
        return subprocess.run(list(cmd), capture_output=True, text=True, timeout=20).stdout.strip()
    except (OSError, subprocess.SubprocessError):
        return ""


def corpus_study_output(description: str, argv: list[str] | None, corpus: Path) -> Path | None:
    """The output folder of a study of the real captures (its --out option, default
    benchmarks/results), or None, said on stdout, when the captures are not at ``corpus``."""
    import argparse

    parser = argparse.ArgumentParser(description=description)
    parser.add_argument("--out", type=Path, default=Path(__file__).resolve().parent / "results")
    args = parser.parse_args(argv)
    if not corpus.exists():
        print(f"reference captures not found at {corpus}; nothing to study")
        return None
    return args.out


def load_average() -> str:
    """`uptime` load averages (1, 5, 15 min) as a string; other engineers share the cores."""
    try:
        return " ".join(f"{x:.2f}" for x in os.getloadavg())
    except OSError:
        return ""


def blas_name() -> str:
    """The BLAS numpy is linked against (name and version as numpy reports them)."""
    try:
        cfg = np.show_config(mode="dicts")  # numpy >= 1.25
        blas = cfg.get("Build Dependencies", {}).get("blas", {})
        return f"{blas.get('name', '?')} {blas.get('version', '')}".strip()
    except Exception:  # older numpy: no dict mode
        return "unknown"


def machine() -> dict:
    """Machine, software versions and load, for the results files."""
    import scipy

    mem_kib = 0
    try:
        for line in open("/proc/meminfo"):
            if line.startswith("MemTotal:"):
                mem_kib = int(line.split()[1])
    except OSError:
        pass
    lscpu = _run(["lscpu"]).splitlines()
    model = next((ln.split(":", 1)[1].strip() for ln in lscpu if ln.startswith("Model name")), platform.processor())
    return {
        "date_utc": _dt.datetime.now(_dt.timezone.utc).strftime("%Y-%m-%dT%H:%M:%SZ"),
        "cpu_model": model,
        "nproc": os.cpu_count(),
        "memory_gib": round(mem_kib / 2**20, 2),
        "python": platform.python_version(),
        "numpy": np.__version__,
        "scipy": scipy.__version__,
        "blas": blas_name(),
        "load_average_1_5_15min": load_average(),
    }


# -- noise -------------------------------------------------------------------------

def _butterworth():
    from scipy import signal

    return signal.butter(4, BAND_CUTOFF)  # cutoff as a fraction of Nyquist (scipy.signal.butter)


def band_limited_noise(rng: np.random.Generator, n: int, sigma: float) -> np.ndarray:
    """n samples of unit-variance-normalised low-pass noise plus a white floor, rms sigma (V).

    (1 - WHITE_FLOOR) of the variance is white noise through a 4th-order
    Butterworth low-pass at BAND_CUTOFF x Nyquist (scipy.signal.lfilter, with
    a warm-up so the filter has forgotten its zero start); WHITE_FLOOR is
    white. Without the floor the covariance matrix is nearly singular (the
    filter has a 4-fold zero at Nyquist) and the Cramer-Rao bound would be
    that of a noise-free band no real scope has.
    """
    from scipy import signal

    b, a = _butterworth()
    warm = 500
    coloured = signal.lfilter(b, a, rng.standard_normal(n + warm))[warm:]
    coloured /= np.sqrt(_filter_gain())
    white = rng.standard_normal(n)
    return sigma * (np.sqrt(1 - WHITE_FLOOR) * coloured + np.sqrt(WHITE_FLOOR) * white)


def _impulse(length: int = 2000) -> np.ndarray:
    from scipy import signal

    b, a = _butterworth()
    x = np.zeros(length)
    x[0] = 1.0
    return signal.lfilter(b, a, x)


def _filter_gain() -> float:
    """Variance of the filtered unit white noise: sum of the squared impulse response."""
    h = _impulse()
    return float(h @ h)


def band_limited_autocorrelation(n: int) -> np.ndarray:
    """First column of the correlation matrix (unit variance) of band_limited_noise, length n.

    r[k] = (1 - f) sum_i h[i] h[i+k] / sum_i h[i]^2 + f delta[k] for white noise
    through a filter with impulse response h (the autocorrelation of a
    filtered white sequence; Papoulis & Pillai, Probability, Random Variables
    and Stochastic Processes, 4th ed., ch. 9 - chapter from memory).
    """
    h = _impulse()
    full = np.correlate(h, h, mode="full")[h.size - 1:] / float(h @ h)
    r = np.zeros(n)
    m = min(n, full.size)
    r[:m] = (1 - WHITE_FLOOR) * full[:m]
    r[0] += WHITE_FLOOR
    return r


# -- Fisher information -------------------------------------------------------------

def jacobian(model: Callable[[Mapping[str, float]], np.ndarray], theta: Mapping[str, float],
             steps: Mapping[str, float]) -> np.ndarray:
    """Central-difference Jacobian (n, p) of model(theta) w.r.t. the parameters, in their given order.

    steps: absolute step per parameter, in the parameter's own unit.
    """
    cols = []
    for name, h in steps.items():
        up, down = dict(theta), dict(theta)
        up[name] += h
        down[name] -= h
        cols.append((model(up) - model(down)) / (2 * h))
    return np.column_stack(cols)


def quantised_information(mean: np.ndarray, sigma: float, lsb: float) -> np.ndarray:
    """Fisher information about each sample's mean (1/V^2) when Gaussian noise of
    rms ``sigma`` (V) is added and the result rounded to a multiple of ``lsb`` (V).

    Each sample then falls in code c with probability
    P_c = Phi(b_c+1) - Phi(b_c), b_c = ((c - 1/2) lsb - mean) / sigma, and its
    information is sum_c (dP_c/dmean)^2 / P_c = sum_c (phi(b_c) - phi(b_c+1))^2
    / (sigma^2 P_c) (the Fisher information of a multinomial observation,
    Kay 1993, ch. 3, applied to the interval-censored Gaussian; common
    practice, no source for the quantiser model beyond rounding to the nearest
    code). Where sigma >= 2 lsb the additive approximation 1 / (sigma^2 +
    lsb^2 / 12) (Widrow & Kollar, Quantization Noise, 2008, ch. 4, from
    memory) is used: it is then exact to a fraction of a per cent.
    """
    from scipy import stats

    mean = np.asarray(mean, dtype=float)
    if sigma >= 2.0 * lsb:
        return np.full(mean.shape, 1.0 / (sigma**2 + lsb**2 / 12.0))
    span = int(math.ceil(8.0 * sigma / lsb)) + 2
    centre = np.round(mean / lsb)
    codes = centre[:, None] + np.arange(-span, span + 1)[None, :]
    lower = ((codes - 0.5) * lsb - mean[:, None]) / sigma
    upper = ((codes + 0.5) * lsb - mean[:, None]) / sigma
    prob = stats.norm.cdf(upper) - stats.norm.cdf(lower)
    slope = (stats.norm.pdf(lower) - stats.norm.pdf(upper)) / sigma
    with np.errstate(divide="ignore", invalid="ignore"):
        terms = np.where(prob > 1e-300, slope**2 / prob, 0.0)
    return terms.sum(axis=1)


def fisher_bounds(J: np.ndarray, sigma: float, correlation: np.ndarray | None = None,
                  information: np.ndarray | None = None) -> tuple[np.ndarray, np.ndarray]:
    """(CRLB variances, unweighted-least-squares variances) of each parameter, from the Jacobian J.

    White noise (correlation None): Fisher information F = J^T J / sigma^2 and
    the bound is diag(F^-1) (Kay, Fundamentals of Statistical Signal
    Processing: Estimation Theory, Prentice Hall 1993, eq. 3.33, the Gaussian
    case); ordinary least squares attains it asymptotically.
    Correlated Gaussian noise with covariance C = sigma^2 R (R Toeplitz, first
    column ``correlation``): F = J^T C^-1 J (same source), which only a fit
    that whitens the residuals attains; an unweighted fit has the sandwich
    variance (J^T J)^-1 J^T C J (J^T J)^-1 (the Gauss-Markov argument; the
    same book, ch. 6). The second array is that sandwich (= the CRLB for white noise).
    Both in the parameter units squared; NaN where F is singular.
    information: per-sample Fisher information about the mean (1/V^2), for
    white noise that is not Gaussian at the sample (quantised, see
    :func:`quantised_information`): then F = J^T diag(information) J, and
    ``sigma`` only sets the second array (least squares under the additive
    approximation).
    """
    from scipy import linalg

    scale = np.linalg.norm(J, axis=0)  # columns to unit length: parameters differ by 1e9 in SI units
    nan = np.full(J.shape[1], np.nan)
    if not np.all(scale > 0):
        return nan, nan
    Js = J / scale
    JTJ = Js.T @ Js
    if np.linalg.cond(JTJ) > 1e12:  # e.g. tau1 = tau2: the two columns coincide
        return nan, nan
    A = np.linalg.inv(JTJ)
    if correlation is None:
        var = np.diag(A) * sigma**2 / scale**2
        if information is not None:
            F = Js.T @ (np.asarray(information, dtype=float)[:, None] * Js)
            return np.diag(np.linalg.inv(F)) / scale**2, var
        return var, var.copy()
    r = np.asarray(correlation, dtype=float)
    CinvJ = linalg.solve_toeplitz(r, Js) / sigma**2
    crlb = np.diag(np.linalg.inv(Js.T @ CinvJ)) / scale**2
    CJ = linalg.matmul_toeplitz(r, Js) * sigma**2
    sandwich = np.diag(A @ (Js.T @ CJ) @ A) / scale**2
    return crlb, sandwich


# -- output ------------------------------------------------------------------------

def write_results(stem: str, data: dict, markdown: str, directory: str | Path | None = None) -> tuple[Path, Path]:
    """<directory>/<stem>.json and .md (default directory benchmarks/results); returns both paths."""
    out = Path(directory) if directory else RESULTS
    out.mkdir(parents=True, exist_ok=True)
    jpath, mpath = out / f"{stem}.json", out / f"{stem}.md"
    jpath.write_text(json.dumps(data, indent=1, allow_nan=False, default=_jsonable) + "\n")
    mpath.write_text(markdown)
    return jpath, mpath


def _jsonable(x):
    if isinstance(x, (np.floating, np.integer)):
        return x.item()
    if isinstance(x, np.ndarray):
        return x.tolist()
    raise TypeError(type(x))


def clean(x):
    """Recursively turn NaN/inf into None so the JSON is strict."""
    if isinstance(x, dict):
        return {k: clean(v) for k, v in x.items()}
    if isinstance(x, (list, tuple)):
        return [clean(v) for v in x]
    if isinstance(x, (float, np.floating)):
        return float(x) if np.isfinite(x) else None
    return x


def fmt(x, spec: str = ".3g") -> str:
    """A number for a Markdown table; '-' for None/NaN."""
    if x is None or (isinstance(x, float) and not np.isfinite(x)):
        return "-"
    return format(x, spec)


def map_tasks(worker: Callable, tasks: Sequence, workers: int) -> list:
    """worker(task) for every task, in order: in a process pool of ``workers``
    (one task at a time per process, so long and short cells balance), or in
    this process when workers <= 1."""
    if workers > 1:
        from multiprocessing import Pool

        with Pool(workers) as pool:
            return pool.map(worker, tasks, chunksize=1)
    return [worker(tk) for tk in tasks]
