"""The benchmark scripts still run, and their Fisher-information code is right.

benchmarks/bench_accuracy.py and bench_speed.py are run in their tiny
"--quick" configurations (writing to a temporary directory) and their JSON is
checked for the documented keys and for sane figures. The Cramer-Rao code in
benchmarks/_common.py is checked against a closed form derived below.
"""

from __future__ import annotations

import json
import math
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest

BENCH = Path(__file__).resolve().parents[1] / "benchmarks"
sys.path.insert(0, str(BENCH))

import _common  # noqa: E402
import bench_accuracy  # noqa: E402


def test_crlb_of_a_first_order_time_constant_matches_the_closed_form():
    # y_k = A (1 - exp(-k dt / tau)) + white noise sigma, tau the only unknown.
    # Fisher information I = sum_k (dy_k/dtau)^2 / sigma^2 with
    # dy_k/dtau = -A (k dt / tau^2) exp(-k dt / tau), so
    # I = A^2 dt^2 / (sigma^2 tau^4) * sum_k k^2 x^k,  x = exp(-2 dt / tau),
    # and sum_{k>=0} k^2 x^k = x (1 + x) / (1 - x)^3 (the geometric series
    # differentiated twice; from memory, re-derived here). CRLB = 1 / I
    # (Kay, Fundamentals of Statistical Signal Processing: Estimation Theory, 1993, ch. 3).
    # Derived here; a record of 40 tau makes the truncated sum equal the infinite one.
    A, tau, dt, sigma = 2.5, 1e-4, 1e-5, 0.01
    t = np.arange(4000) * dt
    J = _common.jacobian(lambda p: A * -np.expm1(-t / p["tau"]), {"tau": tau}, {"tau": 1e-7 * tau})
    crlb, ols = _common.fisher_bounds(J, sigma)
    x = math.exp(-2 * dt / tau)
    closed = sigma**2 * tau**4 / (A**2 * dt**2 * x * (1 + x) / (1 - x) ** 3)
    assert crlb[0] == pytest.approx(closed, rel=1e-6)
    assert ols[0] == pytest.approx(closed, rel=1e-6)  # white noise: least squares attains the bound
    # dense-sampling limit, derived here: var >= 4 tau dt sigma^2 / A^2
    assert crlb[0] == pytest.approx(4 * tau * dt * sigma**2 / A**2, rel=0.01)


def test_correlated_bound_reduces_to_white_and_least_squares_never_beats_it():
    A, tau = 1.0, 1.0
    t = np.arange(300) * 0.05
    J = _common.jacobian(lambda p: p["step"] * -np.expm1(-t / p["tau"]), {"tau": tau, "step": A},
                         {"tau": 1e-6, "step": 1e-6})
    white_crlb, _ = _common.fisher_bounds(J, 0.02)
    delta = np.zeros(t.size)
    delta[0] = 1.0
    as_toeplitz, _ = _common.fisher_bounds(J, 0.02, delta)
    np.testing.assert_allclose(as_toeplitz, white_crlb, rtol=1e-9)
    crlb, ols = _common.fisher_bounds(J, 0.02, _common.band_limited_autocorrelation(t.size))
    # Gauss-Markov: the unweighted estimator's variance is at least the bound (Kay 1993, ch. 6)
    assert np.all(ols >= crlb * (1 - 1e-9))


def test_band_limited_noise_has_the_stated_autocorrelation():
    rng = np.random.default_rng(3)
    x = _common.band_limited_noise(rng, 200_000, 1.0)
    r = _common.band_limited_autocorrelation(6)
    sample = [float(np.mean(x[: x.size - k] * x[k:])) for k in range(6)]
    np.testing.assert_allclose(sample, r, atol=0.02)  # standard error of each lag about 0.01 here
    assert r[1] > 0.8  # strongly correlated, as scope noise after the front-end filter


def test_hand_methods_recover_a_noiseless_first_order_time_constant():
    # textbook first-order relations: 63.2 % at t = tau, 10-90 % rise = tau ln 9 (design.md list)
    tau = 1e-4
    t = np.arange(-200, 4000) * tau / 200
    y = 0.5 + 2.5 * np.where(t >= 0, -np.expm1(-np.clip(t, 0, None) / tau), 0.0)
    for name, method in bench_accuracy.HAND_METHODS.items():
        assert method(t, y, 0.0) == pytest.approx(tau, rel=2e-3), name


def test_accuracy_script_quick_run(tmp_path):
    proc = subprocess.run([sys.executable, str(BENCH / "bench_accuracy.py"), "--quick", "--results-dir",
                           str(tmp_path)], capture_output=True, text=True, timeout=120)
    assert proc.returncode == 0, proc.stderr
    data = json.loads((tmp_path / "accuracy_quick.json").read_text())
    assert {"study", "machine", "settings", "wall_seconds", "cells", "targets"} <= set(data)
    assert {"nproc", "python", "numpy", "scipy", "blas", "load_average_1_5_15min"} <= set(data["machine"])
    assert (tmp_path / "accuracy_quick.md").read_text().startswith("# Accuracy benchmark")
    base = next(c for c in data["cells"] if c["response"] == "first-order" and c["label"] == "base")
    p = base["parameters"]["tau"]
    assert {"bias_rel", "rmse_rel", "crlb_sd_rel", "efficiency", "coverage", "gross_error_rate"} <= set(p)
    assert base["convergence_rate"] == 1.0
    # the fit's error is of the order of the bound: 8 trials, so a loose factor
    assert 0.3 * p["crlb_sd_rel"] < p["rmse_rel"] < 3 * p["crlb_sd_rel"]
    assert set(base["hand_methods"]) == {*bench_accuracy.HAND_METHODS, "curve_fit, p0 = ones"}


def test_speed_script_quick_run(tmp_path):
    proc = subprocess.run([sys.executable, str(BENCH / "bench_speed.py"), "--quick", "--results-dir",
                           str(tmp_path)], capture_output=True, text=True, timeout=300)
    assert proc.returncode == 0, proc.stderr
    data = json.loads((tmp_path / "speed_quick.json").read_text())
    assert {"machine", "settings", "sizes", "help", "targets"} <= set(data)
    row = data["sizes"][0]
    for key in ("read_csv", "fitkit_in_process", "fitkit_fit_command", "fitkit_fit_output_only", "hand_script"):
        assert row[key]["wall_s"] > 0 and row[key]["peak_mib"] > 10, key
    fit = row["fitkit_in_process"]
    assert fit["model"] == "first-order"
    tr = row["truth"]
    # the bound lies above the tau-only dense limit sqrt(4 tau dt sigma^2 / (A^2 x 4 edges)) (derived
    # in the test above) and not far above it: offset and gain cost little information
    tau_only = math.sqrt(4 * tr["tau"] * tr["dt"] * tr["sigma"] ** 2 / 4)
    assert tau_only < fit["tau_crlb_sd"] < 1.3 * tau_only
    assert abs(fit["tau_error_in_crlb_sd"]) < 5  # fixed seed; a fit this far off would be a bug
    assert data["help"]["wall_s"] > 0


def test_quantised_information_of_the_benchmark():
    # the bound for quantised captures: per-sample information of a rounded Gaussian,
    # against a direct computation with scipy.stats (multinomial information
    # sum_c (dP_c/dm)^2 / P_c, central differences of the cdf), and the additive
    # model 1 / (sigma^2 + q^2 / 12) (Widrow & Kollar 2008, ch. 4, from memory) above two codes
    import scipy.stats

    quantised_information = _common.quantised_information
    q = 1.0
    codes = np.arange(-30, 31)
    for sigma in (0.2, 0.6):
        for m in (0.0, 0.3, 0.5):
            def probs(mu):
                return (scipy.stats.norm.cdf(((codes + 0.5) * q - mu) / sigma)
                        - scipy.stats.norm.cdf(((codes - 0.5) * q - mu) / sigma))
            p = probs(m)
            dp = (probs(m + 1e-6) - probs(m - 1e-6)) / 2e-6
            keep = p > 1e-300
            direct = float(np.sum(dp[keep] ** 2 / p[keep]))
            assert quantised_information(np.array([m]), sigma, q)[0] == pytest.approx(direct, rel=1e-5)
    assert quantised_information(np.array([0.2]), 3.0, q)[0] == pytest.approx(1 / (9 + 1 / 12))


def test_cli_fuzz_study_runs_and_scores_its_cases(tmp_path):
    # a tiny seeded run (8 cases, all usage or input errors at this seed): the
    # script runs, writes its JSON and counts what it promises to count
    proc = subprocess.run([sys.executable, str(BENCH / "study_cli_fuzz.py"), "--cases", "8", "--seed", "5",
                           "--out", str(tmp_path)], capture_output=True, text=True, timeout=300)
    assert proc.returncode == 0, proc.stderr
    data = json.loads((tmp_path / "cli_fuzz.json").read_text())
    assert data["cases"] == 8 and sum(data["statuses"].values()) == 8
    assert set(data["counts"]) == {"internal", "traceback_or_warning", "long_error", "undocumented_status",
                                   "timeout"}
    assert data["counts"]["internal"] == 0


def test_real_crops_study_tells_an_honest_interval_from_a_confident_wrong_one():
    """benchmarks/study_real_crops.py: a value outside its range is "wide" when its interval
    reaches the range, "wrong" when it does not; a first-order tau stands for tau1."""
    import study_real_crops
    from support.real_corpus import CASES

    case = next(c for c in CASES if c.file.endswith("scope_6.csv"))   # tau1 160-205 us, tau2 45-70 us

    def run(model, **params):
        table = {k: {"value": v, "ci95": ci, "determined": True} for k, (v, ci) in params.items()}
        return json.dumps({"model": model, "parameters": table, "derived": {}})

    assert study_real_crops.judge(case, 0, run("two-real-pole", tau1=(180e-6, [170e-6, 190e-6]),
                                               tau2=(50e-6, [40e-6, 60e-6])), "")[0] == "right"
    assert study_real_crops.judge(case, 0, run("first-order", tau=(215e-6, [150e-6, 300e-6])), "")[0] == "wide"
    assert study_real_crops.judge(case, 0, run("first-order", tau=(260e-6, [250e-6, 270e-6])), "")[0] == "wrong"
    assert study_real_crops.judge(case, 6, "", "fitkit: FILE: does not describe")[0] == "refused"
    assert study_real_crops.judge(case, 70, "", "fitkit: internal error: ...")[0] == "internal"
