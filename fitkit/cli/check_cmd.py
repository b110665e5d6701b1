"""`fitkit check FILE [OUT_FILE] --design DESIGN.toml`: does the board match its design?"""

from __future__ import annotations


import click

from .. import exitcodes
from .arguments import check_distinct_inputs, time_option
from .capture_options import CaptureOptions, capture_options
from .output_options import OutputRequest, emit_result, output_options
from .store_options import StoreRequest, store_check, store_options

#: More boards than this for the envelope takes minutes and narrows nothing a bench can see.
MAX_TRIALS = 100_000
STATUS = {"pass": exitcodes.OK, "fail": exitcodes.FAIL, "inconclusive": exitcodes.INCONCLUSIVE}


@click.command("check")
@click.argument("file", type=click.Path())
@click.argument("out_file", required=False, type=click.Path())
@click.option("--design", "design_path", required=True, type=click.Path(), metavar="DESIGN.toml",
              help="The design file: circuit, nominal values, tolerances, fixture, optional limits.")
@capture_options
@click.option("--edge-time", metavar="SECONDS", default=None, help="Check only the edge at this time (e.g. 12.5u).")
@click.option("--average", is_flag=True, help="Average the edges coherently before checking.")
@click.option("--trials", type=click.IntRange(min=10, max=MAX_TRIALS), default=200, show_default=True,
              help="Boards drawn at random within tolerance for the envelope.")
@click.option("--seed", type=click.IntRange(0, 2**32 - 1), default=0, show_default=True, help="Seed of the envelope's random draws.")
@click.option("--json", "as_json", is_flag=True, help="Print the result as one JSON object.")
@output_options
@store_options
def check(file: str, out_file: str | None, design_path: str, edge_time: str | None, average: bool, trials: int,
          seed: int, as_json: bool, **kwargs) -> int:
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
      2  a bad option (before any work); 73 an output could not be written
    """
    from ..check import check_capture, load_design

    outputs = OutputRequest.pop(kwargs)
    outputs.validate([file, out_file, design_path], as_json=as_json)
    options = CaptureOptions.pop(kwargs)
    options.validate()
    check_distinct_inputs(file, out_file)
    t_edge = time_option(edge_time, "--edge-time")
    store_request = StoreRequest.pop(kwargs)
    design = load_design(design_path)
    capture = options.load(file, out_file)
    # the library decides the roles it was not told (fitkit.conditioning.roles), once
    inp, out = options.input_channel, options.output_channel
    result = check_capture(capture, design, input=inp, output=out, average=average, envelope_trials=trials,
                           seed=seed, edge_time=t_edge)
    emit_result(outputs, result, capture, as_json)
    store_check(store_request, file, design_path, result)
    return STATUS[result.verdict]
