"""Trends of a line as text and as a table (one row per quantity), for the terminal and for CSV."""

from __future__ import annotations

from typing import Any, Sequence

from ..trends.analysis import QuantityTrend
from ..trends.phases import ChartSettings
from ..units import format_value


def settings_text(settings: ChartSettings, window: int) -> str:
    """The detection parameters in one sentence (every report states them)."""
    return (f"limits from the process: each phase's first {settings.baseline} boards (centre +- 2.66 x mean "
            f"moving range); EWMA lambda {settings.ewma_lambda:g}, limits +-{settings.ewma_l:g} sigma; "
            f"tabular CUSUM k {settings.cusum_k:g} sigma, h {settings.cusum_h:g} sigma; Cpk and Ppk "
            f"(ISO 22514) over all boards and the last {window}; projection over the last {window} boards")


def _number(x: float | None, digits: int = 3) -> str:
    return "n/a" if x is None else f"{x:.{digits}g}"


def drift_text(trend: QuantityTrend) -> str:
    """Where the first drift was found, in a few words."""
    first = trend.first_detection
    if first is None:
        return "none"
    more = len(trend.detections) - 1
    return (f"{first['direction']} at board {first['serial']} ({'+'.join(first['methods'])})"
            + (f", {more} more" if more > 0 else ""))


def projection_text(trend: QuantityTrend) -> str:
    """Where the latest boards' mean is heading, in plain words."""
    p = trend.projection
    if p is None:
        return "too few boards"
    rate = format_value(p.slope_per_board, trend.unit, 3) + " per board"
    if not p.significant:
        return f"no significant trend ({rate})"
    if p.limit is None:
        return f"trend {rate}, no limit on that side"
    if p.boards_to_limit == 0:
        return f"trend {rate}; the mean is already beyond {format_value(p.limit, trend.unit, 4)}"
    hours = "" if p.hours_to_limit is None else f", about {p.hours_to_limit:.0f} h"
    return (f"trend {rate}; reaches {format_value(p.limit, trend.unit, 4)} in about "
            f"{p.boards_to_limit:.0f} boards{hours}")


def repeatability_text(trend: QuantityTrend) -> str:
    r = trend.repeatability
    if r is None:
        return "no board captured twice"
    verdict = ("repeats scatter more than their intervals allow" if r.p_value < 0.01
               else "repeats agree with their intervals")
    return (f"{r.boards} boards, {r.captures} captures: chi-square {r.chi_square:.1f} on {r.degrees_of_freedom} "
            f"degrees of freedom (ratio {r.ratio:.2f}, p {r.p_value:.2g}): {verdict}")


def trend_rows(trends: Sequence[QuantityTrend]) -> list[dict[str, Any]]:
    """One flat row per quantity (SI units): the CSV table and the basis of the text table."""
    rows = []
    for t in trends:
        cap, recent, p, r = t.capability_all, t.capability_recent, t.projection, t.repeatability
        first = t.first_detection
        rows.append({
            "design": t.design, "kind": t.kind, "name": t.name, "unit": t.unit, "boards": len(t.values),
            "limit_low": t.limit_low, "limit_high": t.limit_high, "nominal": t.nominal,
            "mean_all": None if cap is None else cap.mean, "mean_recent": None if recent is None else recent.mean,
            "cpk_all": None if cap is None else cap.cpk, "ppk_all": None if cap is None else cap.ppk,
            "cpk_recent": None if recent is None else recent.cpk,
            "ppk_recent": None if recent is None else recent.ppk,
            "drifts_detected": len(t.detections),
            "first_drift_serial": None if first is None else first["serial"],
            "first_drift_time": None if first is None else first["time"],
            "first_drift_methods": None if first is None else "+".join(first["methods"]),
            "first_drift_direction": None if first is None else first["direction"],
            "slope_per_board": None if p is None else p.slope_per_board,
            "slope_stderr": None if p is None else p.slope_stderr,
            "boards_to_limit": None if p is None else p.boards_to_limit,
            "hours_to_limit": None if p is None else p.hours_to_limit,
            "repeat_chi_square": None if r is None else r.chi_square,
            "repeat_dof": None if r is None else r.degrees_of_freedom,
            "repeat_p_value": None if r is None else r.p_value,
        })
    return rows


def trends_text(trends: Sequence[QuantityTrend], store_name: str, settings: ChartSettings, window: int) -> str:
    """The report for the terminal: per design, a table of quantities, then the findings in words."""
    if not trends:
        return f"trends of {store_name}: no quantity with enough boards\n"
    lines = [f"trends of {store_name}", "  " + settings_text(settings, window)]
    for design in dict.fromkeys(t.design for t in trends):
        group = [t for t in trends if t.design == design]
        lines += ["", f"design: {design} ({max(len(t.values) for t in group)} boards)",
                  f"  {'quantity':<20} {'boards':>6}  {'mean (last)':<13} {'limits':<26} "
                  f"{'Cpk':>5} {'Ppk':>5}  first drift"]
        for t in group:
            recent = t.capability_recent
            limits = ("none" if t.limit_low is None and t.limit_high is None else
                      f"[{format_value(t.limit_low, t.unit, 4)}, {format_value(t.limit_high, t.unit, 4)}]")
            mean = format_value(None if recent is None else recent.mean, t.unit, 4)
            lines.append(f"  {t.name:<20} {len(t.values):>6}  {mean:<13} {limits:<26} "
                         f"{_number(None if recent is None else recent.cpk):>5} "
                         f"{_number(None if recent is None else recent.ppk):>5}  {drift_text(t)}")
        lines += ["", "  findings:"]
        for t in group:
            if t.limit_low is None and t.limit_high is None and not t.detections:
                continue
            for d in t.detections:
                lines.append(f"  - {t.name}: drift {d['direction']} detected at board {d['serial']}"
                             f" ({d['time'] or 'time unknown'}) by {' and '.join(d['methods'])}")
            if t.limit_low is not None or t.limit_high is not None:
                lines.append(f"  - {t.name}: {projection_text(t)}")
            if t.repeatability is not None:
                lines.append(f"  - {t.name}: repeatability: {repeatability_text(t)}")
    return "\n".join(lines) + "\n"
