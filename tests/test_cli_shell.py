"""The CLI shell: help is fast to reach, errors are one line with a documented status."""

import subprocess
import sys

import click
import pytest

from fitkit import exitcodes
from fitkit.cli.errors_to_exit import run_with_error_handling
from fitkit.errors import CaptureError, FitError, OptionError


def _command_raising(exc):
    @click.command()
    def boom():
        raise exc
    return boom


@pytest.mark.parametrize("exc, status", [
    (CaptureError("no data rows", path="x.csv", line=3, hint="check the export"), exitcodes.UNUSABLE_INPUT),
    (FitError("fit did not converge", path="x.csv"), exitcodes.ANALYSIS_FAILED),
    (OptionError("bad --model"), exitcodes.USAGE),
    (RuntimeError("bug"), exitcodes.INTERNAL),
])
def test_errors_become_one_line_and_status(exc, status, capsys):
    assert run_with_error_handling(_command_raising(exc), []) == status
    err = capsys.readouterr().err
    assert len(err.strip().splitlines()) == 1
    assert "Traceback" not in err


def test_error_line_names_file_and_line(capsys):
    run_with_error_handling(_command_raising(CaptureError("no data rows", path="x.csv", line=3,
                                                          hint="check the export")), [])
    assert capsys.readouterr().err.strip() == "fitkit: error: x.csv:3: no data rows; check the export"


def test_help_runs_as_console_command():
    out = subprocess.run([sys.executable, "-m", "fitkit", "--help"], capture_output=True, text=True)
    assert out.returncode == 0 and "Exit statuses" in out.stdout
