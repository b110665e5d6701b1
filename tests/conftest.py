"""Shared test set-up: the helpers in tests/support/ importable as ``support.NAME`` under any
import mode, and where the demo captures are.

Helpers shared by several test modules live in the ``support`` package (simulated captures and
results, the board simulator, the reference-data location, the PostgreSQL test server).
"""

from __future__ import annotations

import os
import sys
from pathlib import Path

# one BLAS thread per test process, as the fitkit command runs (fitkit/cli/__init__.py):
# two pytest workers on two cores with two BLAS threads each spin against each other
for _threads in ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ.setdefault(_threads, "1")

import pytest  # noqa: E402

TESTS = Path(__file__).resolve().parent
if str(TESTS) not in sys.path:  # `support` must import under --import-mode=importlib too
    sys.path.insert(0, str(TESTS))

#: The demo captures of the invented board (demo_captures/README.md).
DEMO_CAPTURES = TESTS.parent / "demo_captures"


@pytest.fixture(scope="session")
def demo_captures() -> Path:
    """The folder of demo captures, designs and truth.json."""
    return DEMO_CAPTURES
