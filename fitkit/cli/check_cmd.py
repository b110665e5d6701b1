"""`fitkit check FILE [OUT_FILE] --design DESIGN.toml`: does the board match its design?"""

from __future__ import annotations

import html
import json

import click

from .. import exitcodes
from ..units import parse_value
from .capture_options import CaptureOptions, capture_options

STATUS = {"pass": exitcodes.OK, "fail": exitcodes.FAIL, "inconclusive": exitcodes.INCONCLUSIVE}


@click.command("check")
@click.argument("file", type=click.Path(dir_okay=False))
@click.argument("out_file", required=False, type=click.Path(dir_okay=False))
@click.option("--design", "design_path", required=True, type=click.Path(dir_okay=False), metavar="DESIGN.toml",
              help="The design file: circuit, nominal values, tolerances, fixture, optional limits.")
@capture_options
@click.option("--edge-time", metavar="SECONDS", default=None, help="Check only the edge at this time (e.g. 12.5u).")
@click.option("--average", is_flag=True, help="Average the edges coherently before checking.")
@click.option("--trials", type=click.IntRange(min=10), default=200, show_default=True,
              help="Boards drawn at random within tolerance for the envelope.")
@click.option("--seed", type=int, default=0, show_default=True, help="Seed of the envelope's random draws.")
@click.option("--json", "as_json", is_flag=True, help="Print the result as one JSON object.")
@click.option("--plot", "plot_path", type=click.Path(dir_okay=False), metavar="FILE",
              help="Write a plot (.png, .svg or .pdf) with the tolerance envelope and the suspects.")
@click.option("--report", "report_path", type=click.Path(dir_okay=False), metavar="FILE.html",
              help="Write a self-contained HTML report.")
def check(file: str, out_file: str | None, design_path: str, edge_time: str | None, average: bool, trials: int,
          seed: int, as_json: bool, plot_path: str | None, report_path: str | None, **kwargs) -> int:
    """Check the board captured in FILE against DESIGN.toml: pass, fail or inconclusive.

    Every verdict comes from a 95 % interval: a quantity or part is within
    or outside its limits only when its whole interval is; otherwise the
    check says it cannot tell, and what would resolve it. When the board
    fails, the suspects are listed most likely first: each part changed
    alone (others at nominal), and swapped parts, ranked by AICc, with the
    fault pattern (a decade off, a neighbouring preferred value, drifted).

    With OUT_FILE, FILE holds the input (drive) and OUT_FILE the output.

    \b
    Exit status:
      0  pass: the board matches its design
      1  fail: the board does not match its design
      3  inconclusive: this capture cannot decide (see "to resolve")
      4  unusable input: a capture or design file cannot be read or used
      5  the analysis failed (a fit did not converge)
    """
    from ..check import check_capture, load_design

    options = CaptureOptions.pop(kwargs)
    design = load_design(design_path)
    capture = options.load(file, out_file)
    inp, out = options.roles(capture)
    t_edge = None if edge_time is None else parse_value(edge_time, "s")
    result = check_capture(capture, design, input=inp, output=out, average=average, envelope_trials=trials,
                           seed=seed, edge_time=t_edge)
    if plot_path:
        import matplotlib
        matplotlib.use("Agg")
        from matplotlib import pyplot as plt
        fig, _ = result.plot(path=plot_path)
        plt.close(fig)
    if report_path:
        from ..report.check_plots import suspect_notes
        from ..report.check_text import render_check_text
        from ..report.html import write_html_report
        section = "<pre>" + html.escape(render_check_text(result)) + "</pre>"
        write_html_report(result.fit, report_path, capture_provenance=capture, verdict=result.verdict,
                          extra_sections=[("Board check", section)],
                          plot_options={"envelope": result.envelope_volts, "notes": suspect_notes(result)})
    if as_json:
        click.echo(json.dumps(result.to_dict(), allow_nan=False))
    else:
        from ..report.check_text import render_check_text
        click.echo(render_check_text(result))
    return STATUS[result.verdict]
