"""Batch inputs, the per-capture job and the exit status, piece by piece."""

from __future__ import annotations

import hashlib
import os

import pytest

from fitkit import exitcodes
from fitkit.batch import BatchRun, BatchSettings, batch_exit_status, discover_inputs, process_capture
from fitkit.batch.discover import content_hash
from fitkit.batch.runner import plan_batch, result_key
from fitkit.errors import OptionError
from support.batch_captures import write_flat, write_garbage, write_good_first_order, write_glitch


def _touch(path, text="x"):
    path.parent.mkdir(parents=True, exist_ok=True)
    path.write_text(text)
    return path


def test_files_folders_patterns_and_missing_names_are_all_inputs(tmp_path, monkeypatch):
    monkeypatch.chdir(tmp_path)
    for name in ("a/1.csv", "a/2.txt", "a/sub/3.npz", "a/notes.md", "a/.hidden.csv", "a/.cache/4.csv",
                 "b/x.csv", "b/y.csv"):
        _touch(tmp_path / name)
    (tmp_path / "empty_folder").mkdir()
    found = discover_inputs(["a", "b/*.csv", "b/x.csv", "nothere.csv", "zz*.csv", "empty_folder"])
    paths = [(i.path, i.missing_reason is None) for i in found]
    assert paths == [
        (os.path.join("a", "1.csv"), True), (os.path.join("a", "2.txt"), True),
        (os.path.join("a", "sub", "3.npz"), True),           # folders: recursive, sorted, captures only
        (os.path.join("b", "x.csv"), True), (os.path.join("b", "y.csv"), True),   # the pattern
        ("b/x.csv", True),                                   # named again: kept (a duplicate row later)
        ("nothere.csv", False), ("zz*.csv", False), ("empty_folder", False),
    ]
    reasons = {i.path: i.missing_reason for i in found if i.missing_reason}
    assert reasons["nothere.csv"] == "no such file or folder"
    assert reasons["zz*.csv"] == "pattern matches no file"
    assert reasons["empty_folder"].startswith("folder holds no capture files")


def test_output_folder_inside_an_input_folder_is_not_read(tmp_path):
    _touch(tmp_path / "line" / "board.csv")
    _touch(tmp_path / "line" / "results" / "summary.csv")
    found = discover_inputs([tmp_path / "line", str(tmp_path / "line" / "**" / "*.csv")],
                            exclude=tmp_path / "line" / "results")
    assert [os.path.basename(i.path) for i in found] == ["board.csv", "board.csv"]


def test_content_hash_is_sha256_of_the_bytes(tmp_path):
    # Reference: hashlib's SHA-256 of the whole file at once (FIPS 180-4 digest).
    data = os.urandom(3 * 1024 + 17)
    path = tmp_path / "f.bin"
    path.write_bytes(data)
    assert content_hash(path, chunk=1000) == hashlib.sha256(data).hexdigest()


def test_resume_key_changes_with_content_and_each_setting():
    base = BatchSettings()
    keys = {result_key("a" * 64, base), result_key("b" * 64, base),
            result_key("a" * 64, BatchSettings(model="first-order")),
            result_key("a" * 64, BatchSettings(average=True)),
            result_key("a" * 64, BatchSettings(output="2")),
            result_key("a" * 64, BatchSettings(read_options={"sample_interval": "1u"}))}
    assert len(keys) == 6
    # options left at their default (None) do not change the key
    assert result_key("a" * 64, BatchSettings(read_options={"skip_rows": None})) == result_key("a" * 64, base)


def test_worker_gives_a_status_and_reason_for_every_outcome(tmp_path):
    settings = BatchSettings(model="first-order")
    good = process_capture(str(write_good_first_order(tmp_path / "g.csv", 100e-6, seed=1)), settings)
    assert good["status"] == "fitted" and good["model"] == "first-order" and good["reason"] == ""
    tau = good["quantities"]["tau"]
    assert tau["unit"] == "s" and tau["kind"] == "parameter"
    # truth from the textbook first-order response the file was written from
    assert tau["ci95"][0] < 100e-6 < tau["ci95"][1]
    assert good["result"]["model"] == "first-order"

    outcomes = {
        "no-step": write_flat(tmp_path / "flat.csv", seed=2),
        "fit-failed": write_glitch(tmp_path / "glitch.csv", seed=3),
        "unreadable": write_garbage(tmp_path / "garbage.csv", seed=4),
    }
    for status, path in outcomes.items():
        record = process_capture(str(path), settings)
        assert record["status"] == status, record
        assert record["reason"] and str(path) not in record["reason"]   # the row names the file
        assert record["quantities"] == {} and record["elapsed_s"] >= 0


def test_worker_reports_a_missing_file_as_unreadable(tmp_path):
    record = process_capture(str(tmp_path / "gone.csv"), BatchSettings())
    assert record["status"] == "unreadable" and "not found" in record["reason"]


def _run(*statuses):
    return BatchRun(records=tuple({"file": f"f{i}", "status": s} for i, s in enumerate(statuses)),
                    computed=len(statuses), resumed=0)


@pytest.mark.parametrize("statuses, expected", [
    (("fitted", "fitted"), exitcodes.OK),
    (("pass", "pass"), exitcodes.OK),
    (("pass", "inconclusive"), exitcodes.INCONCLUSIVE),
    (("fitted", "fit-failed", "inconclusive"), exitcodes.ANALYSIS_FAILED),
    (("fitted", "no-step", "fit-failed"), exitcodes.UNUSABLE_INPUT),
    (("fitted", "missing"), exitcodes.UNUSABLE_INPUT),
    (("unreadable", "fit-failed"), exitcodes.UNUSABLE_INPUT),
    (("unreadable", "error"), exitcodes.INTERNAL),
    (("error", "fail", "unreadable"), exitcodes.FAIL),
])
def test_exit_status_follows_the_documented_order(statuses, expected):
    assert batch_exit_status(_run(*statuses)) == expected


def test_no_inputs_is_an_option_error(tmp_path):
    with pytest.raises(OptionError, match="no inputs"):
        plan_batch([], BatchSettings(), tmp_path / "out")


def test_input_and_output_files_of_one_capture_are_one_input(tmp_path, monkeypatch):
    # the naming rule of fitkit.io.pairs: NAME_input.EXT + NAME_output.EXT in one folder
    monkeypatch.chdir(tmp_path)
    for name in ("d/board_7_input.csv", "d/board_7_output.csv", "d/board_8_output.csv", "d/board_9.csv",
                 "d/other_input.txt", "d/other_output.csv"):
        _touch(tmp_path / name)
    found = [i.path for i in discover_inputs(["d"])]
    assert found == [os.path.join("d", "board_7_input.csv") + " + " + os.path.join("d", "board_7_output.csv"),
                     os.path.join("d", "board_8_output.csv"),     # no partner: a capture of its own
                     os.path.join("d", "board_9.csv"),
                     os.path.join("d", "other_input.txt"), os.path.join("d", "other_output.csv")]  # not one extension
    # a pair's name, as a batch reports it, is an input again (a --follow run passes it back)
    assert [i.path for i in discover_inputs([found[0]])] == [found[0]]
    # its content hash covers both files: a change to either is a new capture
    before = content_hash(found[0])
    _touch(tmp_path / "d" / "board_7_output.csv", "y")
    assert content_hash(found[0]) != before


def test_a_pair_is_fitted_as_input_and_output(tmp_path):
    # the demo's one-file-per-channel capture: read as `fitkit fit IN OUT` reads it
    from pathlib import Path
    demo = Path(__file__).resolve().parents[1] / "demo_captures"
    name = f"{demo / 'wrong_part_board_ladder_input.csv'} + {demo / 'wrong_part_board_ladder_output.csv'}"
    record = process_capture(name, BatchSettings(model="auto"))
    assert record["status"] == "fitted", record["reason"]
    # measured-input mode needs the input file's channel: both files were read
    assert record["result"]["extra"]["mode"] == "measured input"
