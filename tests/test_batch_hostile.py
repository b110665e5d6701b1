"""Batch faults (issue 19): every folder entry gets a row, the tally counts
each input once, workers die with the batch, SIGTERM acts as Ctrl-C, and
captures lost with a dead worker are retried on a fresh pool."""

from __future__ import annotations

import os
import signal
import subprocess
import sys
import time
from pathlib import Path

import pytest

from fitkit import exitcodes
from fitkit.batch import runner
from fitkit.batch.discover import discover_inputs
from fitkit.cli import cli
from fitkit.cli.errors_to_exit import run_with_error_handling

DEMO = Path(__file__).resolve().parents[1] / "demo_captures"
POSIX = pytest.mark.skipif(sys.platform == "win32", reason="symbolic links, FIFOs and signals of POSIX")


@POSIX
def test_every_folder_entry_gets_a_row(tmp_path):
    folder = tmp_path / "line"
    folder.mkdir()
    (folder / "good.csv").write_bytes((DEMO / "good_board.csv").read_bytes())
    (folder / "broken.csv").symlink_to(tmp_path / "gone.csv")
    (folder / "loop.csv").symlink_to(folder / "loop.csv")
    os.mkfifo(folder / "pipe.csv")
    sub = folder / "sub"
    sub.mkdir()
    (sub / "up").symlink_to(folder, target_is_directory=True)  # a folder loop
    (folder / "notes.md").write_text("not a capture")
    found = {Path(b.path).name: b for b in discover_inputs([folder])}
    assert found["good.csv"].missing_reason is None
    assert "broken symbolic link" in found["broken.csv"].missing_reason
    assert "loop" in found["loop.csv"].missing_reason
    assert "FIFO" in found["pipe.csv"].missing_reason
    assert any("link loop" in (b.missing_reason or "") for b in found.values() if b.path.endswith("up"))
    assert all(b.status == "unreadable" for name, b in found.items() if name != "good.csv")
    assert "notes.md" not in found


@POSIX
@pytest.mark.skipif(hasattr(os, "geteuid") and os.geteuid() == 0,
                    reason="folder permissions do not stop the superuser from reading")
def test_an_unreadable_subfolder_gets_a_row(tmp_path):
    folder = tmp_path / "line"
    (folder / "locked").mkdir(parents=True)
    (folder / "good.csv").write_bytes((DEMO / "good_board.csv").read_bytes())
    (folder / "locked").chmod(0)
    try:
        found = discover_inputs([folder])
    finally:
        (folder / "locked").chmod(0o755)
    assert any("folder cannot be read" in (b.missing_reason or "") for b in found)


def test_the_tally_counts_each_input_once(capsys, tmp_path):
    status = run_with_error_handling(cli, ["batch", str(DEMO / "good_board.csv"), str(DEMO / "good_board.csv"),
                                           "--out", str(tmp_path / "out"), "--workers", "1", "--no-plots"])
    out = capsys.readouterr().out
    assert status == exitcodes.OK
    assert out.splitlines()[0].startswith("2 inputs: 1 fitted, 1 duplicate")


def test_captures_lost_with_a_dead_worker_are_retried_once(monkeypatch):
    jobs = {"a": "a.csv", "b": "b.csv", "c": "c.csv"}
    rounds = []

    def fake_round(pending, settings, n, complete):
        rounds.append(sorted(pending))
        if len(rounds) == 1:  # the first pool dies: a finished, b and c lost with the worker
            complete("a", {"status": "fitted"})
            return {"b": RuntimeError("worker died"), "c": RuntimeError("worker died")}
        complete("b", {"status": "fitted"})  # a fresh pool: b is fine, c kills its worker again
        return {"c": RuntimeError("worker died")}

    done = {}
    monkeypatch.setattr(runner, "_run_pool_round", fake_round)
    runner._run_locally(jobs, runner.BatchSettings(), 2,
                        lambda key, record, persist=True: done.__setitem__(key, (record["status"], persist)))
    assert rounds == [["a", "b", "c"], ["b", "c"]]
    assert done == {"a": ("fitted", True), "b": ("fitted", True), "c": ("error", False)}


def _start_batch(tmp_path, copies=120):
    """A batch of ``copies`` demo captures started on two workers, returned once
    the workers are busy; enough captures that the batch is still running when
    the test interrupts it (16 were all fitted within the 3 s wait once fits
    became faster)."""
    folder = tmp_path / "in"
    folder.mkdir()
    body = (DEMO / "good_board_sallen_key.csv").read_bytes()
    for i in range(copies):  # distinct contents, so none is a duplicate
        (folder / f"c{i:02d}.csv").write_bytes(f"# copy {i}\n".encode() + body)
    out = tmp_path / "out"
    proc = subprocess.Popen([sys.executable, "-m", "fitkit", "batch", str(folder), "--out", str(out),
                             "--workers", "2", "--no-plots"], stdout=subprocess.PIPE, stderr=subprocess.PIPE)
    deadline = time.monotonic() + 120
    while time.monotonic() < deadline and not _children(proc.pid):
        time.sleep(0.2)
    time.sleep(3.0)  # workers started and busy
    return proc, out


def _children(pid: int) -> list[int]:
    try:
        out = subprocess.run(["pgrep", "-P", str(pid)], capture_output=True, text=True).stdout
    except FileNotFoundError:
        pytest.skip("pgrep is not available")
    return [int(x) for x in out.split()]


def _alive(pid: int) -> bool:
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    try:  # a zombie waiting for its (dead) parent counts as gone
        with open(f"/proc/{pid}/stat") as fh:
            return fh.read().split()[2] != "Z"
    except OSError:
        return True


@POSIX
@pytest.mark.skipif(not sys.platform.startswith("linux"), reason="reads /proc")
def test_workers_die_with_a_killed_batch(tmp_path):
    proc, _ = _start_batch(tmp_path)
    workers = _children(proc.pid)
    assert workers
    proc.kill()  # SIGKILL: no chance to clean up
    proc.wait(timeout=30)
    deadline = time.monotonic() + 15
    while time.monotonic() < deadline and any(_alive(w) for w in workers):
        time.sleep(0.2)
    assert not any(_alive(w) for w in workers)


@POSIX
@pytest.mark.skipif(not sys.platform.startswith("linux"), reason="reads /proc")
def test_sigterm_is_handled_like_ctrl_c(tmp_path):
    proc, out = _start_batch(tmp_path)
    workers = _children(proc.pid)
    proc.send_signal(signal.SIGTERM)
    _, err = proc.communicate(timeout=60)
    assert proc.returncode == 130
    assert b"run the same command again to resume" in err and b"Traceback" not in err
    assert not (out / ".fitkit-batch.lock").exists()
    time.sleep(1.0)
    assert not any(_alive(w) for w in workers)
