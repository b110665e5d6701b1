"""What the store keeps of one capture, built from a result's ``to_dict()`` JSON.

The store reads the published JSON of a fit (FitResult.to_dict) or a board
check (CheckResult.to_dict), never the result objects' attributes, so it
keeps working while those classes change inside. Every value is in SI units.
"""

from __future__ import annotations

import json
import math
from dataclasses import dataclass, field
from datetime import datetime
from typing import Any, Mapping

from .. import __version__

QUANTITY, PART, COMPONENT = "quantity", "part", "component"


@dataclass(frozen=True)
class CaptureFacts:
    """Where a capture came from, told by the file and the bench rather than the analysis.

    file_name: the path as the user named it; file_sha256: SHA-256 of its bytes (hex).
    board_serial: the board's serial (None when neither the name nor the header gives one);
    serial_source: where it came from, in plain words.
    captured_at: when the capture was made, by the bench's clock (naive datetime);
    time_source: where that came from. fixture: the test fixture's name.
    """

    file_name: str
    file_sha256: str
    board_serial: str | None
    serial_source: str
    captured_at: datetime | None
    time_source: str
    fixture: str


@dataclass(frozen=True)
class StoredValue:
    """One measured value of a capture (SI units; None where not determined)."""

    kind: str
    name: str
    value: float | None
    ci_low: float | None
    ci_high: float | None
    unit: str
    determined: bool
    limit_low: float | None = None
    limit_high: float | None = None
    nominal: float | None = None
    verdict: str | None = None

    def row(self) -> dict[str, Any]:
        return {"kind": self.kind, "name": self.name, "value": self.value, "ci_low": self.ci_low,
                "ci_high": self.ci_high, "unit": self.unit, "determined": self.determined,
                "limit_low": self.limit_low, "limit_high": self.limit_high, "nominal": self.nominal,
                "verdict": self.verdict}


@dataclass(frozen=True)
class StoredCapture:
    """One capture's row and its values, ready to append.

    analysis: the analysis identity ("design <sha256>" or "fit <form>"); with
    facts.file_sha256 it is the key that makes appends idempotent.
    """

    facts: CaptureFacts
    analysis: str
    design_name: str | None
    design_sha256: str | None
    status: str
    verdict: str | None
    model: str | None
    reason: str
    warnings: tuple[str, ...]
    values: tuple[StoredValue, ...] = field(default_factory=tuple)
    fitkit_version: str = __version__

    def row(self, stored_at: datetime) -> dict[str, Any]:
        f = self.facts
        return {"file_sha256": f.file_sha256, "analysis": self.analysis, "design_name": self.design_name,
                "design_sha256": self.design_sha256, "board_serial": f.board_serial,
                "serial_source": f.serial_source, "captured_at": f.captured_at, "time_source": f.time_source,
                "fixture": f.fixture, "file_name": f.file_name, "status": self.status, "verdict": self.verdict,
                "model": self.model, "reason": self.reason[:4000], "warnings": json.dumps(list(self.warnings)),
                "fitkit_version": self.fitkit_version, "stored_at": stored_at}


def analysis_identity(design_sha256: str | None, model: str | None) -> str:
    """The analysis part of the idempotency key: the design file's hash, or the form fitted."""
    return f"design {design_sha256}" if design_sha256 else f"fit {model or 'auto'}"


def _number(x: Any) -> float | None:
    try:
        v = float(x)
    except (TypeError, ValueError):
        return None
    return v if math.isfinite(v) else None


def _pair(p: Any) -> tuple[float | None, float | None]:
    if isinstance(p, (list, tuple)) and len(p) == 2:
        return _number(p[0]), _number(p[1])
    return None, None


def _estimates(table: Mapping[str, Any] | None, kind: str, judged: Mapping[str, Any]) -> list[StoredValue]:
    """StoredValues from a name -> Estimate.to_dict() table; limits from the check's judged quantities."""
    out = []
    for name, est in (table or {}).items():
        if not isinstance(est, Mapping):
            continue
        lo, hi = _pair(est.get("ci95"))
        verdict_entry = judged.get(name) if isinstance(judged.get(name), Mapping) else {}
        lim_lo, lim_hi = _pair(verdict_entry.get("limits"))
        out.append(StoredValue(kind, str(name), _number(est.get("value")), lo, hi, str(est.get("unit") or ""),
                               bool(est.get("determined", True)), lim_lo, lim_hi,
                               _number(verdict_entry.get("nominal")), verdict_entry.get("verdict")))
    return out


def _parts(components: Mapping[str, Any] | None) -> list[StoredValue]:
    """StoredValues from a check's per-part verdicts (by designator)."""
    out = []
    for name, part in (components or {}).items():
        if not isinstance(part, Mapping):
            continue
        lo, hi = _pair(part.get("ci95"))
        band_lo, band_hi = _pair(part.get("tolerance_band"))
        value = _number(part.get("value"))
        out.append(StoredValue(PART, str(name), value, lo, hi, str(part.get("unit") or ""),
                               value is not None and lo is not None, band_lo, band_hi,
                               _number(part.get("nominal")), part.get("verdict")))
    return out


def _values(result: Mapping[str, Any]) -> list[StoredValue]:
    """Every value in a fit's or a check's to_dict() JSON (a check holds its fit under "fit")."""
    is_check = isinstance(result.get("fit"), Mapping)
    fit = result["fit"] if is_check else result
    judged = result.get("quantities") if is_check and isinstance(result.get("quantities"), Mapping) else {}
    seen: set[tuple[str, str]] = set()
    values = []
    candidates = (_estimates(fit.get("parameters"), QUANTITY, judged)
                  + _estimates(fit.get("derived"), QUANTITY, judged)
                  + _estimates(fit.get("components"), COMPONENT, {})
                  + (_parts(result.get("components")) if is_check else []))
    for v in candidates:
        if (v.kind, v.name) not in seen:  # a parameter wins over a derived quantity of the same name
            seen.add((v.kind, v.name))
            values.append(v)
    return values


def entry_from_result(result: Mapping[str, Any], facts: CaptureFacts, *, status: str | None = None,
                      design_sha256: str | None = None, model_setting: str | None = None,
                      reason: str = "") -> StoredCapture:
    """The store entry of a fitted or checked capture, from the result's to_dict() JSON.

    status: the batch status (defaults to the check's verdict, or "fitted").
    design_sha256: SHA-256 of the design file (check mode); model_setting: the
    form asked for in fit mode ("auto" when chosen per capture).
    """
    is_check = isinstance(result.get("fit"), Mapping)
    fit = result["fit"] if is_check else result
    verdict = result.get("verdict") if is_check else None
    warnings = [str(w) for w in (result.get("warnings") or fit.get("warnings") or [])]
    return StoredCapture(
        facts=facts, analysis=analysis_identity(design_sha256 if is_check else None, model_setting),
        design_name=str(result.get("design")) if is_check and result.get("design") else None,
        design_sha256=design_sha256 if is_check else None,
        status=status or verdict or "fitted", verdict=verdict, model=fit.get("model"),
        reason=reason or (str(result.get("summary") or "") if is_check else ""),
        warnings=tuple(warnings), values=tuple(_values(result)))


def entry_without_result(facts: CaptureFacts, status: str, reason: str, *, design_name: str | None = None,
                         design_sha256: str | None = None, model_setting: str | None = None) -> StoredCapture:
    """The store entry of a capture that yielded nothing to measure (no step, fit failed, unreadable)."""
    return StoredCapture(facts=facts, analysis=analysis_identity(design_sha256, model_setting),
                         design_name=design_name, design_sha256=design_sha256, status=status, verdict=None,
                         model=None, reason=reason, warnings=())
