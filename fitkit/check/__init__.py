"""The board check: does this board match its design, and which part is off?

* design.py     the design file: nominal circuit, tolerances, fixture, acceptance limits
* envelope.py   the tolerance envelope (Monte Carlo, uniform within tolerance, plus corners)
* hypotheses.py fault hypotheses fitted by the engine (the fit of `fitkit fit --topology`)
* diagnosis.py  fault hypotheses: each part alone, swaps, pairs; ranked by AICc; fault patterns
* verdicts.py   per-quantity, per-part and overall verdicts from 95 % intervals
* board_check.py check_capture(capture, design, ...) -> CheckResult
"""

from .board_check import CheckResult, check_capture
from .design import Design, PartSpec, load_design, loads_design

__all__ = ["check_capture", "CheckResult", "load_design", "loads_design", "Design", "PartSpec"]
