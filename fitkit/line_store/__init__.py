"""The line's results store: every capture's outcome remembered, one row per capture.

A store is a SQLite file (the default: ``--store line.sqlite``, nothing to
install) or a PostgreSQL database named by URL
(``postgresql://user@host/line``, through psycopg) that several fixtures
write to at once. Its tables are made and upgraded by the Alembic migrations
shipped in ``fitkit/line_store/migrations``.

    store = open_store("line.sqlite")
    store.append([entry])               # entry: a StoredCapture (records.py)
    frame = store.values_frame()        # one row per capture and quantity

Appends are idempotent: a capture is keyed by its file's SHA-256 and the
analysis identity (the design file's SHA-256 in check mode, the form in fit
mode), so storing the same file again adds nothing; each append is one
transaction, so concurrent writers lose nothing.
"""

from .location import store_url, describe_store
from .records import CaptureFacts, StoredCapture, StoredValue, entry_from_result, entry_without_result
from .store import LineStore, open_store

__all__ = ["store_url", "describe_store", "CaptureFacts", "StoredCapture", "StoredValue",
           "entry_from_result", "entry_without_result", "LineStore", "open_store"]
