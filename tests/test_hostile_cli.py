"""Hostile but realistic command lines (issue 19): bad arguments are usage
errors (status 2) before any work, every status is the README's, and the
surroundings (a full disk, a closed pipe) never turn into "internal error".

Each row of a table is one kind of mistake; where the kind is a space of
inputs (numbers out of range, unknown encodings) hypothesis draws from it.
The exit statuses are those of the README's table (fitkit.exitcodes).
"""

from __future__ import annotations

import codecs
import errno
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from fitkit import exitcodes
from fitkit.cli import cli
from fitkit.cli.errors_to_exit import run_with_error_handling

DEMO = Path(__file__).resolve().parents[1] / "demo_captures"
BOARD = DEMO / "good_board.csv"
LADDER_DESIGN = DEMO / "designs" / "rc_ladder.toml"
HYPO = dict(deadline=None, derandomize=True, max_examples=30,
            suppress_health_check=[HealthCheck.function_scoped_fixture])


def run(capsys, *args) -> tuple[int, str, str]:
    status = run_with_error_handling(cli, [str(a) for a in args])
    out = capsys.readouterr()
    return status, out.out, out.err


def one_line_error(err: str) -> bool:
    lines = [ln for ln in err.splitlines() if ln.strip()]
    return "Traceback" not in err and "internal error" not in err and 1 <= len(lines) <= 3


BAD_ARGUMENTS = [
    (["check", BOARD, "--design", LADDER_DESIGN, "--seed", "-5"], "--seed"),
    (["fit", BOARD, "--encoding", "klingon"], "--encoding"),
    (["fit", BOARD, "--time-column", "none", "--sample-interval", "1e-300"], "--sample-interval"),
    (["fit", BOARD, "--time-column", "none", "--sample-interval", "1e300"], "--sample-interval"),
    (["fit", BOARD, "--sample-interval", "-1u"], "--sample-interval"),
    (["fit", BOARD, "--topology", "rc-ladder-2", "--known", "R1=10k,R1=20k"], "--known"),
    (["fit", BOARD, "--value-unit", "bananas"], "--value-unit"),
    (["fit", BOARD, "--time-unit", "parsec"], "--time-unit"),
    (["fit", BOARD, "--vertical-scale", "0"], "--vertical-scale"),
    (["check", BOARD, "--design", LADDER_DESIGN, "--trials", "100000000"], "--trials"),
    (["fit", BOARD, BOARD], "same file"),
    (["fit", BOARD, "--plot", BOARD], "input file"),
    (["fit", BOARD, "--form", "nonsense"], "--form"),
    (["fit", BOARD, "--edge-time", "abc"], "--edge-time"),
    (["fit", "no_such_file.csv", "--edge-time", "abc"], "--edge-time"),  # the usage error comes first
    (["inspect", BOARD, "--time-origin", "1e300"], "--time-origin"),
]


@pytest.mark.parametrize("argv, named", BAD_ARGUMENTS, ids=[" ".join(map(str, a[0][:1] + a[0][2:])) for a in BAD_ARGUMENTS])
def test_bad_arguments_are_usage_errors(capsys, argv, named):
    status, out, err = run(capsys, *argv)
    assert status == exitcodes.USAGE
    assert named in err and one_line_error(err) and out == ""


def test_batch_with_an_unknown_form_stops_before_any_work(capsys, tmp_path):
    status, out, err = run(capsys, "batch", BOARD, "--out", tmp_path / "out", "--form", "nonsense")
    assert status == exitcodes.USAGE and "--form" in err
    assert not (tmp_path / "out").exists()  # nothing was processed or written


@settings(**HYPO)
@given(value=st.one_of(st.floats(min_value=1e-308, max_value=1e-13), st.floats(min_value=1e5, max_value=1e308),
                       st.floats(max_value=0.0, allow_infinity=False, allow_nan=False)))
def test_any_implausible_sample_interval_is_a_usage_error(capsys, value):
    status, _, err = run(capsys, "fit", BOARD, "--time-column", "none", "--sample-interval", repr(value))
    assert status == exitcodes.USAGE and "--sample-interval" in err and one_line_error(err)


@settings(**HYPO)
@given(name=st.text(alphabet="abcdefghijklmnopqrstuvwxyz-_0123456789", min_size=1, max_size=12))
def test_an_unknown_encoding_is_a_usage_error(capsys, name):
    try:
        codecs.lookup(name)
        known = True
    except LookupError:
        known = False
    status, _, err = run(capsys, "inspect", BOARD, "--encoding", name)
    if known:
        assert status != exitcodes.INTERNAL and "Traceback" not in err
    else:
        assert status == exitcodes.USAGE and "--encoding" in err


@settings(**HYPO)
@given(seed=st.integers(max_value=-1) | st.integers(min_value=2**32))
def test_a_seed_out_of_range_is_a_usage_error(capsys, seed):
    status, _, err = run(capsys, "check", BOARD, "--design", LADDER_DESIGN, "--seed", str(seed))
    assert status == exitcodes.USAGE and "--seed" in err


# -- exit statuses of the README ----------------------------------------------------------

def test_a_directory_given_as_a_capture_is_unusable_input(capsys, tmp_path):
    for command in (["fit"], ["inspect"], ["check", "--design", LADDER_DESIGN]):
        status, _, err = run(capsys, command[0], tmp_path, *command[1:])
        assert status == exitcodes.UNUSABLE_INPUT and "directory" in err and one_line_error(err)


@pytest.mark.skipif(sys.platform == "win32" or (hasattr(__import__("os"), "geteuid") and __import__("os").geteuid() == 0),
                    reason="file permissions do not stop the superuser from reading")
def test_an_unreadable_file_is_unusable_input(capsys, tmp_path):
    locked = tmp_path / "locked.csv"
    locked.write_bytes(BOARD.read_bytes())
    locked.chmod(0)
    status, _, err = run(capsys, "fit", locked)
    assert status == exitcodes.UNUSABLE_INPUT and "locked.csv" in err


def test_a_missing_design_for_a_batch_is_unusable_input_before_any_work(capsys, tmp_path):
    status, _, err = run(capsys, "batch", BOARD, "--out", tmp_path / "out", "--design", tmp_path / "no.toml")
    assert status == exitcodes.UNUSABLE_INPUT and "no.toml" in err
    assert not (tmp_path / "out" / "captures").exists()


def test_a_full_disk_on_standard_output_is_one_line_not_a_bug(capsys, monkeypatch):
    import click

    def full(*args, **kwargs):
        if not kwargs.get("err"):
            raise OSError(errno.ENOSPC, "No space left on device")
    monkeypatch.setattr(click, "echo", full)
    status, _, _ = run(capsys, "inspect", BOARD)
    assert status == exitcodes.OUTPUT_FAILED


def test_a_full_disk_during_a_batch_names_the_file(capsys, tmp_path, monkeypatch):
    def full(src, dst):
        raise OSError(errno.ENOSPC, "No space left on device")
    monkeypatch.setattr("fitkit.atomic.os.replace", full)
    status, _, err = run(capsys, "batch", BOARD, "--out", tmp_path / "out", "--workers", "1", "--no-plots")
    assert status == exitcodes.OUTPUT_FAILED
    assert "No space left" in err and str(tmp_path / "out") in err and "internal error" not in err


def test_a_closed_pipe_does_not_change_the_batch_status(tmp_path):
    # `fitkit batch ... | head -1`: the reader leaves after one line; the batch
    # still finishes, saves its summary and exits with its own status (0 here).
    proc = subprocess.Popen([sys.executable, "-m", "fitkit", "batch",
                             str(BOARD), str(DEMO / "good_board_ladder.csv"), "--out", str(tmp_path / "out"),
                             "--workers", "1", "--no-plots"],
                            stdout=subprocess.PIPE, stderr=subprocess.PIPE)
    proc.stdout.readline()
    proc.stdout.close()
    _, err = proc.communicate(timeout=300)
    assert proc.returncode == exitcodes.OK
    assert b"Traceback" not in err and b"BrokenPipe" not in err
    assert (tmp_path / "out" / "summary.csv").exists()


def test_numerical_warnings_never_reach_stderr(tmp_path):
    # huge values and a one-code step make numpy warn; the user sees one line or nothing
    t = np.arange(400) * 1e-6
    v = np.where(t > 1e-4, 1e300, -1e300)
    path = tmp_path / "huge.csv"
    path.write_text("Time (s),V (V)\n" + "\n".join(f"{a:.6e},{b:.6e}" for a, b in zip(t, v)) + "\n")
    proc = subprocess.run([sys.executable, "-m", "fitkit", "fit", str(path)], capture_output=True, timeout=300)
    err = proc.stderr.decode()
    assert "Warning" not in err and ".py:" not in err and "Traceback" not in err
    assert proc.returncode != exitcodes.INTERNAL


def test_a_time_column_in_ms_without_a_unit_is_warned_by_fit(capsys, tmp_path):
    # a logger's whole milliseconds: fit (not only inspect) says how it read them
    k = np.arange(120)
    v = np.where(k >= 30, 1 - np.exp(-(k - 30) / 10.0), 0.0)
    path = tmp_path / "logger.csv"
    path.write_text("\n".join(f"{2 * i};{x:.5f}" for i, x in zip(k, v)) + "\n")
    status, out, _ = run(capsys, "fit", path, "--form", "first-order")
    assert status == exitcodes.OK
    assert "milliseconds" in out
    assert "tau " in out and " ms " in out.split("tau ", 1)[1].splitlines()[0]  # 2 ms steps, tau 20 ms


def test_a_sample_interval_for_a_file_with_a_time_column_is_said(capsys):
    status, out, _ = run(capsys, "fit", BOARD, "--sample-interval", "1u")
    assert status == exitcodes.OK and "--sample-interval ignored" in out
