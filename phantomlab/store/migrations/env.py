"""Alembic environment of the batch log.

phantomlab runs the migrations itself (:func:`phantomlab.store.migrate.upgrade`) on a
connection it has already opened inside one write transaction, handed over in
``config.attributes["connection"]``; there is no ``alembic.ini`` and no offline mode.
"""

from __future__ import annotations

from alembic import context

from phantomlab.store.schema import Base

connection = context.config.attributes.get("connection")
if connection is None:
    raise RuntimeError(
        "phantomlab migrations run through phantomlab.store.migrate.upgrade(), "
        "which passes an open connection"
    )

context.configure(
    connection=connection,
    target_metadata=Base.metadata,
    render_as_batch=connection.dialect.name == "sqlite",
    compare_type=True,
)
with context.begin_transaction():
    context.run_migrations()
