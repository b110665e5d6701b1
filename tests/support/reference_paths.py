"""Where the reference data lives: ../shared/reference beside the checkout, as laid
out for developers and CI. Tests that need it skip, naming this path, when it is absent."""

from pathlib import Path

REFERENCE = Path(__file__).resolve().parents[3] / "shared" / "reference"
REAL_CAPTURES = REFERENCE / "real-captures"
NIST_STRD = REFERENCE / "nist-strd"


def _skip_unless(path: Path, what: str):
    import pytest
    return pytest.mark.skipif(not path.exists(), reason=f"{what} not found at {path} (../shared/reference "
                                                        "beside the checkout); nothing to check against")


#: Marks a test that reads the real captures; it skips, naming the path, when they are absent.
needs_real_captures = _skip_unless(REAL_CAPTURES, "the real captures")
#: Marks a test that reads the NIST StRD datasets.
needs_nist_strd = _skip_unless(NIST_STRD, "the NIST StRD datasets")
