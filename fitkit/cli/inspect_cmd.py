"""`fitkit inspect FILE [OUT_FILE]`: show what the importer read and decided."""

from __future__ import annotations

import json
import math

import click

from ..units import format_value
from .capture_options import CaptureOptions, capture_options


def inspect_report(capture, roles: tuple[str | None, str]) -> dict:
    """The inspect summary as plain JSON-ready types (times in s, values in SI units)."""
    from ..io import robust_noise_sigma
    d = capture.to_dict()
    d["time_start"] = float(capture.time[0])
    d["time_stop"] = float(capture.time[-1])
    for entry, ch in zip(d["channels"], capture.channels):
        noise = robust_noise_sigma(ch.values)
        entry["noise_sigma"] = None if math.isnan(noise) else noise
    d["input_channel"], d["output_channel"] = roles
    for key in ("sample_interval", "duration"):
        if isinstance(d[key], float) and not math.isfinite(d[key]):
            d[key] = None
    return d


def _text(report: dict) -> str:
    lines = [f"file:             {report['file']}",
             f"layout:           {report['layout']}"]
    if report["data_start_line"]:
        lines.append(f"data starts:      line {report['data_start_line']}")
    lines.append(f"points:           {report['n_points']}")
    lines.append(f"sample interval:  {format_value(report['sample_interval'], 's')}")
    lines.append(f"duration:         {format_value(report['duration'], 's')} "
                 f"(from {format_value(report['time_start'], 's')} to {format_value(report['time_stop'], 's')})")
    lines.append(f"roles:            input {report['input_channel'] or '(none)'}, "
                 f"output {report['output_channel']}")
    lines.append("channels:")
    width = max(len(c["name"]) for c in report["channels"])
    for i, c in enumerate(report["channels"], start=1):
        unit = c["unit"]
        source = f" (file: {c['source_unit']})" if c["source_unit"] and c["source_unit"] != unit else ""
        lines.append(f"  {i}. {c['name']:<{width}}  unit {unit or '-'}{source}; "
                     f"range {format_value(c['min'], unit)} to {format_value(c['max'], unit)}; "
                     f"noise {format_value(c['noise_sigma'], unit)} rms (robust)")
    lines.append("decisions:")
    lines.extend(f"  - {d}" for d in report["decisions"])
    if report["metadata"]:
        lines.append("metadata:")
        items = list(report["metadata"].items())
        lines.extend(f"  {k}: {v}" for k, v in items[:30])
        if len(items) > 30:
            lines.append(f"  ... and {len(items) - 30} more (see --json)")
    lines.append("warnings:" + ("" if report["warnings"] else " none"))
    lines.extend(f"  - {w}" for w in report["warnings"])
    return "\n".join(lines)


@click.command("inspect")
@click.argument("file", type=click.Path(dir_okay=False))
@click.argument("out_file", required=False, type=click.Path(dir_okay=False))
@capture_options
@click.option("--json", "as_json", is_flag=True, help="Print the same as one JSON object.")
def inspect(file: str, out_file: str | None, as_json: bool, **kwargs) -> None:
    """Show what fitkit reads in FILE: layout decisions, channels with units,
    points, sample interval, duration, per-channel range and noise, warnings.

    With OUT_FILE, FILE holds the input (drive) and OUT_FILE the output
    (response); they are joined on their time axes.
    """
    options = CaptureOptions.pop(kwargs)
    capture = options.load(file, out_file)
    report = inspect_report(capture, options.roles(capture))
    if as_json:
        click.echo(json.dumps(report, indent=2, allow_nan=False))
    else:
        click.echo(_text(report))
