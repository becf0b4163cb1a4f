"""Alembic migrations of the batch log, run by :func:`phantomlab.store.open_store`."""
