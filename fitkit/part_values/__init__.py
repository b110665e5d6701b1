"""Component values from captures: a capture plus a circuit -> part values with 95 % intervals.

Sits between check and fitting/circuits: it uses the fitting engine, the
circuit layer and conditioning, and is used by the board check and the CLI.

* problem.py       identifiability first: what one capture can determine
* behavioural.py   route 1: behavioural fit -> coefficient equations -> parts
* circuit_form.py  the circuit's step response as a form in part values
* direct.py        route 2: the direct fit in part values, one per solution
* circuit_fit.py   fit_circuit, fit_circuit_segments -> FitResult with components
"""

from .circuit_fit import POORLY_DETERMINED, fit_circuit, fit_circuit_segments
from .problem import PartProblem, prepare_problem

__all__ = ["fit_circuit", "fit_circuit_segments", "prepare_problem", "PartProblem", "POORLY_DETERMINED"]
