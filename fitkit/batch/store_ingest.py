"""Append a batch's outcomes to the line store (fitkit.line_store).

Reads each capture's full result from the batch's own per-capture files
(OUT/captures/*.json, written atomically by the runner) after the run, so
the store gets the same records whether a capture was processed now or in an
earlier run, and a batch stopped between writing a result and storing it is
made whole by the next run: a capture already in the store is skipped
(idempotent appends), one missing from it is added.
"""

from __future__ import annotations

import json
from pathlib import Path
from typing import Any, Callable, Iterator

from .runner import RESULTS_FOLDER, BatchRun, result_key
from .worker import MEASURED_STATUSES, BatchSettings

#: Statuses stored without a result (the board was tested, nothing could be measured).
UNMEASURED_STATUSES = ("no-step", "fit-failed", "unreadable")

#: facts(path, file_sha256) -> fitkit.line_store.CaptureFacts
FactsMaker = Callable[[str, str], Any]


def _result_files(out_dir: Path) -> dict[str, list[Path]]:
    """Key prefix -> result files (named STEM.KEYPREFIX.json by the runner)."""
    index: dict[str, list[Path]] = {}
    folder = out_dir / RESULTS_FOLDER
    if folder.is_dir():
        for f in folder.glob("*.json"):
            parts = f.name.split(".")
            if len(parts) >= 3 and not f.name.startswith("."):
                index.setdefault(parts[-2], []).append(f)
    return index


def _stored_result(index: dict[str, list[Path]], key: str) -> dict[str, Any] | None:
    """The full record (with "result") the runner saved for this key, or None."""
    for prefix, paths in index.items():
        if not key.startswith(prefix):
            continue
        for path in paths:
            try:
                saved = json.loads(path.read_text(encoding="utf-8"))
            except (OSError, ValueError):
                continue
            if isinstance(saved, dict) and saved.get("key") == key and isinstance(saved.get("record"), dict):
                return saved["record"]
    return None


def _design_name(settings: BatchSettings) -> str | None:
    if not settings.design:
        return None
    from ..check import load_design
    return load_design(settings.design).name


def store_entries(run: BatchRun, settings: BatchSettings, out_dir: str | Path, facts: FactsMaker,
                  already: set[tuple[str, str]]) -> Iterator[Any]:
    """The store entries of the run's captures not yet in ``already`` ((file_sha256, analysis) pairs)."""
    from ..line_store.records import analysis_identity, entry_from_result, entry_without_result

    analysis = analysis_identity(settings.design_hash, settings.model)
    index = _result_files(Path(out_dir))
    design_name: str | None = None
    seen: set[str] = set()
    for rec in run.records:
        digest = rec.get("sha256")
        status = rec.get("status")
        if not digest or digest in seen or (digest, analysis) in already:
            continue
        if status in MEASURED_STATUSES:
            saved = _stored_result(index, result_key(digest, settings))
            if saved is None or not isinstance(saved.get("result"), dict):
                continue  # not on disk (an error, or a foreign tool removed it): stored by a later run
            seen.add(digest)
            yield entry_from_result(saved["result"], facts(rec["file"], digest), status=status,
                                    design_sha256=settings.design_hash, model_setting=settings.model,
                                    reason=rec.get("reason") or "")
        elif status in UNMEASURED_STATUSES:
            seen.add(digest)
            if design_name is None and settings.design:
                design_name = _design_name(settings)
            yield entry_without_result(facts(rec["file"], digest), status, rec.get("reason") or "",
                                       design_name=design_name, design_sha256=settings.design_hash,
                                       model_setting=settings.model)


def store_batch(store, run: BatchRun, settings: BatchSettings, out_dir: str | Path, facts: FactsMaker) -> int:
    """Append the run's captures that the store does not hold yet; return how many were added."""
    from ..line_store.store import append_all
    return append_all(store, store_entries(run, settings, out_dir, facts, store.stored_keys()))
