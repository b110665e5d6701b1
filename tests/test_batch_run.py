"""`fitkit batch` end to end on a small production-line folder: every input
accounted for with the right status, resuming, --redo, atomic outputs, exit statuses."""

from __future__ import annotations

import glob
import io
import json
import os
import re

import pandas as pd
import pytest

from fitkit import exitcodes
from fitkit.cli import cli
from fitkit.cli.errors_to_exit import run_with_error_handling
from support.batch_captures import (frame_without_timing, line_folder, write_glitch, write_good_first_order)

MODEL = ["--form", "first-order", "--workers", "1"]


def _batch(args, capsys):
    status = run_with_error_handling(cli, ["batch", *args])
    out, err = capsys.readouterr()
    return status, out, err


def _counts_line(out):
    match = re.search(r"\((\d+) processed now, (\d+) from an earlier run\)", out)
    assert match, out
    return int(match.group(1)), int(match.group(2))


@pytest.fixture(scope="module")
def line_run(tmp_path_factory):
    """One batch over the line folder, a pattern repeating some boards, a missing
    file and a pattern that matches nothing; shared by the tests below."""
    root = tmp_path_factory.mktemp("batch")
    files = line_folder(root)
    folder = root / "line"
    pattern = str(folder / "board_00[0-1].csv")
    out = root / "out"
    args = [str(folder), pattern, str(root / "not_there.csv"), str(root / "nothing_*.csv"),
            "--out", str(out), *MODEL]
    status = run_with_error_handling(cli, ["batch", *args, "--no-plots"])
    return dict(root=root, files=files, folder=folder, pattern=pattern, out=out, args=args, status=status)


def test_every_input_has_one_row_with_the_right_status(line_run):
    files, out = line_run["files"], line_run["out"]
    frame = pd.read_csv(out / "summary.csv", keep_default_na=False, na_values=[""])
    in_folder = sorted(str(p) for p in line_run["folder"].iterdir())
    repeated = sorted(glob.glob(line_run["pattern"]))
    assert len(repeated) == 2
    # rows: every file of the folder, the pattern's matches again, two names matching nothing
    assert list(frame["file"]) == in_folder + repeated + [str(line_run["root"] / "not_there.csv"),
                                                          str(line_run["root"] / "nothing_*.csv")]
    status = dict(zip(frame["file"].head(len(in_folder)), frame["status"].head(len(in_folder))))
    for expected, paths in files.items():
        for p in paths:
            assert status[str(p)] == ("fitted" if expected == "duplicate" else expected), p
    assert list(frame["status"].tail(2)) == ["missing", "missing"]
    dup = frame.set_index("file")["duplicate_of"]
    assert dup[str(files["duplicate"][0])] == str(files["fitted"][0])     # same bytes, another name
    assert list(frame["duplicate_of"].iloc[len(in_folder):len(in_folder) + 2]) == repeated  # named twice
    assert frame["duplicate_of"].notna().sum() == 3
    assert line_run["status"] == exitcodes.UNUSABLE_INPUT   # unreadable files and missing names present


def test_good_boards_have_their_time_constant(line_run):
    frame = pd.read_csv(line_run["out"] / "summary.csv").drop_duplicates("file").set_index("file")
    n_good = len(line_run["files"]["fitted"]) - 1            # the last one is the two-pole board
    for i, path in enumerate(line_run["files"]["fitted"][:n_good]):
        # truth: the tau the textbook first-order response was written with
        tau = 100e-6 * (1.0 + 0.04 * (i - n_good / 2) / n_good)
        row = frame.loc[str(path)]
        assert row["tau"] == pytest.approx(tau, rel=0.02)
        assert row["tau_ci95_low"] < row["tau"] < row["tau_ci95_high"]
        assert row["model"] == "first-order"


def test_summary_json_parquet_and_problems_agree_with_the_table(line_run):
    out = line_run["out"]
    frame = pd.read_csv(out / "summary.csv")
    parquet = pd.read_parquet(out / "summary.parquet")
    assert list(parquet.columns) == list(frame.columns) and len(parquet) == len(frame)
    pd.testing.assert_series_equal(parquet["tau"], frame["tau"], check_dtype=False)
    assert list(parquet["status"]) == list(frame["status"])

    doc = json.loads((out / "summary.json").read_text())
    assert doc["n_inputs"] == len(frame) == len(doc["rows"])
    assert doc["counts"] == frame["status"].value_counts().to_dict()
    assert doc["exit_status"] == line_run["status"]
    assert doc["units"]["tau"] == "s"
    measured = frame[(frame["status"] == "fitted") & frame["duplicate_of"].isna()]
    spread = doc["spread"]["tau"]
    assert spread["n"] == len(measured) == len(line_run["files"]["fitted"])
    assert spread["median"] == pytest.approx(measured["tau"].median(), rel=1e-12)
    assert spread["std"] == pytest.approx(measured["tau"].std(ddof=1), rel=1e-9)

    problems = pd.read_csv(out / "problems.csv")
    expected = frame[(frame["status"] != "fitted") | frame["duplicate_of"].notna()]["file"]
    assert list(problems["file"]) == list(expected)
    assert problems["reason"].notna().all()
    assert (problems["reason"].str.len() > 10).all()


def test_each_distinct_capture_is_saved_once_and_nothing_temporary_is_left(line_run):
    out, files = line_run["out"], line_run["files"]
    saved = sorted((out / "captures").glob("*.json"))
    distinct = {p.read_bytes() for group in files.values() for p in group}
    assert len(saved) == len(distinct)
    for path in saved:
        stored = json.loads(path.read_text())
        assert stored["key"].startswith(path.name.split(".")[-2])
        assert stored["record"]["status"]
    assert not [p for p in out.rglob("*") if p.name.endswith(".tmp")]


def test_a_rerun_takes_everything_from_disk_and_gives_the_same_summary(line_run, capsys, tmp_path):
    out = line_run["out"]
    first = frame_without_timing(out / "summary.csv")
    status, text, err = _batch([*line_run["args"], "--no-plots"], capsys)
    distinct = len(list((out / "captures").glob("*.json")))
    assert _counts_line(text) == (0, distinct)
    assert f"0 to process, {distinct} already done" in err
    assert status == line_run["status"]
    pd.testing.assert_frame_equal(frame_without_timing(out / "summary.csv"), first)
    assert pd.read_csv(out / "summary.csv")["resumed"].sum() == len(first) - 2  # all but the missing names


def test_changed_file_damaged_result_and_redo(tmp_path, capsys):
    folder = tmp_path / "line"
    boards = [write_good_first_order(folder / f"b{i}.csv", 100e-6, seed=i) for i in range(3)]
    out = tmp_path / "out"
    args = [str(folder), "--out", str(out), *MODEL, "--no-plots"]
    assert _batch(args, capsys)[0] == exitcodes.OK
    assert _counts_line(_batch(args, capsys)[1]) == (0, 3)

    write_good_first_order(boards[1], 120e-6, seed=11)          # a board captured again
    status, text, _ = _batch(args, capsys)
    assert _counts_line(text) == (1, 2)
    tau = pd.read_csv(out / "summary.csv").set_index("file").loc[str(boards[1]), "tau"]
    assert tau == pytest.approx(120e-6, rel=0.02)               # the new capture's tau, not the old one

    damaged = sorted((out / "captures").glob("b0.*.json"))
    assert len(damaged) == 1
    damaged[0].write_text('{"key": "trunc')                      # e.g. a disk that filled up
    assert _counts_line(_batch(args, capsys)[1]) == (1, 2)

    before = sorted(p.name for p in (out / "captures").glob("*.json"))
    status, text, err = _batch([*args, "--redo"], capsys)
    assert _counts_line(text) == (3, 0) and status == exitcodes.OK
    assert "[3/3]" in err                                        # plain progress lines when not a terminal
    assert sorted(p.name for p in (out / "captures").glob("*.json")) == before

    status, text, _ = _batch([str(folder), "--out", str(out), "--form", "critically-damped",
                              "--workers", "1", "--no-plots"], capsys)
    assert _counts_line(text)[0] == 3                            # other settings: computed afresh


@pytest.mark.parametrize("extra, expected", [
    ([], exitcodes.OK),
    (["glitch"], exitcodes.ANALYSIS_FAILED),
    (["glitch", "missing"], exitcodes.UNUSABLE_INPUT),
])
def test_exit_status(tmp_path, capsys, extra, expected):
    folder = tmp_path / "line"
    paths = [str(write_good_first_order(folder / "good.csv", 100e-6, seed=1))]
    if "glitch" in extra:
        paths.append(str(write_glitch(folder / "glitch.csv", seed=2)))
    if "missing" in extra:
        paths.append(str(folder / "gone.csv"))
    status, text, err = _batch([*paths, "--out", str(tmp_path / "out"), *MODEL, "--no-plots"], capsys)
    assert status == expected
    assert json.loads((tmp_path / "out" / "summary.json").read_text())["exit_status"] == expected
    assert "Traceback" not in err


def test_cli_writes_distribution_plots(tmp_path, capsys):
    folder = tmp_path / "line"
    for i in range(3):
        write_good_first_order(folder / f"b{i}.csv", 100e-6 * (1 + 0.02 * i), seed=i)
    status, text, _ = _batch([str(folder), "--out", str(tmp_path / "out"), *MODEL], capsys)
    assert status == exitcodes.OK
    plots = sorted(p.name for p in (tmp_path / "out" / "distributions").glob("*.png"))
    assert "tau.png" in plots and "distribution plots" in text
    assert (tmp_path / "out" / "distributions" / "tau.png").read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"


def test_bad_usage_is_one_line(tmp_path, capsys):
    status, _, err = _batch([str(tmp_path / "none_*.csv"), "--out", str(tmp_path / "o"), "--workers", "0"],
                            capsys)
    assert status == exitcodes.USAGE and "Traceback" not in err
    assert not os.path.exists(tmp_path / "o")                    # refused before any output


def test_no_capture_anywhere_still_writes_a_summary_of_the_missing(tmp_path, capsys):
    status, text, _ = _batch([str(tmp_path / "none_*.csv"), str(tmp_path / "gone.csv"),
                              "--out", str(tmp_path / "o"), *MODEL], capsys)
    assert status == exitcodes.UNUSABLE_INPUT
    frame = pd.read_csv(tmp_path / "o" / "summary.csv")
    assert list(frame["status"]) == ["missing", "missing"]


def test_a_bug_is_reported_per_capture_and_retried_next_run(tmp_path, monkeypatch):
    import fitkit.batch.worker as worker
    from fitkit.batch import BatchSettings, batch_exit_status, run_batch

    board = write_good_first_order(tmp_path / "line" / "b.csv", 100e-6, seed=1)

    def broken(path, settings, record):
        raise ZeroDivisionError("simulated bug")
    monkeypatch.setattr(worker, "_run_pipeline", broken)
    run = run_batch([str(board)], BatchSettings(model="first-order"), tmp_path / "out", workers=1)
    assert run.records[0]["status"] == "error" and "simulated bug" in run.records[0]["reason"]
    assert batch_exit_status(run) == exitcodes.INTERNAL
    assert not list((tmp_path / "out" / "captures").glob("*.json"))   # not saved: tried again next run
    monkeypatch.undo()
    again = run_batch([str(board)], BatchSettings(model="first-order"), tmp_path / "out", workers=1)
    assert (again.computed, again.resumed, again.records[0]["status"]) == (1, 0, "fitted")


def test_an_output_folder_that_cannot_be_made_is_an_option_error(tmp_path):
    from fitkit.batch import BatchSettings, run_batch
    from fitkit.errors import OptionError

    board = write_good_first_order(tmp_path / "b.csv", 100e-6, seed=1)
    with pytest.raises(OptionError, match="cannot create the output folder"):
        run_batch([str(board)], BatchSettings(), board / "out")      # under a file


class _Terminal(io.StringIO):
    def isatty(self):
        return True


def test_progress_is_a_bar_on_a_terminal_and_lines_otherwise():
    from fitkit.cli.batch_cmd import _progress_printer

    records = [{"status": "fitted", "file": "a.csv"}, {"status": "no-step", "file": "b.csv"},
               {"status": "fitted", "file": "c.csv"}]
    terminal = _Terminal()
    show = _progress_printer(terminal)
    for i, rec in enumerate(records, 1):
        show(i, len(records), rec)
    text = terminal.getvalue()
    assert "3/3" in text and "capture" in text            # the bar, finished
    assert "no-step: b.csv" in text                        # problems are written above the bar
    assert "fitted: a.csv" not in text


def test_reading_options_reach_every_capture_and_the_resume_key(tmp_path, capsys):
    import numpy as np
    from support.batch_captures import N_SAMPLES, RECORD_S, first_order, time_axis

    # a logger export with no time column: the sample interval must be given
    y = first_order(time_axis(), 100e-6) + np.random.default_rng(1).normal(0.0, 0.004, N_SAMPLES)
    folder = tmp_path / "logger"
    folder.mkdir()
    np.savetxt(folder / "b.csv", y[:, None], header="out", comments="", fmt="%.8g")
    out = str(tmp_path / "out")
    status, _, _ = _batch([str(folder), "--out", out, *MODEL, "--no-plots"], capsys)
    assert status == exitcodes.UNUSABLE_INPUT
    assert pd.read_csv(tmp_path / "out" / "summary.csv")["status"].tolist() == ["unreadable"]
    status, text, _ = _batch([str(folder), "--out", out, *MODEL, "--no-plots",
                              "--sample-interval", repr(RECORD_S / N_SAMPLES)], capsys)
    assert status == exitcodes.OK and _counts_line(text) == (1, 0)    # other settings: not resumed
    tau = pd.read_csv(tmp_path / "out" / "summary.csv")["tau"].iloc[0]
    assert tau == pytest.approx(100e-6, rel=0.02)     # truth: textbook first-order response written
