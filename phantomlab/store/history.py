"""Append-only history of versioned records (layer 4).

A correction writes a new version of a record that points at the version it corrects; a
retraction writes a new version marked ``retracted`` (every earlier version stays).  Only
the newest version of a record (its *head*) may be corrected: correcting an older one is
refused, and two processes correcting the same head at once cannot both succeed (the
``supersedes_id`` column is unique).
"""

from __future__ import annotations

import uuid
from typing import Any, TypeVar

from sqlalchemy import func, select
from sqlalchemy.orm import Session

from phantomlab.errors import InputError
from phantomlab.store.schema import VersionedMixin, utc_now

__all__ = [
    "correct",
    "current",
    "head_of",
    "history_of",
    "new_record",
    "new_uid",
    "retract",
    "unretract",
]

Row = TypeVar("Row", bound=VersionedMixin)

_BOOKKEEPING = {
    "id",
    "uid",
    "version",
    "supersedes_id",
    "retracted",
    "change_note",
    "recorded_at",
    "recorded_by",
}


def new_uid() -> str:
    """A fresh record identity (32 hex digits)."""
    return uuid.uuid4().hex


def new_record(session: Session, model: type[Row], /, *, recorded_by: str | None = None, **fields: Any) -> Row:
    """Insert version 1 of a new record and return it (flushed, so it has an ``id``)."""
    row = model(
        uid=new_uid(),
        version=1,
        supersedes_id=None,
        retracted=False,
        recorded_at=utc_now(),
        recorded_by=recorded_by,
        **fields,
    )
    session.add(row)
    session.flush()
    return row


def head_of(session: Session, model: type[Row], uid: str) -> Row | None:
    """The newest version of record ``uid`` (retracted or not), or None."""
    return session.scalars(
        select(model).where(model.uid == uid).order_by(model.version.desc()).limit(1)
    ).first()


def history_of(session: Session, model: type[Row], uid: str) -> list[Row]:
    """Every version of record ``uid``, oldest first."""
    return list(session.scalars(select(model).where(model.uid == uid).order_by(model.version)))


def current(session: Session, model: type[Row], *, include_retracted: bool = False):
    """A select of the head version of every record of ``model`` (ordered by id)."""
    newest = (
        select(model.uid, func.max(model.version).label("newest"))
        .group_by(model.uid)
        .subquery()
    )
    query = select(model).join(
        newest, (model.uid == newest.c.uid) & (model.version == newest.c.newest)
    )
    if not include_retracted:
        query = query.where(model.retracted.is_(False))
    return query.order_by(model.id)


def _next_version(
    session: Session,
    row: Row,
    *,
    note: str,
    recorded_by: str | None,
    retracted: bool,
    changes: dict[str, Any],
) -> Row:
    model = type(row)
    head = head_of(session, model, row.uid)
    if head is None or head.id != row.id:
        raise InputError(
            f"{model.__tablename__} record {row.uid[:8]} version {row.version} is not the "
            f"newest (version {head.version if head else '?'}); correct the newest version"
        )
    if not str(note or "").strip():
        raise InputError("a correction or retraction needs a note saying why (empty note given)")
    columns = {c.key for c in model.__mapper__.column_attrs} - _BOOKKEEPING
    unknown = set(changes) - columns
    if unknown:
        raise InputError(
            f"cannot change {', '.join(sorted(unknown))} of a {model.__tablename__} record; "
            f"changeable: {', '.join(sorted(columns))}"
        )
    values = {name: getattr(row, name) for name in columns}
    values.update(changes)
    new = model(
        uid=row.uid,
        version=row.version + 1,
        supersedes_id=row.id,
        retracted=retracted,
        change_note=" ".join(str(note).split()),
        recorded_at=utc_now(),
        recorded_by=recorded_by,
        **values,
    )
    session.add(new)
    session.flush()
    return new


def correct(session: Session, row: Row, /, *, note: str, recorded_by: str | None = None, **changes: Any) -> Row:
    """Write a corrected version of ``row`` (the head of its record) with ``changes``."""
    if row.retracted:
        raise InputError(
            f"{type(row).__tablename__} record {row.uid[:8]} is retracted; unretract it first"
        )
    return _next_version(session, row, note=note, recorded_by=recorded_by, retracted=False, changes=changes)


def retract(session: Session, row: Row, *, note: str, recorded_by: str | None = None) -> Row:
    """Withdraw a record: a new version marked retracted; all data stays readable."""
    if row.retracted:
        raise InputError(f"{type(row).__tablename__} record {row.uid[:8]} is already retracted")
    return _next_version(session, row, note=note, recorded_by=recorded_by, retracted=True, changes={})


def unretract(session: Session, row: Row, *, note: str, recorded_by: str | None = None) -> Row:
    """Undo a retraction (itself a new version, so the retraction stays in the history)."""
    if not row.retracted:
        raise InputError(f"{type(row).__tablename__} record {row.uid[:8]} is not retracted")
    return _next_version(session, row, note=note, recorded_by=recorded_by, retracted=False, changes={})
