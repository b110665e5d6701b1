"""LineStore: append captures to the store (idempotently, safely under concurrent writers) and read them back."""

from __future__ import annotations

import json
import random
import time
from datetime import datetime
from typing import Iterable, Sequence

from sqlalchemy import func, select
from sqlalchemy.engine import Engine
from sqlalchemy.exc import IntegrityError, OperationalError, SQLAlchemyError

from ..errors import FitkitError
from .location import describe_store, store_url
from .records import StoredCapture
from .schema import ensure_parent_folder, make_engine, upgrade_to_head
from .tables import capture_values, captures

#: Attempts at one append when the database reports it is busy or a concurrent insert collided.
APPEND_ATTEMPTS = 8


class StoreError(FitkitError):
    """The store cannot be opened, upgraded, written or read."""


def _insert_ignoring_duplicates(dialect: str):
    """An INSERT into captures that skips a row whose (file_sha256, analysis) is already stored."""
    if dialect == "postgresql":
        from sqlalchemy.dialects.postgresql import insert
    else:
        from sqlalchemy.dialects.sqlite import insert
    return insert(captures).on_conflict_do_nothing(index_elements=["file_sha256", "analysis"])


def _transient(err: SQLAlchemyError) -> bool:
    """True for errors worth retrying: a locked SQLite file, a serialisation or deadlock failure."""
    text = str(getattr(err, "orig", err)).lower()
    return any(s in text for s in ("database is locked", "database is busy", "could not serialize",
                                   "deadlock detected"))


class LineStore:
    """A results store (see fitkit.line_store). Use open_store() to make one."""

    def __init__(self, engine: Engine, url: str) -> None:
        self.engine = engine
        self.url = url

    @property
    def name(self) -> str:
        """The store's URL for messages (password hidden)."""
        return describe_store(self.url)

    def append(self, entries: Sequence[StoredCapture]) -> int:
        """Store the entries in one transaction; return how many were new.

        An entry whose file hash and analysis are already stored is skipped
        (with its values), so appending the same captures again adds nothing.
        A busy database is retried with growing random waits.
        """
        if not entries:
            return 0
        for attempt in range(APPEND_ATTEMPTS):
            try:
                return self._append_once(entries)
            except (OperationalError, IntegrityError) as err:
                if attempt == APPEND_ATTEMPTS - 1 or not (_transient(err) or isinstance(err, IntegrityError)):
                    raise StoreError(f"cannot write to the store ({getattr(err, 'orig', err)})",
                                     path=self.name, hint="check that the store is reachable and writable") \
                        from None
                time.sleep(min(2.0, 0.05 * 2 ** attempt) * (0.5 + random.random()))
        return 0  # pragma: no cover - the loop returns or raises

    def _append_once(self, entries: Sequence[StoredCapture]) -> int:
        """One transaction: the capture rows in one multi-row INSERT (those already stored are
        skipped by the unique key), then the new captures' values in one more."""
        stored_at = datetime.now().replace(microsecond=0)
        statement = _insert_ignoring_duplicates(self.engine.dialect.name).returning(
            captures.c.id, captures.c.file_sha256, captures.c.analysis)
        by_key = {}
        for entry in entries:  # the first of two entries with one key wins, as in separate appends
            by_key.setdefault((entry.facts.file_sha256, entry.analysis), entry)
        with self.engine.begin() as conn:
            new = conn.execute(statement, [e.row(stored_at) for e in by_key.values()]).all()
            values = [dict(v.row(), capture_id=row.id)
                      for row in new for v in by_key[(row.file_sha256, row.analysis)].values]
            if values:
                conn.execute(capture_values.insert(), values)
        return len(new)

    def has(self, file_sha256: str, analysis: str) -> bool:
        """True when this file under this analysis is already stored."""
        query = select(captures.c.id).where(captures.c.file_sha256 == file_sha256,
                                             captures.c.analysis == analysis)
        with self.engine.connect() as conn:
            return conn.execute(query).first() is not None

    def stored_keys(self) -> set[tuple[str, str]]:
        """Every (file_sha256, analysis) already stored."""
        with self.engine.connect() as conn:
            return {(r[0], r[1]) for r in conn.execute(select(captures.c.file_sha256, captures.c.analysis))}

    def count(self) -> int:
        """Captures stored."""
        with self.engine.connect() as conn:
            return int(conn.execute(select(func.count()).select_from(captures)).scalar() or 0)

    def captures_frame(self):
        """Every stored capture as a pandas DataFrame (one row per capture, columns as the table's)."""
        import pandas as pd
        with self.engine.connect() as conn:
            frame = pd.read_sql(select(captures).order_by(captures.c.id), conn)
        frame["warnings"] = [json.loads(w) if w else [] for w in frame["warnings"]]
        return frame

    def values_frame(self, design: str | None = None):
        """Every stored value joined with its capture: one row per capture and value.

        Columns: capture_id, design_name, board_serial, captured_at, fixture,
        file_name, status, kind, name, value, ci_low, ci_high, unit, determined,
        limit_low, limit_high, nominal, verdict. design: only this design's captures.
        """
        import pandas as pd
        c, v = captures, capture_values
        query = (select(c.c.id.label("capture_id"), c.c.design_name, c.c.analysis, c.c.board_serial,
                        c.c.captured_at, c.c.fixture, c.c.file_name, c.c.status, v.c.kind, v.c.name, v.c.value,
                        v.c.ci_low, v.c.ci_high, v.c.unit, v.c.determined, v.c.limit_low, v.c.limit_high,
                        v.c.nominal, v.c.verdict)
                 .select_from(c.join(v, v.c.capture_id == c.c.id))
                 .order_by(c.c.captured_at, c.c.id))
        if design is not None:
            query = query.where(c.c.design_name == design)
        with self.engine.connect() as conn:
            return pd.read_sql(query, conn)

    def close(self) -> None:
        self.engine.dispose()

    def __enter__(self) -> "LineStore":
        return self

    def __exit__(self, *exc) -> None:
        self.close()


def open_store(location: str, read_only: bool = False) -> LineStore:
    """Open (creating or upgrading it when needed) the store at ``location``: a
    SQLite file name or a SQLAlchemy / postgresql:// URL (fitkit.line_store.location).

    read_only: for reading only; a SQLite file is left byte for byte as it is,
    and a store that is missing or at another schema revision is a StoreError.

    Raises OptionError for an unsupported URL, StoreError when the database
    cannot be reached or its schema cannot be brought up to date.
    """
    url = store_url(location)
    try:
        if not read_only:
            ensure_parent_folder(url)
        engine = make_engine(url, read_only)
    except (OSError, SQLAlchemyError, ImportError) as err:
        raise StoreError(f"cannot open the store ({err})", path=describe_store(url),
                         hint="check the file name or URL; PostgreSQL needs: pip install 'fitkit[postgres]'") \
            from None
    for attempt in range(APPEND_ATTEMPTS):
        try:
            upgrade_to_head(engine, read_only)
            break
        except RuntimeError as err:
            engine.dispose()
            raise StoreError(f"cannot read the store ({err})", path=describe_store(url),
                             hint="store into it once with this fitkit (fitkit batch --store) to upgrade it") \
                from None
        except SQLAlchemyError as err:
            if attempt == APPEND_ATTEMPTS - 1 or not (_transient(err) or isinstance(err, IntegrityError)):
                engine.dispose()
                raise StoreError(f"cannot open the store ({getattr(err, 'orig', err)})",
                                 path=describe_store(url),
                                 hint="check that the database is reachable and you may create tables in it") \
                    from None
            time.sleep(0.1 * (attempt + 1))
    return LineStore(engine, url)


def append_all(store: LineStore, entries: Iterable[StoredCapture], chunk: int = 200) -> int:
    """Append in transactions of ``chunk`` entries; return how many were new."""
    batch: list[StoredCapture] = []
    new = 0
    for entry in entries:
        batch.append(entry)
        if len(batch) >= chunk:
            new += store.append(batch)
            batch = []
    return new + store.append(batch)
