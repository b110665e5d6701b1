"""A batch killed midway (SIGKILL, as by a power cut or the OOM killer) and run
again gives the same summary as one that was never interrupted."""

from __future__ import annotations

import json
import os
import re
import signal
import subprocess
import sys
import time

import pandas as pd
import pytest

from fitkit.batch import BatchSettings, run_batch, write_summary
from fitkit.cli import cli
from fitkit.cli.errors_to_exit import run_with_error_handling
from support.batch_captures import frame_without_timing, write_garbage, write_glitch, write_good_first_order

N_BOARDS = 24
KILL_AFTER = 3          # per-capture results on disk before the kill


@pytest.mark.skipif(not hasattr(signal, "SIGKILL"), reason="needs POSIX signals")
def test_killed_batch_resumes_to_the_same_summary(tmp_path, capsys):
    folder = tmp_path / "line"
    for i in range(N_BOARDS):
        write_good_first_order(folder / f"board_{i:02d}.csv", 100e-6 * (1 + 0.01 * (i % 7)), seed=i)
    write_glitch(folder / "board_glitch.csv", seed=99)
    write_garbage(folder / "board_garbage.csv", seed=98)
    distinct = N_BOARDS + 2
    killed = tmp_path / "killed"
    args = [str(folder), "--out", str(killed), "--workers", "1", "--form", "first-order", "--no-plots"]

    proc = subprocess.Popen([sys.executable, "-m", "fitkit", "batch", *args],
                            stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
    deadline = time.monotonic() + 180
    results = killed / "captures"
    try:
        while len(list(results.glob("*.json")) if results.is_dir() else []) < KILL_AFTER:
            assert proc.poll() is None, "the batch ended before it could be killed"
            assert time.monotonic() < deadline, "no result appeared in time"
            time.sleep(0.005)
        proc.send_signal(signal.SIGKILL)
    finally:
        proc.kill()
        proc.wait()
    assert proc.returncode == -signal.SIGKILL
    saved = list(results.glob("*.json"))
    assert KILL_AFTER <= len(saved) < distinct                # killed midway
    assert not (killed / "summary.csv").exists()
    for path in saved:                                        # whatever was finished is whole
        assert json.loads(path.read_text())["record"]["status"]

    status = run_with_error_handling(cli, ["batch", *args])
    text = capsys.readouterr().out
    match = re.search(r"\((\d+) processed now, (\d+) from an earlier run\)", text)
    assert match and (int(match.group(1)), int(match.group(2))) == (distinct - len(saved), len(saved))
    assert not [p for p in killed.rglob("*") if p.name.endswith(".tmp")]

    # the same batch, never interrupted
    clean = tmp_path / "clean"
    settings = BatchSettings(model="first-order")
    reference = run_batch([str(folder)], settings, clean, workers=1)
    write_summary(reference, clean)
    pd.testing.assert_frame_equal(frame_without_timing(killed / "summary.csv"),
                                  frame_without_timing(clean / "summary.csv"))
    assert status == 4                                        # the garbage file: unusable input
    assert sorted(p.name for p in (clean / "captures").glob("*.json")) == \
        sorted(p.name for p in results.glob("*.json"))
    assert os.path.getsize(killed / "summary.parquet") > 0
