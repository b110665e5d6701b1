"""Oscilloscope probe loading presets: (shunt resistance in ohms, capacitance in farads).

Typical figures of the trade (common practice, no source): a 10:1 passive
probe loads about 10 MOhm || 12 pF, a 1:1 probe (or direct coax into a
1 MOhm input) about 1 MOhm || 20 pF. Use explicit values when the data
sheet differs. Kept in this tiny module so the command line can list the preset
names without importing the circuit machinery.
"""

PROBE_PRESETS: dict[str, tuple[float, float]] = {
    "10x-passive": (10e6, 12e-12),
    "1x-direct": (1e6, 20e-12),
}
