"""One batch at a time per output folder: a second batch is refused with a
one-line error, a lock left by a killed batch is taken over, nothing is lost."""

from __future__ import annotations

import json
import os
import socket
import subprocess
import sys

from fitkit import exitcodes
from fitkit.batch import BatchSettings, run_batch
from fitkit.batch.folder_lock import LOCK_NAME, output_folder_lock
from fitkit.cli import cli
from fitkit.cli.errors_to_exit import run_with_error_handling
from support.batch_captures import write_good_first_order

ARGS = ["--form", "first-order", "--workers", "1", "--no-plots"]


def _write_lock(folder, pid, host=None):
    folder.mkdir(parents=True, exist_ok=True)
    lock = folder / LOCK_NAME
    lock.write_text(json.dumps({"pid": pid, "host": host or socket.gethostname(),
                                "started_utc": "2026-12-01T08:00:00Z"}))
    return lock


def _finished_pid():
    proc = subprocess.Popen([sys.executable, "-c", "pass"])
    proc.wait()
    return proc.pid


def test_a_second_batch_on_a_busy_folder_is_refused_and_touches_nothing(tmp_path, capsys):
    capture = write_good_first_order(tmp_path / "board.csv", 1e-3, seed=1)
    out = tmp_path / "out"
    holder = subprocess.Popen([sys.executable, "-c", "import time; time.sleep(60)"])
    try:
        lock = _write_lock(out, holder.pid)
        before = lock.read_bytes()
        status = run_with_error_handling(cli, ["batch", str(capture), "--out", str(out), *ARGS])
        _, err = capsys.readouterr()
    finally:
        holder.kill()
        holder.wait()
    assert status == exitcodes.USAGE
    lines = [ln for ln in err.splitlines() if ln.strip()]
    assert any("another fitkit batch" in ln and f"process {holder.pid}" in ln and str(out) in ln for ln in lines)
    assert "Traceback" not in err
    assert lock.read_bytes() == before  # the other batch's lock is left alone
    assert sorted(p.name for p in out.iterdir()) == [LOCK_NAME]  # nothing written
    assert capture.exists()


def test_a_lock_from_another_host_is_respected(tmp_path):
    out = tmp_path / "out"
    _write_lock(out, 12345, host="bench-pc-not-this-one")
    capture = write_good_first_order(tmp_path / "board.csv", 1e-3, seed=2)
    status = run_with_error_handling(cli, ["batch", str(capture), "--out", str(out), *ARGS])
    assert status == exitcodes.USAGE


def test_a_stale_lock_of_a_killed_batch_is_taken_over_and_released(tmp_path, capsys):
    out = tmp_path / "out"
    _write_lock(out, _finished_pid())
    capture = write_good_first_order(tmp_path / "board.csv", 1e-3, seed=3)
    status = run_with_error_handling(cli, ["batch", str(capture), "--out", str(out), *ARGS])
    capsys.readouterr()
    assert status == exitcodes.OK
    assert not (out / LOCK_NAME).exists()
    assert (out / "summary.csv").exists()


def test_the_lock_is_reentrant_in_one_process_and_released_by_its_creator(tmp_path):
    out = tmp_path / "out"
    capture = write_good_first_order(tmp_path / "board.csv", 1e-3, seed=4)
    with output_folder_lock(out) as lock:
        assert json.loads(lock.read_text())["pid"] == os.getpid()
        run = run_batch([str(capture)], BatchSettings(model="first-order"), out, workers=1)
        assert lock.exists()  # the inner holder does not release the outer one's lock
    assert [r["status"] for r in run.records] == ["fitted"]
    assert not lock.exists()
