"""`fitkit batch --follow --store`: captures taken only once written, a follow killed and restarted
loses and duplicates nothing, SIGTERM stops it cleanly; `fitkit check --store`; `fitkit trend` outputs."""

from __future__ import annotations

import hashlib
import json
import os
import signal
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
import pytest

from fitkit.line_store import open_store

FIT_OPTIONS = ["--form", "first-order", "--workers", "1", "--no-plots"]
#: Poll interval of the follower; the growing file below changes ten times as often.
POLL_S = 1.0


def capture_text(tau: float, seed: int, serial: int) -> str:
    """A first-order step response (time constant tau, s) with noise, in a key,value layout."""
    rng = np.random.default_rng(seed)
    t = np.arange(-100, 900) * 1e-5
    y = np.where(t > 0, 1 - np.exp(-np.clip(t, 0, None) / tau), 0.0) + 0.002 * rng.standard_normal(t.size)
    head = f"Board,test board serial {serial}\nBench,follow test bench\nDate,2026-11-23 06:{serial % 60:02d}:00\n\n"
    return head + "Time (s),Output (V)\n" + "".join(f"{a:.6e},{b:.5f}\n" for a, b in zip(t, y))


def _fitkit(*args: str, **kwargs) -> subprocess.Popen:
    return subprocess.Popen([sys.executable, "-m", "fitkit", *args], stdout=subprocess.PIPE, stderr=subprocess.PIPE,
                            text=True, **kwargs)


def _wait_for(predicate, timeout: float = 180.0) -> None:
    deadline = time.monotonic() + timeout
    while time.monotonic() < deadline:
        if predicate():
            return
        time.sleep(0.2)
    raise AssertionError("timed out waiting for the follower")


def _stored_hashes(store: Path) -> list[str]:
    if not store.exists():
        return []
    try:
        with open_store(str(store)) as s:
            return list(s.captures_frame()["file_sha256"])
    except Exception:  # the follower may hold the write lock for a moment
        return []


def test_follow_killed_and_restarted_loses_and_duplicates_nothing(tmp_path):
    folder, out, store = tmp_path / "line", tmp_path / "out", tmp_path / "line.sqlite"
    folder.mkdir()
    for i in range(3):
        (folder / f"board_{1000 + i}.csv").write_text(capture_text(1e-3 * (1 + 0.01 * i), i, 1000 + i))
    args = ["batch", str(folder), "--out", str(out), "--follow", "--poll", str(POLL_S), "--store", str(store),
            *FIT_OPTIONS]
    follower = _fitkit(*args)
    try:
        _wait_for(lambda: len(_stored_hashes(store)) == 3)
        # a capture still being written, in pieces over several polls
        growing = folder / "board_1003.csv"
        text = capture_text(1.1e-3, 3, 1003)
        pieces = 40
        with open(growing, "w") as fh:
            for k in range(pieces):
                fh.write(text[k * len(text) // pieces:(k + 1) * len(text) // pieces])
                fh.flush()
                time.sleep(POLL_S / 10)
        for i in (4, 5):
            (folder / f"board_{1000 + i}.csv").write_text(capture_text(1e-3, i, 1000 + i))
        time.sleep(POLL_S / 2)
    finally:
        follower.send_signal(signal.SIGKILL)  # killed hard, at any point of its work
        follower.communicate(timeout=60)
    restarted = _fitkit(*args)
    try:
        _wait_for(lambda: len(_stored_hashes(store)) >= 6)
        time.sleep(2 * POLL_S)  # further polls must add nothing
    finally:
        restarted.send_signal(signal.SIGTERM)
        stdout, stderr = restarted.communicate(timeout=120)
    assert restarted.returncode == 0, stderr
    assert "stopped" in stdout
    hashes = _stored_hashes(store)
    expected = {hashlib.sha256(p.read_bytes()).hexdigest() for p in folder.glob("*.csv")}
    assert len(hashes) == 6 and set(hashes) == expected  # the partial file was never stored
    summary = (out / "summary.csv").read_text().splitlines()
    assert len(summary) == 1 + 6
    with open_store(str(store)) as s:
        captures = s.captures_frame()
    assert sorted(captures["board_serial"]) == [str(1000 + i) for i in range(6)]
    assert set(captures["fixture"]) == {"follow test bench"}
    assert not list(out.glob("**/.*.tmp"))


def test_batch_and_check_store_and_trend(tmp_path):
    folder, store = tmp_path / "line", tmp_path / "line.sqlite"
    folder.mkdir()
    for i in range(12):
        (folder / f"board_{2000 + i}.csv").write_text(capture_text(1e-3 * (1 + 0.002 * i), 100 + i, 2000 + i))
    first = subprocess.run([sys.executable, "-m", "fitkit", "batch", str(folder), "--out", str(tmp_path / "out"),
                            "--store", str(store), "--form", "first-order", "--workers", "1", "--no-plots"],
                           capture_output=True, text=True, timeout=300)
    assert first.returncode == 0, first.stderr
    again = subprocess.run([sys.executable, "-m", "fitkit", "batch", str(folder), "--out", str(tmp_path / "out"),
                            "--store", str(store), "--form", "first-order", "--workers", "1", "--no-plots"],
                           capture_output=True, text=True, timeout=300)
    assert "0 captures added" in again.stderr  # the same files again: nothing added
    with open_store(str(store)) as s:
        assert s.count() == 12
        tau = s.values_frame().query("name == 'tau'")
    assert len(tau) == 12 and tau["value"].between(0.9e-3, 1.1e-3).all()

    csv_path, html_path = tmp_path / "trend.csv", tmp_path / "trend.html"
    stored_bytes = store.read_bytes()
    result = subprocess.run([sys.executable, "-m", "fitkit", "trend", str(store), "--baseline", "8", "--quantity", "tau",
                             "--csv", str(csv_path), "--html", str(html_path)], capture_output=True, text=True,
                            timeout=300)
    assert result.returncode == 0, result.stderr
    assert store.read_bytes() == stored_bytes  # reading trends leaves the store as it was
    assert "tau" in result.stdout and "EWMA lambda 0.2" in result.stdout
    assert csv_path.read_text().splitlines()[0].startswith("design,kind,name")
    page = html_path.read_text()
    assert "<svg" in page and "Content-Security-Policy" in page and "http://" not in page.split("<svg", 1)[0]
    doc = json.loads(subprocess.run([sys.executable, "-m", "fitkit", "trend", str(store), "--json"],
                                    capture_output=True, text=True, timeout=300).stdout)
    tau_trend = next(t for t in doc["trends"] if t["name"] == "tau")
    assert tau_trend["boards"] == 12 and len(tau_trend["series"]["value"]) == 12
    assert tau_trend["settings"]["cusum_h"] == 5.0


def test_check_store(tmp_path):
    demo = Path(__file__).resolve().parent.parent / "demo_captures"
    store = tmp_path / "bench.sqlite"
    args = [sys.executable, "-m", "fitkit", "check", str(demo / "good_board.csv"), "--design",
            str(demo / "designs" / "input_rc_lowpass.toml"), "--store", str(store), "--serial-field", "Board"]
    first = subprocess.run(args, capture_output=True, text=True, timeout=300)
    assert first.returncode == 0, first.stderr
    assert "store: added" in first.stderr
    second = subprocess.run(args, capture_output=True, text=True, timeout=300)
    assert "store: already in" in second.stderr
    with open_store(str(store)) as s:
        captures, values = s.captures_frame(), s.values_frame()
    assert len(captures) == 1
    row = captures.iloc[0]
    assert row["board_serial"] == "0417" and row["verdict"] == "pass"
    assert str(row["captured_at"]).startswith("2026-11-18 15:22:41")  # the header's Date field
    assert row["fixture"] == "production test bench 2"
    parts = values[values["kind"] == "part"]
    assert set(parts["name"]) == {"R11", "C11"}
    assert parts["limit_low"].notna().all()


def test_bad_store_is_a_usage_error(tmp_path):
    demo = Path(__file__).resolve().parent.parent / "demo_captures"
    result = subprocess.run([sys.executable, "-m", "fitkit", "batch", str(demo / "good_board.csv"), "--out",
                             str(tmp_path / "o"), "--store", "mysql://x@y/z"], capture_output=True, text=True,
                            timeout=120)
    assert result.returncode == 2 and "not supported" in result.stderr and "Traceback" not in result.stderr
    bad = subprocess.run([sys.executable, "-m", "fitkit", "trend", str(tmp_path / "nothing.sqlite")],
                         capture_output=True, text=True, timeout=120)
    assert bad.returncode == 2 and "no store" in bad.stderr
