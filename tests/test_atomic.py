"""Outputs are written atomically and never half-written."""

import os

import pytest

from fitkit.atomic import write_bytes_atomic, write_text_atomic
from fitkit.errors import OptionError


def test_write_replaces_atomically(tmp_path):
    target = tmp_path / "out" / "result.json"
    write_text_atomic(target, "first")
    write_text_atomic(target, "second")
    assert target.read_text() == "second"
    assert [p.name for p in target.parent.iterdir()] == ["result.json"]  # no temporary left


def test_no_overwrite_when_not_asked(tmp_path):
    target = tmp_path / "keep.txt"
    target.write_text("precious")
    with pytest.raises(OptionError):
        write_text_atomic(target, "new", overwrite=False)
    assert target.read_text() == "precious"


def test_failed_write_leaves_old_file(tmp_path, monkeypatch):
    target = tmp_path / "keep.bin"
    target.write_bytes(b"old")

    def failing_replace(src, dst):
        raise OSError("disk full")
    monkeypatch.setattr(os, "replace", failing_replace)
    with pytest.raises(OSError):
        write_bytes_atomic(target, b"new")
    assert target.read_bytes() == b"old"
    assert [p.name for p in tmp_path.iterdir()] == ["keep.bin"]


def test_output_gets_the_usual_file_mode(tmp_path):
    old = os.umask(0o022)
    try:
        target = write_text_atomic(tmp_path / "r.txt", "x")
    finally:
        os.umask(old)
    assert (target.stat().st_mode & 0o777) == 0o644
