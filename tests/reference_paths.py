"""Where the reference data lives: ../shared/reference beside the checkout
(as laid out for developers and CI), else /work/shared/reference."""

from pathlib import Path

_CANDIDATES = (Path(__file__).resolve().parents[2] / "shared" / "reference",
               Path("/work/shared/reference"))

REFERENCE = next((p for p in _CANDIDATES if p.exists()), _CANDIDATES[0])
REAL_CAPTURES = REFERENCE / "real-captures"
NIST_STRD = REFERENCE / "nist-strd"
