"""How the measurement chain biases what a capture shows.

The generator's source resistance adds to whatever the driven node sees, and
the probe's input resistance and capacitance load the measured node. Both
shift the time constant, f0, Q and gain the capture shows away from those of
the circuit alone. ``measurement_chain_effect`` compares the transfer
function without the chain, with the source only, with the probe only and
with both, and says in plain words how much each shifts each quantity.

Example (closed form for an RC low-pass R, C, source Rs, probe Rp || Cp):
tau = ((R + Rs) || Rp) (C + Cp) and DC gain = Rp / (R + Rs + Rp).
"""

from __future__ import annotations

from dataclasses import dataclass, replace
from typing import Any, Mapping

from ..results import json_number
from .description import Circuit, MeasurementChain
from .transfer import transfer_function

#: Units of the characteristic quantities (see TransferFunction.quantities).
QUANTITY_UNITS = {"dc_gain": "", "tau": "s", "f0": "Hz", "Q": "", "zeta": "",
                  "tau1": "s", "tau2": "s", "tau_dominant": "s"}


@dataclass(frozen=True)
class ChainEffect:
    """Quantities of the circuit with and without its measurement chain.

    chain: the chain considered.
    alone, source_only, probe_only, both: quantity name -> value (SI units),
        from TransferFunction.quantities(); source_only/probe_only are empty
        when the chain has no such element.
    shifts: element ("source", "probe", "both") -> quantity -> relative shift
        (value with / value alone - 1), for the quantities present in both.
    order_alone, order_both: number of poles without and with the chain.
    messages: plain-language sentences.
    """

    chain: MeasurementChain
    alone: Mapping[str, float]
    source_only: Mapping[str, float]
    probe_only: Mapping[str, float]
    both: Mapping[str, float]
    shifts: Mapping[str, Mapping[str, float]]
    order_alone: int
    order_both: int
    messages: tuple[str, ...]

    def to_dict(self) -> dict[str, Any]:
        def nums(d):
            return {k: json_number(v) for k, v in d.items()}
        return {"chain": self.chain.to_dict(), "alone": nums(self.alone),
                "source_only": nums(self.source_only), "probe_only": nums(self.probe_only),
                "both": nums(self.both), "shifts": {k: nums(v) for k, v in self.shifts.items()},
                "order_alone": self.order_alone, "order_both": self.order_both,
                "messages": list(self.messages)}


def _relative(with_chain: Mapping[str, float], alone: Mapping[str, float]) -> dict[str, float]:
    out = {}
    for k, v in with_chain.items():
        a = alone.get(k)
        if a is not None and a != 0 and v is not None:
            x = v / a - 1.0
            out[k] = 0.0 if abs(x) < 1e-9 else x
    return out


def _describe(label: str, shift: Mapping[str, float], order_change: tuple[int, int] | None = None,
              plural: bool = False) -> str:
    s = "" if plural else "s"
    if order_change is not None:
        return f"{label} change{s} the response from {order_change[0]} to {order_change[1]} poles"
    parts = []
    for name in ("tau", "tau1", "tau2", "tau_dominant", "f0", "Q", "dc_gain"):
        if name in shift and shift[name] != 0.0:
            x = shift[name]
            verb = ("raise" if x > 0 else "lower") + s
            word = "DC gain" if name == "dc_gain" else name
            parts.append(f"{verb} {word} by {abs(x) * 100:.3g} %")
    if not parts:
        return f"{label} change{s} none of the characteristic quantities"
    return f"{label} " + ", ".join(parts)


def measurement_chain_effect(circuit: Circuit, chain: MeasurementChain | None = None,
                             values: Mapping[str, float] | None = None) -> ChainEffect:
    """Compare the circuit alone with the circuit inside its measurement chain.

    ``chain`` defaults to the circuit's own; ``values`` fills in part values
    (SI) for the analysis, else design values are used.
    """
    chain = circuit.chain if chain is None else chain
    bare = circuit.with_chain(MeasurementChain())
    tf_alone = transfer_function(bare, values)
    alone = tf_alone.quantities()
    source = replace(chain, probe_resistance=None, probe_capacitance=None)
    probe = replace(chain, source_resistance=None)
    tf_source = transfer_function(bare.with_chain(source), values) if chain.source_resistance is not None else None
    tf_probe = transfer_function(bare.with_chain(probe), values) if not probe.is_empty else None
    source_only = tf_source.quantities() if tf_source else {}
    probe_only = tf_probe.quantities() if tf_probe else {}

    def change(tf):
        return None if tf.order == tf_alone.order else (tf_alone.order, tf.order)

    tf_both = transfer_function(bare.with_chain(chain), values)
    both = tf_both.quantities()
    shifts: dict[str, dict[str, float]] = {}
    messages = []
    if source_only:
        shifts["source"] = _relative(source_only, alone)
        messages.append(_describe(f"the source resistance ({MeasurementChain(chain.source_resistance).describe()})",
                                  shifts["source"], change(tf_source)))
    if probe_only:
        shifts["probe"] = _relative(probe_only, alone)
        label = MeasurementChain(None, chain.probe_resistance, chain.probe_capacitance,
                                 chain.probe_name).describe()
        messages.append(_describe(f"the {label}", shifts["probe"], change(tf_probe)))
    if source_only and probe_only:
        shifts["both"] = _relative(both, alone)
        messages.append(_describe("source and probe together", shifts["both"], change(tf_both), plural=True))
    if chain.is_empty:
        messages.append("no measurement chain given: ideal source, no probe loading")
    if tf_both.order != tf_alone.order:
        messages.append(f"the measurement chain changes the order from {tf_alone.order} to "
                        f"{tf_both.order} poles: fit a form of order {tf_both.order} or include the chain")
    return ChainEffect(chain, alone, source_only, probe_only, both, shifts,
                       tf_alone.order, tf_both.order, tuple(messages))
