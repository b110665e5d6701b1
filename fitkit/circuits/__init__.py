"""Circuits: from a circuit description to its transfer function and part values.

* description.py  Circuit, Part, MeasurementChain (parts between named nodes)
* toml_format.py  fitkit's circuit file (see docs/circuit-format.md): load_circuit, dumps_circuit
* topologies.py   the named library: topology("rc-ladder-2", R1="10k", C1="?")
* mna.py          modified nodal analysis -> numerator and denominator polynomials
* transfer.py     TransferFunction (poles, zeros, DC gain, tau/f0/Q, step response by partial fractions)
* parametric.py   PartFamily: H(s) as unknown parts vary, without a nodal analysis per call (for the fits)
* coefficients.py coefficients and their Jacobian w.r.t. ln(unknown parts), for the fits
* identifiability.py  which unknowns one step capture determines
* solve.py        every physical solution of the coefficient equations
* preferred.py    IEC 60063 E-series nearest values
* fixture.py      how source resistance and probe loading shift tau, f0, Q
"""

from .coefficients import (CoefficientJacobian, coefficient_jacobian, coefficient_vector, coefficients,
                           log_part_covariance)
from .description import Circuit, MeasurementChain, Part, probe_chain
from .fixture import ChainEffect, measurement_chain_effect
from .identifiability import IdentifiabilityReport, identifiability
from .parametric import PartFamily
from .preferred import PreferredValue, nearest_preferred, place_among_preferred, preferred_neighbours
from .solve import PartSolution, solve_parts
from .toml_format import dumps_circuit, load_circuit, loads_circuit
from .topologies import TOPOLOGIES, Topology, apply_part_settings, get_topology, topology
from .transfer import TransferFunction, transfer_function

__all__ = [
    "Circuit", "Part", "MeasurementChain", "probe_chain",
    "load_circuit", "loads_circuit", "dumps_circuit",
    "TOPOLOGIES", "Topology", "topology", "get_topology", "apply_part_settings",
    "TransferFunction", "transfer_function", "PartFamily",
    "CoefficientJacobian", "coefficients", "coefficient_vector", "coefficient_jacobian", "log_part_covariance",
    "IdentifiabilityReport", "identifiability",
    "PartSolution", "solve_parts",
    "PreferredValue", "nearest_preferred", "preferred_neighbours", "place_among_preferred",
    "ChainEffect", "measurement_chain_effect",
]
