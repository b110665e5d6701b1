"""Realistic FitResult records for the report tests, and checks of the simulation behind them.

The fitting engine is written separately; the report layer is tested against
records built here: the step response of each form simulated with
scipy.signal (an independent simulator, not fitkit.forms), white noise and
10-bit quantisation added, the noise-free response standing in for the fitted
curve, and estimates with intervals of a realistic width.
"""

from __future__ import annotations

import math

import numpy as np
import scipy.signal

from fitkit.results import CandidateScore, Estimate, FitDiagnostics, FitResult, FittedSegment

TWO_PI = 2.0 * math.pi

# form name -> (shape parameters in SI units, their units)
FORM_SHAPES: dict[str, dict[str, tuple[float, str]]] = {
    "first-order": {"tau": (10e-6, "s")},
    "first-order-decay": {"tau": (47e-6, "s")},
    # equal-part two-stage RC ladder, RC = 10 us: poles at 0.382/RC and 2.618/RC
    # (common practice, no source)
    "two-real-pole": {"tau1": (10e-6 / 0.381966, "s"), "tau2": (10e-6 / 2.618034, "s")},
    "critically-damped": {"tau": (5e-6, "s")},
    "underdamped": {"f0": (10e3, "Hz"), "Q": (3.0, "")},
    "second-order": {"f0": (20e3, "Hz"), "Q": (0.8, "")},
    "three-real-pole": {"tau1": (40e-6, "s"), "tau2": (12e-6, "s"), "tau3": (3e-6, "s")},
    "pole-zero": {"tau_z": (5e-6, "s"), "tau1": (30e-6, "s"), "tau2": (8e-6, "s")},
}
FORM_NAMES = tuple(FORM_SHAPES)


def transfer_function(model: str) -> tuple[np.ndarray, np.ndarray]:
    """H(s) of each form (textbook low-pass / high-pass / lead-lag forms)."""
    p = {k: v for k, (v, _) in FORM_SHAPES[model].items()}
    if model == "first-order":
        return np.array([1.0]), np.array([p["tau"], 1.0])
    if model == "first-order-decay":
        return np.array([p["tau"], 0.0]), np.array([p["tau"], 1.0])
    if model == "critically-damped":
        return np.array([1.0]), np.polymul([p["tau"], 1.0], [p["tau"], 1.0])
    if model in ("underdamped", "second-order"):
        w0 = TWO_PI * p["f0"]
        return np.array([w0 * w0]), np.array([1.0, w0 / p["Q"], w0 * w0])
    if model == "pole-zero":
        return np.array([p["tau_z"], 1.0]), np.polymul([p["tau1"], 1.0], [p["tau2"], 1.0])
    den = np.array([1.0])
    for name in ("tau1", "tau2", "tau3"):
        if name in p:
            den = np.polymul(den, [p[name], 1.0])
    return np.array([1.0]), den


def time_scale(model: str) -> float:
    """The slowest time scale of a form, seconds."""
    p = {k: v for k, (v, _) in FORM_SHAPES[model].items()}
    if "f0" in p:
        return p["Q"] / (math.pi * p["f0"]) if p["Q"] > 0.5 else 1.0 / (TWO_PI * p["f0"] * p["Q"])
    return max(v for k, v in p.items() if k.startswith("tau"))


def unit_step_response(model: str, t_rel: np.ndarray) -> np.ndarray:
    """Normalised step response (0 before the edge) by scipy.signal.step.

    scipy.signal.step starts its clock at T[0], so it runs on a dense uniform
    grid from the edge and is interpolated onto the sample times.
    """
    num, den = transfer_function(model)
    y = np.zeros_like(t_rel, dtype=float)
    after = t_rel >= 0
    if np.any(after):
        grid = np.linspace(0.0, float(t_rel[after].max()), 20001)
        _, y_grid = scipy.signal.step((num, den), T=grid)
        y[after] = np.interp(t_rel[after], grid, y_grid)
    return y


def _estimate(name: str, value: float, unit: str, rel: float = 0.004, determined: bool = True,
              method: str = "covariance") -> Estimate:
    stderr = abs(value) * rel if value != 0 else rel
    if not determined:
        return Estimate(name, value, None, None, unit, "none: not determined by the data", False)
    return Estimate(name, value, stderr, (value - 1.96 * stderr, value + 1.96 * stderr), unit, method)


def _derived_values(model: str) -> dict[str, tuple[float, str]]:
    """Trade quantities of each form by textbook formulas (first-order rise tau ln 9,
    settling tau ln 50, bandwidth 1/(2 pi tau); second-order zeta = 1/(2Q),
    overshoot 100 exp(-pi zeta / sqrt(1 - zeta^2)))."""
    p = {k: v for k, (v, _) in FORM_SHAPES[model].items()}
    if model in ("first-order", "first-order-decay", "critically-damped"):
        tau = p["tau"]
        out = {"tau": (tau, "s"), "bandwidth_3db": (1 / (TWO_PI * tau), "Hz")}
        if model == "first-order":
            out.update(rise_time=(tau * math.log(9), "s"), settling_time_2pct=(tau * math.log(50), "s"))
        if model == "critically-damped":
            out.update(f0=(1 / (TWO_PI * tau), "Hz"), Q=(0.5, ""), zeta=(1.0, ""))
        return out
    if "f0" in p:
        zeta = 1 / (2 * p["Q"])
        out = {"f0": (p["f0"], "Hz"), "Q": (p["Q"], ""), "zeta": (zeta, ""),
               "omega0": (TWO_PI * p["f0"], "rad/s")}
        if zeta < 1:
            out["overshoot"] = (100 * math.exp(-math.pi * zeta / math.sqrt(1 - zeta * zeta)), "%")
        return out
    taus = [p[k] for k in sorted(p) if k.startswith("tau")]
    out = {f"tau{i + 1}": (t, "s") for i, t in enumerate(taus)}
    if len(taus) == 2:
        out["f0"] = (1 / (TWO_PI * math.sqrt(taus[0] * taus[1])), "Hz")
        out["Q"] = (math.sqrt(taus[0] * taus[1]) / (taus[0] + taus[1]), "")
    return out


def make_segments(model: str, *, n_edges: int = 1, baseline: float = 0.1, step: float = 2.5,
                  noise: float = 0.01, n_per_edge: int = 600, seed: int = 0) -> tuple[FittedSegment, ...]:
    """Simulated edges of a square wave: alternating rising/falling, white noise and
    10-bit quantisation over 0-5 V on the data; the noise-free response as "fitted"."""
    rng = np.random.default_rng(seed)
    scale = time_scale(model)
    window = 10.0 * scale
    dt = window / n_per_edge
    lsb = 5.0 / 1024
    segments = []
    for k in range(n_edges):
        direction = 1 if k % 2 == 0 else -1
        edge = (k + 0.1) * window
        t = np.arange(n_per_edge) * dt + k * window
        if model == "first-order-decay":  # jumps by +-step at the edge, then decays back
            clean = baseline + direction * step * unit_step_response(model, t - edge)
        else:
            before, after = (baseline, baseline + step) if direction > 0 else (baseline + step, baseline)
            clean = before + (after - before) * unit_step_response(model, t - edge)
        data = np.round((clean + rng.normal(0.0, noise, t.size)) / lsb) * lsb
        segments.append(FittedSegment(time=t, data=data, fitted=clean, edge_time=edge, direction=direction))
    return tuple(segments)


def make_result(model: str = "underdamped", *, n_edges: int = 1, undetermined: tuple[str, ...] = (),
                components: dict[str, tuple[float, str]] | None = None,
                warnings: tuple[str, ...] = (),
                file: str = "bench/board_017.csv", seed: int = 0) -> FitResult:
    """A FitResult as the engine would fill it, for form ``model``.

    ``undetermined`` names quantities (parameters, derived or components) that
    the data do not determine; they are recorded with determined=False.
    """
    segments = make_segments(model, n_edges=n_edges, seed=seed)
    params: dict[str, Estimate] = {}
    for name, value, unit, rel in (("baseline", 0.1, "V", 0.02), ("step", 2.5, "V", 0.002),
                                   ("t0", segments[0].edge_time, "s", 1e-3)):
        params[name] = _estimate(name, value, unit, rel=rel, determined=name not in undetermined)
    for name, (value, unit) in FORM_SHAPES[model].items():
        params[name] = _estimate(name, value, unit, determined=name not in undetermined,
                                 method="covariance widened x1.35 for correlated residuals")
    derived = {name: _estimate(name, value, unit, rel=0.006, determined=name not in undetermined)
               for name, (value, unit) in _derived_values(model).items()}
    comps = {name: _estimate(name, value, unit, rel=0.01, determined=name not in undetermined)
             for name, (value, unit) in (components or {}).items()}
    residual = np.concatenate([s.residual for s in segments])
    rms = float(np.sqrt(np.mean(residual ** 2)))
    others = [m for m in ("first-order", "two-real-pole", "underdamped", "second-order") if m != model][:2]
    selection = (CandidateScore(model, True, len(params), -8123.4, 0.0, rms, "chosen"),
                 CandidateScore(others[0], True, len(params) - 1, -8071.2, 52.2, rms * 1.4),
                 CandidateScore(others[1], False, len(params) + 1, float("nan"), float("nan"),
                                float("nan"), "did not converge from any start"))
    diag = FitDiagnostics(n_samples=int(residual.size), rms_residual=rms, noise_rms=0.0101,
                          residual_lag1=0.21, effective_samples=residual.size / 1.82,
                          ci_widening=1.35, correction="effective sample size from residual autocorrelation")
    return FitResult(file=file, model=model, parameters=params, derived=derived, selection=selection,
                     selection_reason=f"{model} has the lowest AICc, lower than {others[0]} by 52.2 "
                                      "(margin required: 10)",
                     diagnostics=diag, segments=segments, warnings=tuple(warnings),
                     components=comps)


# -- checks of the simulation the report tests rely on ---------------------------------
