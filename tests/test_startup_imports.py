"""Start-up guard: `fitkit fit FILE --json` on a plain CSV, `fitkit inspect` and
`fitkit --help` must not import the heavy packages they do not use.

Each check runs in a fresh interpreter (a subprocess), so what other tests
imported does not count. These are not timing tests: they list the modules
loaded. What each heavy package is for, and who may import it:

* pandas (and pyarrow, which pandas pulls in): only for text files numpy's
  reader cannot take (fitkit.io.bulk) and for batch summaries;
* pyarrow: Parquet files (fitkit.io.binary);
* matplotlib: --plot and --report only (fitkit.report);
* jsonschema: tests of the JSON output only;
* lmfit: profile-likelihood intervals and the full (non-projected) fit (fitkit.fitting.least_squares);
* scipy.stats and scipy.signal: checks and independent routes, never at import time
  of the fitting package (scipy.signal alone costs about 0.4 s here);
* control, lcapy, sympy: test references only.
"""

from __future__ import annotations

import json
import math
import subprocess
import sys

import numpy as np
import pytest

#: Never imported when the fit command's modules are imported.
NOT_AT_IMPORT = ("pandas", "pyarrow", "matplotlib", "jsonschema", "lmfit", "scipy.stats", "scipy.signal",
                 "control", "lcapy", "sympy")
#: Never imported by a whole `fitkit fit FILE --json` run on a plain CSV capture.
NOT_IN_PLAIN_FIT = ("pandas", "pyarrow", "matplotlib", "jsonschema", "lmfit", "control", "lcapy", "sympy")


def _loaded_after(code: str, watch: tuple[str, ...]) -> tuple[list[str], str]:
    """Run ``code`` in a fresh interpreter; return (watched modules it loaded, its stdout)."""
    probe = (
        "import sys, json\n"
        "try:\n"
        + "".join(f"    {line}\n" for line in code.splitlines())
        + "except SystemExit:\n    pass\n"
        f"print('\\nMODULES ' + json.dumps([m for m in {list(watch)!r} if m in sys.modules]))\n"
    )
    done = subprocess.run([sys.executable, "-c", probe], capture_output=True, text=True, timeout=120)
    assert done.returncode == 0, done.stderr
    out, _, modules = done.stdout.rpartition("\nMODULES ")
    return json.loads(modules), out


def _rc_capture(path, tau=20e-6, dt=1e-7, n=4000, sigma=0.01, seed=5) -> float:
    """A plain CSV capture: a 0/1 V drive with two edges and the RC low-pass response
    1 - exp(-t/tau) after each edge (textbook first-order step response, common
    practice, no source), plus white noise. Returns tau in seconds."""
    rng = np.random.default_rng(seed)
    t = np.arange(n) * dt
    edges = (n // 4 * dt, 3 * n // 4 * dt)
    drive = ((t >= edges[0]) & (t < edges[1])).astype(float)
    rise = np.where(t >= edges[0], 1.0 - np.exp(-(t - edges[0]) / tau), 0.0)
    level_at_fall = 1.0 - math.exp(-(edges[1] - edges[0]) / tau)
    response = np.where(t >= edges[1], level_at_fall * np.exp(-(t - edges[1]) / tau), rise)
    response = response + rng.normal(0.0, sigma, n)
    rows = "\n".join(f"{a:.7e},{b:g},{c:.6f}" for a, b, c in zip(t, drive, response))
    path.write_text("time,input,output\n" + rows + "\n")
    return tau


def test_fit_command_modules_import_no_heavy_package():
    loaded, _ = _loaded_after("import fitkit.cli, fitkit.cli.fit_cmd, fitkit.io, fitkit.fitting, "
                              "fitkit.conditioning, fitkit.results", NOT_AT_IMPORT)
    assert loaded == []


def test_plain_csv_fit_json_runs_without_pandas_matplotlib_or_lmfit(tmp_path):
    path = tmp_path / "rc.csv"
    tau = _rc_capture(path)
    loaded, out = _loaded_after(
        f"from fitkit.cli import main\nmain(['fit', {str(path)!r}, '--json'])", NOT_IN_PLAIN_FIT)
    result = json.loads(out)
    assert result["model"] == "first-order"
    # the run did its work: tau of the RC response recovered to 2 %
    assert abs(result["parameters"]["tau"]["value"] - tau) < 0.02 * tau
    assert loaded == []


def test_inspect_imports_no_fitting_or_table_package(tmp_path):
    path = tmp_path / "rc.csv"
    _rc_capture(path)
    loaded, out = _loaded_after(f"from fitkit.cli import main\nmain(['inspect', {str(path)!r}])",
                                NOT_IN_PLAIN_FIT + ("scipy.optimize",))
    assert "output" in out
    assert loaded == []


@pytest.mark.parametrize("argv, watch", [
    (["--help"], ("numpy", "scipy", "pandas", "quantiphy", "matplotlib", "lmfit")),
    (["fit", "--help"], ("scipy", "pandas", "quantiphy", "matplotlib", "lmfit")),
])
def test_help_imports_no_numeric_package(argv, watch):
    loaded, out = _loaded_after(f"from fitkit.cli import main\nmain({argv!r})", watch)
    assert "Usage:" in out
    assert loaded == []
