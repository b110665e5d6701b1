"""The same batch on a Dask cluster, on a local process pool and in this process:
identical summaries (timing columns aside)."""

from __future__ import annotations

import pytest

from fitkit.batch import BatchSettings, run_batch, summary_frame
from fitkit.batch.summary import TIMING_COLUMNS
from fitkit.errors import OptionError
from support.batch_captures import line_folder

distributed = pytest.importorskip("distributed")


def _table(run):
    frame, units = summary_frame(run)
    return frame.drop(columns=list(TIMING_COLUMNS)), units


def test_dask_local_pool_and_in_process_runs_agree(tmp_path):
    files = line_folder(tmp_path, n_good=3)
    settings = BatchSettings(model="first-order")
    inputs = [str(tmp_path / "line"), str(tmp_path / "missing.csv")]

    in_process = run_batch(inputs, settings, tmp_path / "one", workers=1)
    pool = run_batch(inputs, settings, tmp_path / "pool", workers=2)
    with distributed.LocalCluster(n_workers=1, threads_per_worker=2, processes=False,
                                  dashboard_address=None) as cluster:
        on_dask = run_batch(inputs, settings, tmp_path / "dask", cluster=cluster.scheduler_address)

    reference, units = _table(in_process)
    assert len(reference) == sum(len(v) for v in files.values()) + 1
    assert set(reference["status"]) == {"fitted", "no-step", "fit-failed", "unreadable", "missing"}
    for other in (pool, on_dask):
        frame, other_units = _table(other)
        # exact equality: the same function on the same bytes gives the same numbers
        assert frame.equals(reference), frame.compare(reference)
        assert other_units == units
        assert other.computed == in_process.computed == len({p.read_bytes() for v in files.values() for p in v})
    for folder in ("pool", "dask"):
        assert sorted(p.name for p in (tmp_path / folder / "captures").glob("*.json")) == \
            sorted(p.name for p in (tmp_path / "one" / "captures").glob("*.json"))


def test_a_bad_scheduler_address_is_a_clear_option_error(tmp_path):
    files = line_folder(tmp_path, n_good=1)
    with pytest.raises(OptionError, match="cannot reach the Dask scheduler"):
        run_batch([str(files["fitted"][0])], BatchSettings(model="first-order"), tmp_path / "o",
                  cluster="nonsense://scheduler")
