"""Result records shared by fitting, circuits, check and report.

These are the contract between the computing layers and the reporting layers:
computation fills them, report/ renders them, nothing here computes or plots.
All are frozen dataclasses with ``to_dict()`` returning plain JSON-ready types
(floats, strings, lists, dicts; NaN and inf become None).

The JSON shape of a fit (see README "JSON output") is::

    {"file": ..., "model": NAME,
     "parameters": {NAME: {"value": x, "stderr": s, "ci95": [lo, hi], "unit": u, ...}},
     "derived": {NAME: {...same...}},
     "selection": [...], "warnings": [...], ...}
"""

from __future__ import annotations

import dataclasses
import math
from dataclasses import dataclass, field
from typing import Any, Mapping

import numpy as np

from .errors import ArgumentError, QuantityError


def json_number(x: Any) -> float | None:
    """A float for JSON: NaN, inf and None become None."""
    if x is None:
        return None
    x = float(x)
    return x if math.isfinite(x) else None


@dataclass(frozen=True)
class Estimate:
    """One estimated quantity with its uncertainty.

    Attributes
    ----------
    name: trade name ("tau", "f0", "Q", "C2", ...).
    value: best estimate in SI units.
    stderr: standard error (SI units), None when not available.
    ci95: (low, high) 95 % confidence interval in SI units, None when the
        quantity is not determined by the data.
    unit: SI unit string ("s", "Hz", "V", "F", "" for dimensionless).
    interval_method: plain words on how ci95 was obtained, e.g.
        "covariance", "profile likelihood", "covariance widened x1.6 for
        correlated residuals".
    determined: False when the data do not determine this quantity; it must
        then never be shown as if it were measured.
    """

    name: str
    value: float
    stderr: float | None = None
    ci95: tuple[float, float] | None = None
    unit: str = ""
    interval_method: str = "covariance"
    determined: bool = True

    def contains(self, truth: float) -> bool:
        """True when ``truth`` lies inside the 95 % interval."""
        return self.ci95 is not None and self.ci95[0] <= truth <= self.ci95[1]

    def to_dict(self) -> dict[str, Any]:
        return {
            "value": json_number(self.value),
            "stderr": json_number(self.stderr),
            "ci95": None if self.ci95 is None else [json_number(self.ci95[0]), json_number(self.ci95[1])],
            "unit": self.unit,
            "interval_method": self.interval_method,
            "determined": bool(self.determined),
        }


#: Quantity names of earlier releases, still accepted by FitResult.quantity: a zero's time
#: constant was "tz" (now "tau_z" like every other time constant); a circuit fit's time
#: constants were "tau_slow", "tau_fast", "tau_slowest" (now named as the forms name them) and
#: its circuit's DC gain "dc_gain" (now "circuit_dc_gain", apart from the measured "gain").
OLDER_NAMES = {"tz": "tau_z", "tau_slow": "tau1", "tau_fast": "tau2", "tau_slowest": "tau_dominant",
               "dc_gain": "circuit_dc_gain"}


@dataclass(frozen=True)
class CandidateScore:
    """How one candidate form fared in model selection.

    ``criterion`` is the information criterion value (lower is better) and
    ``delta`` its difference from the chosen form's (ΔAICc, JSON ``delta_aicc``;
    bigger = worse fit).
    """

    model: str
    converged: bool
    n_parameters: int
    criterion: float
    delta: float
    rms_residual: float
    note: str = ""

    def to_dict(self) -> dict[str, Any]:
        return {"model": self.model, "converged": self.converged, "n_parameters": self.n_parameters,
                "criterion": json_number(self.criterion), "delta_aicc": json_number(self.delta),
                "rms_residual": json_number(self.rms_residual), "note": self.note}


@dataclass(frozen=True)
class FitDiagnostics:
    """Residual diagnostics of a fit.

    rms_residual and noise_rms are in the output channel's unit (V).
    residual_lag1 is the lag-1 autocorrelation of the residuals.
    ci_widening is the factor applied to covariance intervals to account for
    correlated residuals (1.0 when none), described in ``correction``.
    n_parameters: the parameters the engine fitted (shape, levels, edge times and
    delays), the count its criterion uses (fitkit.fitting.information.corrected_aic);
    every caller that scores fits reads it here.
    """

    n_samples: int
    rms_residual: float
    noise_rms: float
    residual_lag1: float
    effective_samples: float
    ci_widening: float
    correction: str
    structured_residual: bool = False
    criterion_name: str = "AICc"
    n_parameters: int = 0

    def to_dict(self) -> dict[str, Any]:
        return {"n_samples": self.n_samples, "n_parameters": self.n_parameters,
                "rms_residual": json_number(self.rms_residual),
                "noise_rms": json_number(self.noise_rms), "residual_lag1": json_number(self.residual_lag1),
                "effective_samples": json_number(self.effective_samples),
                "ci_widening": json_number(self.ci_widening), "correction": self.correction,
                "structured_residual": self.structured_residual, "criterion": self.criterion_name}


@dataclass(frozen=True)
class EdgeAdequacy:
    """The residuals of one edge: RMS per sample (V) overall, before the fitted response
    settles (baseline and moving response) and in the settled tail (quiet); and how far the
    residual moves across the quiet tail (a straight line through it), as a share of the
    fitted response's swing and in standard errors (NaN when the tail is too short)."""

    edge_time: float
    rms: float
    moving_rms: float
    quiet_rms: float
    quiet_drift_share: float = math.nan
    quiet_drift_z: float = math.nan

    def to_dict(self) -> dict[str, Any]:
        return {"edge_time": json_number(self.edge_time), "rms": json_number(self.rms),
                "moving_rms": json_number(self.moving_rms), "quiet_rms": json_number(self.quiet_rms),
                "quiet_drift_share": json_number(self.quiet_drift_share),
                "quiet_drift_z": json_number(self.quiet_drift_z)}


@dataclass(frozen=True)
class Adequacy:
    """Whether a fit describes its capture, and what would, when it does not.

    describes_data: False when the residuals are far above the noise and structured.
    misfit_ratio: RMS residual per sample over the noise RMS (NaN when the noise is unknown).
    structure_ratio: moving-part over quiet-part residual RMS (NaN when a part is too short).
    structured: the residuals show structure (see the module docstring).
    finding: plain words for the top of the output ("" when the form describes the data).
    fixes: what fitkit computed would work (another form, channel, window), each
        one line with the option to give; filled by the caller that tried them.
    edges: per-edge residual RMS, moving and quiet.
    """

    describes_data: bool
    misfit_ratio: float
    structure_ratio: float
    structured: bool
    finding: str = ""
    fixes: tuple[str, ...] = ()
    edges: tuple[EdgeAdequacy, ...] = ()

    def to_dict(self) -> dict[str, Any]:
        return {"describes_data": self.describes_data, "misfit_ratio": json_number(self.misfit_ratio),
                "structure_ratio": json_number(self.structure_ratio), "structured": self.structured,
                "finding": self.finding, "fixes": list(self.fixes),
                "edges": [e.to_dict() for e in self.edges]}


@dataclass(frozen=True)
class FittedSegment:
    """Data and fitted curve of one edge, for plots and residual checks.

    time in seconds (absolute capture time), data and fitted in volts.
    """

    time: np.ndarray
    data: np.ndarray
    fitted: np.ndarray
    edge_time: float
    direction: int  # +1 rising, -1 falling

    @property
    def residual(self) -> np.ndarray:
        return self.data - self.fitted


def _units_swapped(d: Any, unit: str) -> Any:
    """A JSON-ready structure with every ``"unit": "V"`` entry changed to ``unit``."""
    if isinstance(d, dict):
        return {k: (unit if k == "unit" and v == "V" else _units_swapped(v, unit)) for k, v in d.items()}
    if isinstance(d, list):
        return [_units_swapped(v, unit) for v in d]
    return d


@dataclass(frozen=True)
class ChannelRoles:
    """Which channel drove the model and which was fitted, and why (plain words)."""

    input: str | None
    output: str
    why: tuple[str, ...] = ()

    def to_dict(self) -> dict[str, Any]:
        return {"input": self.input, "output": self.output, "why": list(self.why)}


@dataclass(frozen=True)
class FitDetails:
    """How the engine made a fit, as the reports show it.

    form_summary: the form's one-line description.
    mode: "measured input" (the input channel drives the model) or "ideal step".
    edges: per edge fitted jointly, its level estimates by name ("t0" s,
        "baseline" and "step" in the output unit, "gain").
    bin_size: the widest bin of samples averaged into one fitted point (1: none).
    binning: plain words on that binning ("" when no samples were averaged).
    output_unit: the fitted channel's unit ("V", "counts", or "").
    channels: the channels' roles (None when the fit was given segments, not a capture).
    drive_period: seconds between the drive's edges of a square wave (None otherwise).
    """

    form_summary: str = ""
    mode: str = ""
    edges: tuple[Mapping[str, Estimate], ...] = ()
    bin_size: int = 1
    binning: str = ""
    output_unit: str = "V"
    channels: ChannelRoles | None = None
    drive_period: float | None = None

    def with_output_unit(self, unit: str) -> "FitDetails":
        swap = (lambda e: dataclasses.replace(e, unit=unit) if e.unit == "V" else e)  # noqa: E731
        return dataclasses.replace(self, output_unit=unit,
                                   edges=tuple({k: swap(e) for k, e in edge.items()} for edge in self.edges))

    def to_dict(self) -> dict[str, Any]:
        d: dict[str, Any] = {"form_summary": self.form_summary,
                             "edges": [{k: e.to_dict() for k, e in edge.items()} for edge in self.edges],
                             "mode": self.mode, "bin_size": self.bin_size}
        if self.binning:
            d["binning"] = self.binning
        if self.output_unit != "V":
            d["output_unit"] = self.output_unit
        if self.channels is not None:
            d["channels"] = self.channels.to_dict()
        if self.drive_period is not None:
            d["drive_period"] = json_number(self.drive_period)
        return d


@dataclass(frozen=True)
class CircuitDetails:
    """What a fit in part values (fitkit.part_values) adds, as JSON-ready parts.

    circuit: its name; unknowns: the parts asked for; held: known parts (SI).
    solutions: every set of part values that fits (dicts: "values", ...), best first.
    identifiability, preferred, determination, chain_effect, measurement_chain,
    behavioural_route, routes_comparison: the part fit's own reports (dicts).
    routes_agree: whether the behavioural and the direct route agree (None: one route).
    level_model: plain words on the levels fitted.
    rss (V^2), aicc, n_samples, n_parameters: the best direct fit's score.
    """

    circuit: str
    form_summary: str
    unknowns: tuple[str, ...] = ()
    held: Mapping[str, Any] = field(default_factory=dict)
    solutions: tuple[Mapping[str, Any], ...] = ()
    identifiability: Mapping[str, Any] = field(default_factory=dict)
    preferred: Mapping[str, Any] = field(default_factory=dict)
    determination: Mapping[str, Any] = field(default_factory=dict)
    chain_effect: Mapping[str, Any] | None = None
    measurement_chain: Mapping[str, Any] = field(default_factory=dict)
    behavioural_route: Mapping[str, Any] | None = None
    routes_agree: bool | None = None
    routes_comparison: Mapping[str, Any] = field(default_factory=dict)
    level_model: str = ""
    rss: float = float("nan")
    aicc: float = float("nan")
    n_samples: int = 0
    n_parameters: int = 0

    def with_output_unit(self, unit: str) -> "CircuitDetails":
        route = None if self.behavioural_route is None else _units_swapped(dict(self.behavioural_route), unit)
        return dataclasses.replace(self, behavioural_route=route)

    def to_dict(self) -> dict[str, Any]:
        return {"form_summary": self.form_summary, "circuit": self.circuit, "unknowns": list(self.unknowns),
                "held": dict(self.held), "solutions": [dict(s) for s in self.solutions],
                "identifiability": dict(self.identifiability), "preferred": dict(self.preferred),
                "determination": dict(self.determination), "chain_effect": self.chain_effect,
                "measurement_chain": dict(self.measurement_chain), "behavioural_route": self.behavioural_route,
                "routes_agree": self.routes_agree, "routes_comparison": dict(self.routes_comparison),
                "level_model": self.level_model, "rss": json_number(self.rss), "aicc": json_number(self.aicc),
                "n_samples": self.n_samples, "n_parameters": self.n_parameters}


@dataclass(frozen=True)
class FitResult:
    """Everything a fit found: the chosen form, parameters, derived quantities,
    selection evidence, diagnostics and warnings.

    ``components`` is filled when a circuit was given (part name -> Estimate),
    with ``circuit`` (CircuitDetails) saying how; ``details`` (FitDetails) says
    how the engine made the fit. Reports read both by attribute; the JSON puts
    them under "extra".
    """

    file: str
    model: str
    parameters: Mapping[str, Estimate]
    derived: Mapping[str, Estimate]
    selection: tuple[CandidateScore, ...] = ()
    selection_reason: str = ""
    diagnostics: FitDiagnostics | None = None
    segments: tuple[FittedSegment, ...] = ()
    warnings: tuple[str, ...] = ()
    components: Mapping[str, Estimate] = field(default_factory=dict)
    details: FitDetails = field(default_factory=FitDetails)
    circuit: CircuitDetails | None = None
    #: whether the form describes the capture (see fitkit.fitting.adequacy); None when not assessed
    adequacy: Adequacy | None = None

    @property
    def describes_data(self) -> bool:
        """False when the fitted form does not describe the capture: its numbers are then not measurements."""
        return self.adequacy is None or self.adequacy.describes_data

    def quantity(self, name: str) -> Estimate:
        """A parameter, derived quantity or component by name.

        Raises QuantityError (a KeyError and a ValueError) naming the known quantities."""
        if not isinstance(name, str):
            raise ArgumentError(f"quantity: a name is text, not {type(name).__name__}")
        name = OLDER_NAMES.get(name, name)
        for table in (self.parameters, self.derived, self.components):
            if name in table:
                return table[name]
        known = sorted(set(self.parameters) | set(self.derived) | set(self.components))
        raise QuantityError(f"quantity: no quantity {name!r} in this result; known: {', '.join(known)}")

    @property
    def output_unit(self) -> str:
        """Unit of the fitted output channel ("V", "counts", or "" when the file gave none)."""
        return self.details.output_unit

    def with_binning(self, n_samples: int) -> "FitResult":
        """The same result saying how ``n_samples`` raw samples were averaged into the
        points fitted (details.binning), when they were."""
        bin_size = int(self.details.bin_size or 1)
        fitted = self.diagnostics.n_samples if self.diagnostics is not None else None
        if bin_size <= 1 or not fitted or fitted >= n_samples:
            return self
        text = (f"{n_samples:,} samples averaged into {fitted:,} bins of up to {bin_size:,} samples "
                "(narrow at each edge, wider where the response is slow; each bin's model is the mean "
                "of the model over its samples)")
        return dataclasses.replace(self, details=dataclasses.replace(self.details, binning=text))

    def with_output_unit(self, unit: str) -> "FitResult":
        """The same result with its levels (baseline, step, residuals) in ``unit``
        instead of volts: a channel with no unit, or in raw counts, is never called volts."""
        if unit == "V":
            return self

        def swap(e: Estimate) -> Estimate:
            return dataclasses.replace(e, unit=unit) if e.unit == "V" else e

        rms = f" {unit} rms" if unit else " rms"
        warnings = tuple(w.replace(" V rms", rms) for w in self.warnings)
        return dataclasses.replace(self, parameters={k: swap(v) for k, v in self.parameters.items()},
                                   derived={k: swap(v) for k, v in self.derived.items()},
                                   details=self.details.with_output_unit(unit),
                                   circuit=None if self.circuit is None else self.circuit.with_output_unit(unit),
                                   warnings=warnings)

    def to_dict(self) -> dict[str, Any]:
        """Plain JSON-ready types. When the form does not describe the capture every
        quantity has ``ci95`` None and ``determined`` False (its value is kept for
        diagnosis), and ``adequacy`` says why."""
        def table(estimates: Mapping[str, Estimate]) -> dict[str, Any]:
            out = {k: v.to_dict() for k, v in estimates.items()}
            if not self.describes_data:
                for entry in out.values():
                    entry.update(ci95=None, determined=False,
                                 interval_method="none: the form does not describe the capture")
            return out

        d: dict[str, Any] = {
            "file": self.file,
            "model": self.model,
            "describes_data": self.describes_data,
            "parameters": table(self.parameters),
            "derived": table(self.derived),
            "selection": [c.to_dict() for c in self.selection],
            "selection_reason": self.selection_reason,
            "diagnostics": None if self.diagnostics is None else self.diagnostics.to_dict(),
            "warnings": list(self.warnings),
        }
        if self.components:
            d["components"] = table(self.components)
        extra = {**self.details.to_dict(), **({} if self.circuit is None else self.circuit.to_dict())}
        if extra != FitDetails().to_dict():
            d["extra"] = extra
        if self.adequacy is not None:
            d["adequacy"] = self.adequacy.to_dict()
        return d

    # -- views, handed off to fitkit.report (imported only when used) ---------------
    def to_frame(self):
        """The quantities as a pandas DataFrame, one row per quantity: kind, name,
        value, stderr, ci95_low, ci95_high (SI units), unit, determined."""
        from .report.csv_out import quantity_frame
        return quantity_frame(self)

    def plot(self, ax=None, path=None, **options):
        """Plot the capture, fitted response and residuals; returns
        (figure, (data_axes, residual_axes)). See fitkit.report.plots.plot_fit."""
        from .report.plots import plot_fit
        return plot_fit(self, path=path, ax=ax, **options)

    def _repr_html_(self) -> str:
        """Notebook view: the report's tables and figure (PNG) as an HTML fragment."""
        from .report.html import render_html_fragment
        return render_html_fragment(self, figure_format="png")
