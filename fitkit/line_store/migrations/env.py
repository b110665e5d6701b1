"""Alembic environment of the line store: runs on the connection fitkit hands it.

fitkit runs the migrations itself (fitkit.line_store.schema.upgrade_to_head)
inside one transaction that holds the store's write lock, so two fixtures
opening a new store at once do not both create it. For development,
``alembic -c fitkit/line_store/migrations/alembic.ini -x url=sqlite:///x.sqlite upgrade head``
runs them by hand.
"""

from alembic import context
from sqlalchemy import create_engine

from fitkit.line_store.tables import metadata

config = context.config
connection = config.attributes.get("connection")


def _run(conn) -> None:
    context.configure(connection=conn, target_metadata=metadata, render_as_batch=True)
    with context.begin_transaction():
        context.run_migrations()


if connection is not None:
    _run(connection)
else:  # by hand, from the alembic command line
    url = context.get_x_argument(as_dictionary=True).get("url") or config.get_main_option("sqlalchemy.url")
    with create_engine(url).begin() as conn:
        _run(conn)
