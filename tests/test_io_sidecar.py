"""Settings beside a capture (FILE.fitkit.toml, fitkit.io.sidecar): read by every command,
overridden by an option, refused with the sidecar named when wrong."""

from __future__ import annotations

import numpy as np
import pytest

from fitkit import exitcodes, load_capture
from fitkit.cli import cli
from fitkit.cli.errors_to_exit import run_with_error_handling
from fitkit.errors import CaptureError


@pytest.fixture()
def headerless(tmp_path):
    """Two columns of a first-order step (tau 100 us at 1 us per sample), no header."""
    rng = np.random.default_rng(7)
    n, edge = 2000, 200
    k = np.arange(n)
    y = np.where(k >= edge, 1 - np.exp(-(k - edge) * 1e-6 / 1e-4), 0.0) + rng.normal(0, 0.003, n)
    path = tmp_path / "board.txt"
    np.savetxt(path, np.column_stack([(k >= edge).astype(float), y]), fmt="%.5f")
    return path


def test_sidecar_gives_the_sample_interval_and_origin(headerless):
    (headerless.parent / "board.txt.fitkit.toml").write_text('sample_interval = "1u"\ntime_origin = -200e-6\n'
                                                             'value_unit = "V"\n')
    cap = load_capture(headerless)
    assert cap.sample_interval == pytest.approx(1e-6)
    assert cap.time[0] == pytest.approx(-200e-6)
    assert all(ch.unit == "V" for ch in cap.channels)
    assert any("board.txt.fitkit.toml" in d for d in cap.provenance.decisions)
    # an argument given wins over the sidecar, and the decisions say so
    cap = load_capture(headerless, sample_interval="2u")
    assert cap.sample_interval == pytest.approx(2e-6)
    assert any("overridden" in d for d in cap.provenance.decisions)


def test_fit_reads_the_sidecar(headerless, capsys):
    (headerless.parent / "board.txt.fitkit.toml").write_text('sample_interval = "1u"\n')
    status = run_with_error_handling(cli, ["fit", str(headerless), "--form", "first-order", "--quiet"])
    out = capsys.readouterr().out
    assert status == exitcodes.OK
    tau = float(next(line for line in out.splitlines() if line.startswith("tau ")).split()[1])
    assert tau == pytest.approx(1e-4, rel=0.05)   # the simulated time constant


def test_without_a_sidecar_a_headerless_file_needs_the_interval(headerless, capsys):
    status = run_with_error_handling(cli, ["fit", str(headerless)])
    assert status == exitcodes.UNUSABLE_INPUT and "sample interval" in capsys.readouterr().err


@pytest.mark.parametrize("text,words", [('sample_intervall = "1u"\n', "unknown setting 'sample_intervall'"),
                                        ("skip_rows = 'two'\n", "skip_rows"),
                                        ("sample_interval = \n", "cannot be read"),
                                        ('sample_interval = "abc"\n', "sample_interval: cannot read 'abc'"),
                                        ('time_unit = "weeks"\n', "time_unit 'weeks' is not a unit of time")])
def test_a_wrong_sidecar_is_refused_naming_it(headerless, text, words):
    (headerless.parent / "board.txt.fitkit.toml").write_text(text)
    with pytest.raises(CaptureError) as err:
        load_capture(headerless)
    assert words in err.value.one_line() and "board.txt.fitkit.toml" in err.value.one_line()
