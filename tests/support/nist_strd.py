"""Reading a NIST StRD nonlinear regression file (NIST/ITL Statistical Reference Datasets,
../shared/reference/nist-strd; tests using it are marked ``needs_nist_strd``)."""

from __future__ import annotations

import re

import numpy as np

from .reference_paths import NIST_STRD


def read_strd(name: str) -> tuple[dict[str, tuple[float, float, float, float]], np.ndarray, np.ndarray]:
    """Parse a NIST StRD .dat file: {b: (start1, start2, certified, certified sd)}, x, y."""
    lines = (NIST_STRD / f"{name}.dat").read_text().splitlines()
    params = {}
    for line in lines:
        m = re.match(r"\s*(b\d+)\s*=\s*(\S+)\s+(\S+)\s+(\S+)\s+(\S+)\s*$", line)
        if m:
            params[m.group(1)] = tuple(float(m.group(i)) for i in range(2, 6))
    first = next(i for i, line in enumerate(lines) if re.match(r"\s*Data:\s+y\s+x\s*$", line))
    rows = np.array([[float(v) for v in line.split()] for line in lines[first + 1:] if line.strip()])
    return params, rows[:, 1], rows[:, 0]
