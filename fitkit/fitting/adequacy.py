"""Does the fitted form describe the capture? The adequacy gate.

A least-squares fit always returns numbers, and its intervals always look
tight when the residual variance is small against the signal. They mean
something only when the form describes the data: the residuals must then be
noise. This module decides that from two measurements of the residuals:

* **misfit ratio**: RMS residual per sample over the noise measured in the
  capture (the spread of the settled pre-edge baseline, which includes
  band-limited noise, or the first-difference estimate). Far above 1 means the
  residuals hold more than noise.
* **structure**: where the residuals are large. Noise, white or band-limited,
  is as large where the response is still moving as where it has settled; a
  form that does not describe the response leaves its misfit where the
  response moves. The ratio of the residual RMS up to the point where the
  fitted response stays within 2 % of its swing from the final level (the
  pre-edge baseline and the moving response; a flat baseline the form does
  not follow is misfit too) to that in the settled tail separates the two. Where one of the
  two parts is too short to measure, the residuals' lag-1 autocorrelation
  stands in for it.

* **drift in the settled tail**: a straight line through an edge's residuals
  where the fitted form has settled, weighted by the samples each point holds;
  its change across that tail, against its standard error (widened for the
  residuals' own lag-1 autocorrelation, Bartlett's large-lag factor
  (1 + r) / (1 - r); Box, Jenkins & Reinsel, Time Series Analysis, ch. 2, from
  memory) and against the fitted swing.

A fit is refused ("does not describe the capture") when the misfit ratio
exceeds :data:`MISFIT_RATIO` and the residual is structured (larger where the
response moves, or larger where the fitted form has settled but the data have
not), or whatever its shape when the ratio exceeds :data:`MISFIT_CEILING`
(:data:`MISFIT_CEILING_BASELINE` when the noise was measured on the baselines), or
whatever the ratio when the data still move where the fitted form has settled
by more than :data:`DRIFT_SHARE_REFUSED` of the swing and :data:`DRIFT_Z`
standard errors: a record that ends before a slow part of the response
settles, which a fast form fits within the noise (a real series RL cut 0.2
time constants after its edge was read as a 1.5 MHz ringing this way). A
smaller drift, over :data:`DRIFT_SHARE` of the swing, is a warning
(``drift_warning``): a slow creep the form leaves out, as a lossy capacitor
or a mis-compensated probe gives (the real home-made foil capacitor of the
corpus creeps 4 % of its step after its time constant has settled). The thresholds come
from ../shared/reference/real-captures (benchmarks/study_real_captures.py): the
fits whose forms were right left 1.0 to 1.9x the noise, or 2.5x unstructured;
those whose forms were wrong left 7x to 340x, and the ladder's two-pole fit
without its dead time (a second time constant twice the stated one, its
interval excluding it) 2.6x, strongly structured (3.6). A correct form under
band-limited noise measured by differences alone can show a high ratio, but not
a structured one, so it is not refused.
"""

from __future__ import annotations

import math
import numpy as np

from ..results import Adequacy, EdgeAdequacy
from ..units import format_value

#: RMS residual above this multiple of the noise is "far above the noise".
MISFIT_RATIO = 2.0
#: RMS residual above this multiple of the noise earns a warning even when the form is kept
#: (fitkit.fitting.step_fit), and another reading of an output-only capture
#: (fitkit.fitting.one_response).
STRUCTURE_RATIO = 1.5
#: Moving-part residual RMS above this multiple of the quiet part's is structure.
ACTIVE_TO_QUIET = 1.6
#: RMS residual above this multiple of the noise is misfit whatever its shape (common practice,
#: no source): the noise of an edge with a short baseline is the channel's sample-to-sample
#: estimate, which band-limited noise makes several times too low ...
MISFIT_CEILING = 10.0
#: ... and this multiple when every edge's noise is the spread of its settled baseline, which
#: holds band-limited noise too. In ../shared/reference/real-captures the right forms left at
#: most 2.5x, the wrong ones 7x and more; a first-order form fitted to the rise of a simulated
#: band-pass response (Q = 1, the return cut off by the window) left 6.3x spread evenly.
MISFIT_CEILING_BASELINE = 5.0
#: Lag-1 autocorrelation above this is structure when the parts cannot be compared.
LAG1_STRUCTURED = 0.5
#: A part needs at least this many points to be measured.
MIN_PART_POINTS = 8
#: A point is in the moving part when the fitted response is further than this
#: fraction of the step from its final level (after the edge).
MOVING_FRACTION = 0.02
#: A settled tail whose residual moves by more than this share of the fitted swing ...
DRIFT_SHARE = 0.02
#: ... and by more than this many standard errors still moves (common practice, no source):
#: a warning, and a refusal when it moves by more than this share of the swing.
DRIFT_Z = 5.0
DRIFT_SHARE_REFUSED = 0.1


def capture_noise(segments) -> float:
    """The output noise of a capture (V rms) that residuals are compared with: the median of its
    segments' estimates, NaN when none."""
    noises = [s.noise_rms for s in segments if math.isfinite(s.noise_rms) and s.noise_rms > 0]
    return float(np.median(noises)) if noises else math.nan


def _rms(x: np.ndarray, counts: np.ndarray) -> float:
    """RMS per sample of bin-mean residuals ``x`` already scaled by sqrt(counts)."""
    n = float(np.sum(counts))
    return math.sqrt(float(np.sum(x * x)) / n) if n > 0 else math.nan


def edge_residuals(ff) -> list[EdgeAdequacy]:
    """Per-edge residual RMS (V per sample), overall, moving and quiet, of a FormFit."""
    joint, fit = ff.joint, ff.fit
    sc = joint.scaling
    weighted = joint.split(joint.weights * fit.residual)
    fitted = joint.split(fit.fitted)
    out = []
    for seg, d, r, f in zip(joint.segments, joint.data, weighted, fitted):
        counts = np.asarray(d.counts, dtype=float)
        after = d.t_point >= 0
        tail = f[after]   # the final level from the response's own end (not the pre-edge baseline)
        final = float(np.mean(tail[-max(3, tail.size // 20):])) if tail.size else float(f[-1])
        span = float(np.ptp(f)) or 1.0
        outside = after & (np.abs(f - final) > MOVING_FRACTION * span)
        # moving: from the edge until the fitted response enters its settling band for good
        # (a ringing response crosses its final level many times before it settles)
        last = int(np.flatnonzero(outside)[-1]) if outside.any() else -1
        quiet = after & (np.arange(f.size) > last)
        moving = ~quiet
        part = (lambda m: _rms(r[m], counts[m]) * sc.volt_unit
                if np.count_nonzero(m) >= MIN_PART_POINTS else math.nan)
        drift, z = _tail_drift(d.t_point[quiet], r[quiet] / np.sqrt(counts[quiet]), counts[quiet])
        out.append(EdgeAdequacy(seg.edge_time, _rms(r, counts) * sc.volt_unit, part(moving), part(quiet),
                                abs(drift) / span, z))
    return out


def _tail_drift(t: np.ndarray, residual: np.ndarray, counts: np.ndarray) -> tuple[float, float]:
    """(change across the span of ``t``, that change in standard errors) of a straight line
    through bin-mean ``residual``s weighted by their sample ``counts``; NaNs when there are
    fewer than 2 x MIN_PART_POINTS points."""
    if t.size < 2 * MIN_PART_POINTS:
        return math.nan, math.nan
    w = counts / counts.sum()
    tm, rm = float(w @ t), float(w @ residual)
    sxx = float(counts @ (t - tm) ** 2)
    if not sxx > 0:
        return math.nan, math.nan
    slope = float(counts @ ((t - tm) * (residual - rm))) / sxx
    left = residual - rm - slope * (t - tm)
    per_sample = float(counts @ left ** 2) / (t.size - 2)
    lag1 = float(np.corrcoef(left[:-1], left[1:])[0, 1]) if np.std(left) > 0 else 0.0
    lag1 = min(max(lag1 if math.isfinite(lag1) else 0.0, 0.0), 0.95)
    se = math.sqrt(per_sample / sxx * (1.0 + lag1) / (1.0 - lag1))
    change = slope * float(np.ptp(t))
    return change, (abs(slope) / se if se > 0 else math.inf)


def assess(ff, noise_rms: float, lag1: float) -> Adequacy:
    """The adequacy of a converged FormFit against the capture's noise (V rms).

    ``lag1``: the residuals' lag-1 autocorrelation (from the correction step).
    """
    edges = edge_residuals(ff)
    rms = math.sqrt(ff.fit.rss / max(ff.fit.n, 1)) * ff.joint.scaling.volt_unit
    ratio = rms / noise_rms if math.isfinite(noise_rms) and noise_rms > 0 else math.nan
    moving = [e.moving_rms for e in edges if math.isfinite(e.moving_rms)]
    quiet = [e.quiet_rms for e in edges if math.isfinite(e.quiet_rms)]
    structure = (math.sqrt(np.mean(np.square(moving))) / math.sqrt(np.mean(np.square(quiet)))
                 if moving and quiet and min(quiet) > 0 else math.nan)
    if math.isfinite(structure):
        # misfit where the response moves, or where the fitted form has settled and the data have not
        structured = structure > ACTIVE_TO_QUIET or structure < 1.0 / ACTIVE_TO_QUIET
    else:
        structured = math.isfinite(lag1) and lag1 > LAG1_STRUCTURED
    drifting = [e for e in edges if e.quiet_drift_share > DRIFT_SHARE_REFUSED and e.quiet_drift_z > DRIFT_Z]
    segments = getattr(ff.joint, "segments", ())
    on_baselines = bool(segments) and all(seg.noise_on_baseline for seg in segments)
    ceiling = MISFIT_CEILING_BASELINE if on_baselines else MISFIT_CEILING
    describes = not (math.isfinite(ratio) and (ratio > ceiling or (ratio > MISFIT_RATIO and structured)))
    finding = ""
    if describes and drifting:
        describes, worst = False, max(drifting, key=lambda e: e.quiet_drift_share)
        finding = (f"the {ff.form.name} form does not describe this capture: where it has settled, the data "
                   f"still move (by {100 * worst.quiet_drift_share:.0f} % of the step after the edge at "
                   f"{format_value(worst.edge_time, 's')}, {worst.quiet_drift_z:.0f} standard errors); the record "
                   "may end before a slower part of the response settles; its numbers are not measurements")
    elif not describes:
        if math.isfinite(structure) and structure > ACTIVE_TO_QUIET:
            where = f"{structure:.1f} times larger where the response moves than where it is quiet"
        elif math.isfinite(structure) and structure < 1.0 / ACTIVE_TO_QUIET:
            where = f"{1.0 / structure:.1f} times larger where the fitted form has settled than where it moves"
        elif math.isfinite(lag1) and lag1 > LAG1_STRUCTURED:
            where = f"correlated from sample to sample (lag-1 {lag1:.2f})"
        else:
            where = "far above what any noise in the capture explains"
        finding = (f"the {ff.form.name} form does not describe this capture: its residuals are "
                   f"{ratio:.1f} times the noise and {where}; its numbers are not measurements")
    return Adequacy(describes, ratio, structure, structured, finding, (), tuple(edges))


def drift_warning(adequacy: Adequacy, form_name: str) -> str:
    """A warning for a settled tail that still creeps (over DRIFT_SHARE of the swing and DRIFT_Z
    standard errors) in a fit that describes its capture; "" when none does."""
    creeping = [e for e in adequacy.edges if e.quiet_drift_share > DRIFT_SHARE and e.quiet_drift_z > DRIFT_Z]
    if not adequacy.describes_data or not creeping:
        return ""
    worst = max(creeping, key=lambda e: e.quiet_drift_share)
    return (f"where the {form_name} form has settled, the data still creep by {100 * worst.quiet_drift_share:.0f} % "
            f"of the step ({worst.quiet_drift_z:.0f} standard errors, after the edge at "
            f"{format_value(worst.edge_time, 's')}): "
            "a slower part of the response that the form leaves out (a lossy capacitor, a mis-compensated "
            "probe, a record that ends early) biases its time constants by more than their intervals show; "
            "check the probe's compensation, or capture longer after each edge")
