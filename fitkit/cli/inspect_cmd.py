"""`fitkit inspect FILE [OUT_FILE]`: show what the importer read and decided."""

from __future__ import annotations

import json
import math

import click

from .. import exitcodes
from ..units import format_value
from .arguments import check_distinct_inputs, time_option
from .capture_options import CaptureOptions, capture_options


def inspect_report(capture, roles: tuple[str | None, str]) -> dict:
    """The inspect summary as plain JSON-ready types (times in s, values in SI units).

    Each channel's noise is the robust estimate of fitkit.conditioning
    (median absolute deviation of first differences, or the quantisation
    floor step/sqrt(12) when the noise is below one code).
    """
    from ..conditioning.noise import estimate_noise
    d = capture.to_dict()
    d["time_start"] = float(capture.time[0])
    d["time_stop"] = float(capture.time[-1])
    for entry, ch in zip(d["channels"], capture.channels):
        estimate = estimate_noise(ch.values)
        entry["noise_sigma"] = None if not math.isfinite(estimate.rms) else estimate.rms
        entry["noise_method"] = estimate.method
        entry["quantisation_step"] = estimate.quantisation_step
    d["input_channel"], d["output_channel"] = roles
    for key in ("sample_interval", "duration"):
        if isinstance(d[key], float) and not math.isfinite(d[key]):
            d[key] = None
    return d


def _text(report: dict) -> str:
    from ..conditioning.render import CHANNEL_NOISE
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
                     f"{CHANNEL_NOISE} {format_value(c['noise_sigma'], unit)} rms"
                     + (f" (quantised in {format_value(c['quantisation_step'], unit)} steps)"
                        if c.get("quantisation_step") else ""))
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
@click.argument("file", type=click.Path())
@click.argument("out_file", required=False, type=click.Path())
@capture_options
@click.option("--edge-time", help="Force one edge at this time (e.g. 1.5m) instead of detecting edges.")
@click.option("--average", is_flag=True, help="Coherently average aligned edges of the same direction.")
@click.option("--json", "as_json", is_flag=True, help="Print the same as one JSON object.")
def inspect(file: str, out_file: str | None, edge_time: str | None, average: bool, as_json: bool,
            **kwargs) -> int:
    """Show what fitkit reads and finds in FILE: layout decisions, channels
    with units, points, sample interval, duration, per-channel range and
    noise, then each edge with its levels, noise and model-free metrics
    (10-90 % rise time, delay, overshoot, settling time) and quality flags.

    With OUT_FILE, FILE holds the input (drive) and OUT_FILE the output
    (response); they are joined on their time axes. When no edge is found the
    import summary is still shown and the exit status is 4.
    """
    from ..conditioning import analyse_steps
    from ..conditioning.render import render_text
    from ..errors import ConditioningError

    options = CaptureOptions.pop(kwargs)
    options.validate()
    check_distinct_inputs(file, out_file)
    forced = time_option(edge_time, "--edge-time")
    capture = options.load(file, out_file)
    input_name, output_name = options.roles(capture)
    report = inspect_report(capture, (input_name, output_name))
    problem = None
    try:
        analysis = analyse_steps(capture, input=input_name, output=output_name, edge_time=forced,
                                 average=average)
    except ConditioningError as err:
        analysis, problem = None, err
    report["steps"] = None if analysis is None else analysis.to_dict()
    report["steps_error"] = None if problem is None else problem.one_line()
    if as_json:
        click.echo(json.dumps(report, indent=2, allow_nan=False))
    else:
        click.echo(_text(report))
        if analysis is not None:
            click.echo("")
            click.echo(render_text(analysis, unit=capture.channel(analysis.output_channel).unit))
    if problem is not None:
        click.echo(f"fitkit: error: {problem.one_line()}", err=True)
        return exitcodes.UNUSABLE_INPUT
    return exitcodes.OK
