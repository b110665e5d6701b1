"""Opening a store's database: the engine, its write lock, and the schema brought to the Alembic head.

SQLite: every transaction starts with ``BEGIN IMMEDIATE`` (it takes the
file's write lock at once, so two writers queue instead of failing half-way),
the journal is write-ahead (readers do not block the writer), and a writer
waits up to ``BUSY_TIMEOUT_S`` for the lock; what still finds it busy is
retried by store.py. PostgreSQL: the migration takes a transaction-level
advisory lock, so two fixtures opening a new database at once do not both
create the tables.
"""

from __future__ import annotations

import sqlite3
from pathlib import Path

from sqlalchemy import create_engine, event, inspect, text
from sqlalchemy.engine import Connection, Engine

from .location import sqlite_path

#: Seconds a SQLite writer waits for another writer's lock before the driver gives up.
BUSY_TIMEOUT_S = 30.0
#: Advisory lock number of fitkit's migrations on PostgreSQL (any fixed 64-bit number).
MIGRATION_LOCK = 0x666974_6B6974
MIGRATIONS = Path(__file__).with_name("migrations")


def make_engine(url: str, read_only: bool = False) -> Engine:
    """A SQLAlchemy engine for the store URL (see the module docstring).

    read_only: a SQLite file is opened read-only (its journal mode and bytes
    are left as they are; a file that does not exist is an error).
    """
    if url.startswith("sqlite"):
        if read_only:
            path = sqlite_path(url)
            return create_engine("sqlite://", creator=lambda: sqlite3.connect(
                f"file:{path}?mode=ro", uri=True, timeout=BUSY_TIMEOUT_S, check_same_thread=False))
        engine = create_engine(url, connect_args={"timeout": BUSY_TIMEOUT_S})

        @event.listens_for(engine, "connect")
        def _sqlite_connect(dbapi_connection, _record):
            dbapi_connection.isolation_level = None  # we emit BEGIN ourselves
            cursor = dbapi_connection.cursor()
            cursor.execute("PRAGMA journal_mode=WAL")
            cursor.execute("PRAGMA foreign_keys=ON")
            cursor.execute("PRAGMA synchronous=NORMAL")
            cursor.close()

        @event.listens_for(engine, "begin")
        def _sqlite_begin(conn):
            conn.exec_driver_sql("BEGIN IMMEDIATE")

        return engine
    return create_engine(url, pool_pre_ping=True)


def _alembic_config(connection: Connection):
    from alembic.config import Config
    config = Config()
    config.set_main_option("script_location", str(MIGRATIONS))
    config.attributes["connection"] = connection
    return config


def head_revision() -> str:
    """The newest schema revision this fitkit ships."""
    from alembic.script import ScriptDirectory
    config = _alembic_config(None)  # type: ignore[arg-type]
    return ScriptDirectory.from_config(config).get_current_head()


def current_revision(connection: Connection) -> str | None:
    """The schema revision of the database on ``connection`` (None: no fitkit tables yet)."""
    from alembic.runtime.migration import MigrationContext
    return MigrationContext.configure(connection).get_current_revision()


def upgrade_to_head(engine: Engine, read_only: bool = False) -> None:
    """Create or upgrade the store's tables to the newest revision, under the write lock.

    read_only: only check that the store is at the newest revision (RuntimeError if not).
    """
    head = head_revision()
    with engine.connect() as probe:
        found = current_revision(probe) if inspect(probe).has_table("alembic_version") else None
        if found == head:
            return
        if read_only:
            raise RuntimeError(f"the store's schema is at revision {found or 'none'}, this fitkit reads {head}")
    from alembic import command
    with engine.begin() as connection:
        if engine.dialect.name == "postgresql":
            connection.execute(text("SELECT pg_advisory_xact_lock(:n)"), {"n": MIGRATION_LOCK})
        command.upgrade(_alembic_config(connection), "head")


def ensure_parent_folder(url: str) -> None:
    """Create the folder of a SQLite store's file if it does not exist yet."""
    path = sqlite_path(url)
    if path is not None:
        path.parent.mkdir(parents=True, exist_ok=True)
