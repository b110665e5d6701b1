"""Every real capture in ../shared/reference/real-captures: right, or an honest refusal.

The captures were measured by other people on real circuits (see that
folder's SOURCE.md). With no options, fitkit must give each one either the
right answer (every checked quantity within the range tests/support/real_corpus.py
derives from the stated parts and the independent fit quoted in SOURCE.md) or
a non-zero exit whose message names the fix. A confident wrong answer (exit 0,
a quantity outside its range) fails, and so does a refusal that names no fix.
"""

from __future__ import annotations

import pytest

from support.real_corpus import CASES, judge, run_fitkit
from support.reference_paths import REAL_CAPTURES

pytestmark = pytest.mark.skipif(not REAL_CAPTURES.exists(),
                                reason=f"the real captures are not at {REAL_CAPTURES} (../shared/reference "
                                       "beside the checkout); nothing to check against")


@pytest.mark.parametrize("case", CASES, ids=[c.file for c in CASES])
def test_real_capture_is_right_or_refused_with_a_fix(case):
    status, data, stderr = run_fitkit(case.path, case.options)
    outcome = judge(case, status, data, stderr)
    assert outcome.verdict in ("right", "refused"), \
        f"{case.file}: {outcome.why} (exit {status}, form {outcome.form!r}, message {outcome.message!r})"


def test_a_refused_fit_prints_no_interval():
    """A capture whose best fit does not describe it (an RLC ring-down recorded from
    the middle of its drive pulse) gets exit 6, its finding on stderr, and JSON
    quantities without intervals."""
    case = next(c for c in CASES if c.file.endswith("Dati0511_1.txt"))
    status, data, stderr = run_fitkit(case.path, case.options)
    if status == 0:
        pytest.skip("fitkit now describes this capture (a form for it landed); nothing refused to check")
    assert status == 6, stderr
    assert "does not describe" in stderr
    assert data is not None and data["describes_data"] is False
    for table in ("parameters", "derived"):
        for name, entry in data[table].items():
            assert entry["ci95"] is None and entry["determined"] is False, name
