"""A cheap stamp of the batch log's state (layer 4): changes whenever anything is recorded.

History is append-only (:mod:`phantomlab.store.history`): a record is never updated in place
or deleted, so every write adds a row to some table.  The row count and the largest ``id`` of
every table therefore change with every write, whichever process or session made it, and
stay the same while nothing is written.  The page keys what it computes from the log on this
stamp (read in one query per run), so a cached view is rebuilt exactly when the log changed.
"""

from __future__ import annotations

from functools import cache

from sqlalchemy import func, select
from sqlalchemy.orm import Session

from phantomlab.store.schema import Base

__all__ = ["log_stamp"]


@cache
def _stamp_query(tables: tuple[str, ...] | None):
    """The one SELECT of the stamp (built once per set of tables)."""
    columns = []
    for table in Base.metadata.sorted_tables:
        if tables is not None and table.name not in tables:
            continue
        columns.append(select(func.count()).select_from(table).scalar_subquery())
        if "id" in table.c:
            columns.append(select(func.max(table.c.id)).scalar_subquery())
    return select(*columns)


def log_stamp(session: Session, *, tables: tuple[str, ...] | None = None) -> tuple[int, ...]:
    """Row count and largest id of every table of the batch log, in one query.

    Parameters
    ----------
    tables : tuple of str, optional
        Only these tables (e.g. ``("stock_lots",)`` for what the page's shelf depends on).

    Returns
    -------
    tuple of int
        Equal for two reads exactly when no record was added in between (an empty table
        gives 0 for its largest id).
    """
    if tables is not None:
        unknown = sorted(set(tables) - set(Base.metadata.tables))
        if unknown:
            raise ValueError(f"no table {', '.join(unknown)} in the batch log")
        tables = tuple(sorted(tables))
    row = session.execute(_stamp_query(tables)).one()
    return tuple(int(value or 0) for value in row)
