"""Run the per-capture job over many files: in this process, a local process pool or a Dask cluster.

Each finished capture's record is written at once, atomically, to
``OUT/captures/<file stem>.<key>.json``, where the key is a hash of the file's
content, the settings and the fitkit version. So an interrupted batch loses
nothing that was finished, and a re-run takes every finished capture from disk
(unless ``redo``). Files with identical content are processed once; the later
ones are marked as duplicates of the first. The runner never prints: progress
goes to a callback.

One batch at a time per output folder (a lock file, :mod:`.folder_lock`):
temporary files left in it by a killed run are removed when the next run starts.
"""

from __future__ import annotations

import hashlib
import json
import os
import re
from concurrent.futures import Future
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Callable, Iterable

from .. import __version__
from ..atomic import write_text_atomic
from ..errors import OptionError
from .discover import BatchInput, content_hash, discover_inputs
from .folder_lock import output_folder_lock
from .worker import BatchSettings, process_capture

#: progress(done, total, record): called after each capture processed now
#: (done counts from 1 to total = captures to process in this run).
ProgressCallback = Callable[[int, int, dict[str, Any]], None]

#: Bump when the record layout changes, so old results are not reused.
RESULT_FORMAT_VERSION = 2
RESULTS_FOLDER = "captures"
_KEY_CHARS = 20


@dataclass(frozen=True)
class BatchPlan:
    """What a batch will do, decided before any capture is processed.

    inputs: every input in order (see discover_inputs).
    hashes: SHA-256 of each input's bytes (None when missing or unreadable).
    keys: the resume key of each input (None when missing or unreadable).
    reasons: why an input has no key (index -> plain words).
    todo: key -> path of the first input with that key, to be processed now.
    done: key -> record taken from an earlier run.
    """

    inputs: tuple[BatchInput, ...]
    hashes: tuple[str | None, ...]
    keys: tuple[str | None, ...]
    reasons: dict[int, str] = field(default_factory=dict)
    todo: dict[str, str] = field(default_factory=dict)
    done: dict[str, dict[str, Any]] = field(default_factory=dict)

    def to_dict(self) -> dict[str, Any]:
        return {"n_inputs": len(self.inputs), "to_process": len(self.todo), "from_disk": len(self.done),
                "inputs": [i.to_dict() for i in self.inputs]}


@dataclass(frozen=True)
class BatchRun:
    """What a batch did: one record per input, in input order, and counts.

    records: dicts as made by worker.process_capture, without "result" (the
        full fit or check is in OUT/captures/), each with also
        "sha256" (the file's content hash or None), "duplicate_of" (the
        earlier input with identical content, or None) and "resumed" (True when
        the result came from an earlier run).
    computed: captures processed in this run (distinct contents).
    resumed: captures taken from an earlier run's results (distinct contents).
    settings: the settings used; out_dir: the output folder.
    """

    records: tuple[dict[str, Any], ...]
    computed: int
    resumed: int
    settings: BatchSettings = field(default_factory=BatchSettings)
    out_dir: str = ""

    def count(self, status: str) -> int:
        """How many inputs have this status."""
        return sum(1 for r in self.records if r["status"] == status)

    @property
    def duplicates(self) -> int:
        return sum(1 for r in self.records if r.get("duplicate_of"))

    def to_dict(self) -> dict[str, Any]:
        return {"n_inputs": len(self.records), "computed": self.computed, "resumed": self.resumed,
                "duplicates": self.duplicates, "settings": self.settings.to_dict(),
                "out_dir": self.out_dir,
                "records": [{k: v for k, v in r.items() if k != "result"} for r in self.records]}


def result_key(file_hash: str, settings: BatchSettings) -> str:
    """Resume key: hash of the file's content hash, the settings, the fitkit version
    and the record format (changing any of them redoes the capture)."""
    payload = json.dumps({"content": file_hash, "settings": settings.to_dict(), "fitkit": __version__,
                          "format": RESULT_FORMAT_VERSION}, sort_keys=True, default=str)
    return hashlib.sha256(payload.encode()).hexdigest()


def _absolute(name: str) -> str:
    """A capture's name with its file(s) as absolute paths (workers may run elsewhere)."""
    from ..io.pairs import capture_files, pair_name
    files = [str(Path(f).resolve()) for f in capture_files(name)]
    return pair_name(*files) if len(files) == 2 else files[0]


def _safe_stem(path: str) -> str:
    stem = re.sub(r"[^A-Za-z0-9_+-]+", "_", Path(path).stem).strip("_")
    return (stem or "capture")[:60]


def _results_index(folder: Path) -> dict[str, list[Path]]:
    """Key prefix -> result files in ``folder`` (names are STEM.KEYPREFIX.json)."""
    index: dict[str, list[Path]] = {}
    if folder.is_dir():
        for f in folder.iterdir():
            parts = f.name.split(".")
            if len(parts) >= 3 and parts[-1] == "json" and not f.name.startswith("."):
                index.setdefault(parts[-2], []).append(f)
    return index


def _remove_stale_temporaries(folder: Path) -> None:
    """Delete temporary files a killed run left behind (atomic.py names them .NAME.XXXX.tmp)."""
    if folder.is_dir():
        for f in folder.glob(".*.tmp"):
            try:
                f.unlink()
            except OSError:
                pass


def _load_done(candidates: Iterable[Path], key: str) -> dict[str, Any] | None:
    for path in candidates:
        try:
            stored = json.loads(path.read_text(encoding="utf-8"))
        except (OSError, ValueError):
            continue  # unreadable or damaged by a foreign tool: compute again
        if isinstance(stored, dict) and stored.get("key") == key and isinstance(stored.get("record"), dict):
            record = stored["record"]
            record.pop("result", None)  # stays on disk
            return record
    return None


def plan_batch(paths: Iterable[str | os.PathLike], settings: BatchSettings, out_dir: str | os.PathLike,
               *, redo: bool = False) -> BatchPlan:
    """Find the inputs, hash them, and split them into captures to process and
    captures already done in ``out_dir`` (ignored with ``redo``)."""
    if settings.design:
        from ..check import load_design
        load_design(settings.design)  # a bad design file is one error now, not one per capture
    out = Path(out_dir)
    inputs = tuple(discover_inputs(paths, exclude=out))
    if not inputs:
        raise OptionError("no inputs given", hint="name capture files, folders or glob patterns")
    results = out / RESULTS_FOLDER
    for folder in (out, results, out / "distributions"):
        _remove_stale_temporaries(folder)
    index = {} if redo else _results_index(results)

    hashes: list[str | None] = []
    keys: list[str | None] = []
    reasons: dict[int, str] = {}
    todo: dict[str, str] = {}
    done: dict[str, dict[str, Any]] = {}
    for i, item in enumerate(inputs):
        if item.missing_reason:
            hashes.append(None)
            keys.append(None)
            reasons[i] = item.missing_reason
            continue
        try:
            digest = content_hash(item.path)
        except OSError as err:
            hashes.append(None)
            keys.append(None)
            reasons[i] = f"cannot read the file ({err.strerror or err})"
            continue
        key = result_key(digest, settings)
        hashes.append(digest)
        keys.append(key)
        if key in todo or key in done:
            continue
        previous = _load_done(index.get(key[:_KEY_CHARS], ()), key)
        if previous is not None:
            done[key] = previous
        else:
            todo[key] = item.path
    return BatchPlan(inputs=inputs, hashes=tuple(hashes), keys=tuple(keys), reasons=reasons,
                     todo=todo, done=done)


def run_batch(paths: Iterable[str | os.PathLike], settings: BatchSettings, out_dir: str | os.PathLike, *,
              workers: int | None = None, redo: bool = False, cluster: str | None = None,
              progress: ProgressCallback | None = None,
              on_plan: Callable[[BatchPlan], None] | None = None) -> BatchRun:
    """Process every capture named by ``paths`` and return one record per input, in input order.

    workers: local processes (default: the cores this process may use); 1 runs
        everything in this process.
    cluster: address of a Dask distributed scheduler ("tcp://host:8786") to run
        on instead of the local pool (needs the ``fitkit[cluster]`` extra; the
        Dask workers must see the capture files under the same absolute paths).
    redo: process every capture again, even when a result for it exists in ``out_dir``.
    on_plan: called once with the BatchPlan before processing starts.
    Holds the output folder's lock (:mod:`.folder_lock`) throughout.
    Raises OptionError when there are no inputs, the cluster cannot be reached,
    another batch is writing to ``out_dir``,
    or check mode (a design in ``settings``) is not available; DesignError
    when the design file cannot be used.
    """
    out = Path(out_dir)
    with output_folder_lock(out):
        return _run_batch_locked(paths, settings, out, workers=workers, redo=redo, cluster=cluster,
                                 progress=progress, on_plan=on_plan)


def _run_batch_locked(paths: Iterable[str | os.PathLike], settings: BatchSettings, out: Path, *,
                      workers: int | None, redo: bool, cluster: str | None,
                      progress: ProgressCallback | None,
                      on_plan: Callable[[BatchPlan], None] | None) -> BatchRun:
    """run_batch with the output folder's lock held."""
    plan = plan_batch(paths, settings, out, redo=redo)
    try:
        (out / RESULTS_FOLDER).mkdir(parents=True, exist_ok=True)
    except OSError as err:
        raise OptionError(f"cannot create the output folder {out} ({err.strerror or err})",
                          hint="choose a folder you can write to with --out") from None
    if on_plan is not None:
        on_plan(plan)

    done = dict(plan.done)
    total = len(plan.todo)
    finished = 0
    index = _results_index(out / RESULTS_FOLDER)

    def complete(key: str, record: dict[str, Any], persist: bool = True) -> None:
        nonlocal finished
        record["file"] = plan.todo[key]  # as the user named it (workers see absolute paths)
        if persist and record["status"] != "error":  # a crash or a bug is tried again next run
            target = out / RESULTS_FOLDER / f"{_safe_stem(plan.todo[key])}.{key[:_KEY_CHARS]}.json"
            payload = {"key": key, "fitkit": __version__, "settings": settings.to_dict(), "record": record}
            write_text_atomic(target, json.dumps(payload, indent=1, default=str))
            for old in index.get(key[:_KEY_CHARS], ()):  # a result of --redo under another name
                if old != target:
                    old.unlink(missing_ok=True)
        record.pop("result", None)  # the full result is on disk; keep memory flat for long batches
        done[key] = record
        finished += 1
        if progress is not None:
            progress(finished, total, record)

    if plan.todo:
        jobs = {key: _absolute(path) for key, path in plan.todo.items()}
        if cluster:
            _run_on_dask(jobs, settings, cluster, complete)
        else:
            _run_locally(jobs, settings, workers, complete)

    records: list[dict[str, Any]] = []
    first_with_key: dict[str, str] = {}
    for i, (item, digest, key) in enumerate(zip(plan.inputs, plan.hashes, plan.keys)):
        if key is None:
            records.append({"file": item.path, "status": item.status if item.missing_reason else "unreadable",
                            "reason": plan.reasons[i], "model": None, "verdict": None, "quantities": {},
                            "warnings": [], "elapsed_s": 0.0, "sha256": digest,
                            "duplicate_of": None, "resumed": False})
            continue
        record = dict(done[key])
        record["file"] = item.path
        record["sha256"] = digest
        record["duplicate_of"] = first_with_key.get(key)
        record["resumed"] = key in plan.done
        first_with_key.setdefault(key, item.path)
        records.append(record)
    return BatchRun(records=tuple(records), computed=total, resumed=len(plan.done), settings=settings,
                    out_dir=str(out))


def default_workers() -> int:
    """The number of cores this process may run on."""
    try:
        return max(1, len(os.sched_getaffinity(0)))
    except (AttributeError, OSError):
        return os.cpu_count() or 1


def crash_record(path: str, err: BaseException) -> dict[str, Any]:
    """The record of a capture whose worker died or could not run it (not saved, so a re-run retries)."""
    return {"file": path, "status": "error", "model": None, "verdict": None, "quantities": {},
            "warnings": [], "result": None, "elapsed_s": 0.0,
            "reason": f"the worker processing this capture stopped ({type(err).__name__}: {err}); "
                      "run the batch again to retry it"}


#: Times a capture is tried on a local pool whose worker died before it is given up as an error.
MAX_ATTEMPTS = 2


def _run_locally(jobs: dict[str, str], settings: BatchSettings, workers: int | None,
                 complete: Callable[..., None]) -> None:
    n = min(workers or default_workers(), len(jobs))
    if n <= 1:
        for key, path in jobs.items():
            complete(key, process_capture(path, settings))
        return
    attempts = dict.fromkeys(jobs, 0)
    pending = dict(jobs)
    while pending:
        for key in pending:
            attempts[key] += 1
        lost = _run_pool_round(pending, settings, n, complete)
        # a worker that died takes every capture still queued with it: try those
        # again on a fresh pool; one that was in two dead pools is given up
        pending = {}
        for key, err in lost.items():
            if attempts[key] >= MAX_ATTEMPTS:
                complete(key, crash_record(jobs[key], err), persist=False)
            else:
                pending[key] = jobs[key]


def _run_pool_round(jobs: dict[str, str], settings: BatchSettings, n: int,
                    complete: Callable[..., None]) -> dict[str, BaseException]:
    """Run ``jobs`` on a fresh pool of ``n`` workers; the captures lost to a dead worker, with why."""
    import multiprocessing
    from concurrent.futures import ProcessPoolExecutor, as_completed
    from concurrent.futures.process import BrokenProcessPool

    from .worker import die_with_parent

    context = multiprocessing.get_context("spawn")  # no forked BLAS threads or locks
    pool = ProcessPoolExecutor(max_workers=min(n, len(jobs)), mp_context=context,
                               initializer=die_with_parent, initargs=(os.getpid(),))
    lost: dict[str, BaseException] = {}
    try:
        futures: dict[Future, str] = {pool.submit(process_capture, path, settings): key
                                      for key, path in jobs.items()}
        for fut in as_completed(futures):
            key = futures[fut]
            try:
                record = fut.result()
            except BrokenProcessPool as err:  # a worker process died (killed, out of memory)
                lost[key] = err
            except Exception as err:  # the record could not come back (a bug)
                complete(key, crash_record(jobs[key], err), persist=False)
            else:
                complete(key, record)
    except BaseException:
        _stop_workers(pool)  # interrupted: stop the captures in progress too
        raise
    pool.shutdown(wait=True)
    return lost


def _stop_workers(pool) -> None:
    """End a pool at once: cancel what is queued and terminate the running workers."""
    processes = list(getattr(pool, "_processes", {}).values())  # no public handle on the workers
    pool.shutdown(wait=False, cancel_futures=True)
    for proc in processes:
        try:
            proc.terminate()
        except (OSError, AttributeError, ValueError):
            pass


def _run_on_dask(jobs: dict[str, str], settings: BatchSettings, address: str,
                 complete: Callable[..., None]) -> None:
    try:
        from distributed import Client
        from distributed import as_completed as dask_completed
    except ImportError:
        raise OptionError("--cluster needs Dask distributed",
                          hint='install it with: python -m pip install "fitkit[cluster]"') from None
    try:
        client = Client(address, timeout="20s", set_as_default=False)
    except (OSError, TimeoutError, ValueError) as err:
        raise OptionError(f"cannot reach the Dask scheduler at {address} ({err})",
                          hint="check the address and that the scheduler is running") from None
    try:
        keys = list(jobs)
        futures = client.map(process_capture, [jobs[k] for k in keys], settings=settings,
                             key=[f"fitkit-capture-{k[:32]}" for k in keys], pure=False)
        by_future = dict(zip(futures, keys))
        for fut in dask_completed(futures, loop=client.loop):
            key = by_future[fut]
            try:
                record = fut.result()
            except Exception as err:  # the Dask worker died or lost the task
                complete(key, crash_record(jobs[key], err), persist=False)
            else:
                complete(key, record)
    finally:
        client.close()
