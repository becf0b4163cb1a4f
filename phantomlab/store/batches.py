"""Batches: planned, mixed, characterised, retired (layer 4).

A batch is named ``YEAR-SEQUENCE`` (``2026-031``: the 31st batch recorded in 2026).  Its
plan (as printed) and sheet are stored once; every later change — the amounts actually
dispensed, a status change, a correction — is a new version of the batch record.
"""

from __future__ import annotations

import datetime as _dt
import re
from typing import Any, Mapping

from sqlalchemy import select
from sqlalchemy.orm import Session

from phantomlab.errors import InputError
from phantomlab.jsonable import to_jsonable
from phantomlab.store.history import correct, current, head_of, history_of, new_record
from phantomlab.store.schema import (
    BATCH_STATUSES,
    Batch,
    BatchPlan,
    BatchPlanLot,
    Recipe,
    StockLot,
)

__all__ = [
    "BATCH_CODE_PATTERN",
    "add_batch",
    "batch_by_uid",
    "batch_history",
    "batch_lots",
    "get_batch",
    "list_batches",
    "next_batch_code",
    "plan_of",
    "recipe_of",
    "record_actual",
    "set_status",
]

#: A batch ID: four-digit year, dash, sequence number of at least three digits.
BATCH_CODE_PATTERN = re.compile(r"^(?P<year>\d{4})-(?P<seq>\d{3,})$")


def next_batch_code(session: Session, *, year: int | None = None) -> str:
    """The next free batch ID of ``year`` (default: this year), e.g. ``2026-004``.

    Call inside the write transaction that inserts the batch: on SQLite that transaction
    already holds the write lock; on PostgreSQL the batches table is locked against other
    writers (readers are not blocked) until the transaction ends.
    """
    year = _dt.date.today().year if year is None else int(year)
    if session.get_bind().dialect.name == "postgresql":
        session.execute(_lock_batches_statement())
    codes = session.scalars(
        select(Batch.code).where(Batch.code.like(f"{year:04d}-%")).distinct()
    ).all()
    sequences = [
        int(match["seq"]) for code in codes if (match := BATCH_CODE_PATTERN.match(code))
    ]
    return f"{year:04d}-{max(sequences, default=0) + 1:03d}"


def _lock_batches_statement():
    from sqlalchemy import text

    return text("LOCK TABLE batches IN SHARE ROW EXCLUSIVE MODE")


def add_batch(
    session: Session,
    *,
    code: str,
    recipe: Recipe,
    plan: Mapping[str, Any],
    sheet_html: str | None,
    potencies_used: Mapping[str, Any],
    lots: Mapping[str, StockLot],
    software_version: str,
    calibration_state_id: int | None = None,
    operator: str | None = None,
    planned_on: _dt.date | None = None,
    matrix_details: Mapping[str, Any] | None = None,
    cure_details: Mapping[str, Any] | None = None,
    notes: str | None = None,
) -> Batch:
    """Record a planned batch (version 1, status ``planned``) and return it."""
    if not BATCH_CODE_PATTERN.match(str(code)):
        raise InputError(f"batch ID {code!r} not accepted; accepted: YEAR-SEQUENCE like 2026-031")
    if session.scalars(select(Batch.id).where(Batch.code == code)).first() is not None:
        raise InputError(f"batch ID {code} already exists; IDs are never reused")
    plan_row = BatchPlan(
        recipe_id=recipe.id,
        plan=to_jsonable(dict(plan)),
        sheet_html=sheet_html,
        potencies_used=to_jsonable(dict(potencies_used)),
        calibration_state_id=calibration_state_id,
        software_version=software_version,
    )
    session.add(plan_row)
    session.flush()
    for key, lot_row in lots.items():
        session.add(BatchPlanLot(plan_id=plan_row.id, stock_key=str(key), stock_lot_id=lot_row.id))
    return new_record(
        session,
        Batch,
        recorded_by=operator,
        code=code,
        plan_id=plan_row.id,
        status="planned",
        operator=operator,
        planned_on=planned_on or _dt.date.today(),
        mixed_on=None,
        matrix_details=to_jsonable(dict(matrix_details)) if matrix_details else None,
        cure_details=to_jsonable(dict(cure_details)) if cure_details else None,
        notes=notes,
        actual_amounts=None,
        actual_prediction=None,
        actual_alarms=None,
    )


def get_batch(session: Session, code: str, *, include_retracted: bool = True) -> Batch:
    """The newest version of batch ``code``; unknown IDs are refused with one line."""
    code = str(code).strip()
    if not BATCH_CODE_PATTERN.match(code):
        raise InputError(f"batch ID {code!r} not accepted; accepted: YEAR-SEQUENCE like 2026-031")
    row = session.scalars(
        select(Batch).where(Batch.code == code).order_by(Batch.version.desc()).limit(1)
    ).first()
    if row is None:
        raise InputError(f"unknown batch {code}; `phantomlab batch list` shows the batches")
    if row.retracted and not include_retracted:
        raise InputError(f"batch {code} is retracted")
    return row


def batch_history(session: Session, code: str) -> list[Batch]:
    """Every version of batch ``code``, oldest first."""
    return history_of(session, Batch, get_batch(session, code).uid)


def list_batches(
    session: Session, *, status: str | None = None, include_retracted: bool = False
) -> list[Batch]:
    """The newest version of every batch, in ID order."""
    query = current(session, Batch, include_retracted=include_retracted)
    if status is not None:
        _check_status(status)
        query = query.where(Batch.status == status)
    rows = list(session.scalars(query))
    return sorted(rows, key=lambda row: _code_key(row.code))


def _code_key(code: str) -> tuple[int, int]:
    match = BATCH_CODE_PATTERN.match(code)
    return (int(match["year"]), int(match["seq"])) if match else (0, 0)


def batch_lots(session: Session, batch: Batch) -> dict[str, StockLot]:
    """The stock lots the batch's plan used, by stock key."""
    rows = session.execute(
        select(BatchPlanLot.stock_key, StockLot)
        .join(StockLot, StockLot.id == BatchPlanLot.stock_lot_id)
        .where(BatchPlanLot.plan_id == batch.plan_id)
        .order_by(BatchPlanLot.stock_key)
    ).all()
    return {key: lot for key, lot in rows}


def _check_status(status: str) -> None:
    if status not in BATCH_STATUSES:
        raise InputError(
            f"status {status!r} not accepted; accepted: {', '.join(BATCH_STATUSES)}"
        )


def set_status(
    session: Session,
    batch: Batch,
    status: str,
    *,
    note: str | None = None,
    recorded_by: str | None = None,
    on: _dt.date | None = None,
) -> Batch:
    """Move a batch forward (planned → mixed → characterised → retired): a new version."""
    _check_status(status)
    if batch.retracted:
        raise InputError(f"batch {batch.code} is retracted; its status cannot change")
    present = BATCH_STATUSES.index(batch.status)
    wanted = BATCH_STATUSES.index(status)
    if wanted <= present:
        raise InputError(
            f"batch {batch.code} is already {batch.status!r}; status moves forward only: "
            + " -> ".join(BATCH_STATUSES)
        )
    changes: dict[str, Any] = {"status": status}
    if status == "mixed" and batch.mixed_on is None:
        changes["mixed_on"] = on or _dt.date.today()
    return correct(
        session,
        batch,
        note=note or f"status {batch.status} -> {status}",
        recorded_by=recorded_by,
        **changes,
    )


def record_actual(
    session: Session,
    batch: Batch,
    *,
    amounts: list[Mapping[str, Any]],
    prediction: Mapping[str, Any] | None,
    alarms: list[str],
    recorded_by: str | None = None,
    mixed_on: _dt.date | None = None,
    cure_details: Mapping[str, Any] | None = None,
    notes: str | None = None,
) -> Batch:
    """Record what was really dispensed (a new version; status ``mixed`` if it was planned).

    ``cure_details`` (e.g. ``{"schedule": "24 h at 21 °C", "mixing_temperature_c": 38}``)
    replace the batch's; ``notes`` are appended to its notes.
    """
    if batch.retracted:
        raise InputError(f"batch {batch.code} is retracted; amounts cannot be recorded")
    if batch.status not in ("planned", "mixed"):
        raise InputError(
            f"batch {batch.code} is {batch.status!r}; amounts are recorded while it is "
            "planned or mixed"
        )
    note = "amounts dispensed recorded" if batch.actual_amounts is None else "amounts dispensed corrected"
    changes: dict[str, Any] = {
        "actual_amounts": to_jsonable(list(amounts)),
        "actual_prediction": to_jsonable(dict(prediction)) if prediction is not None else None,
        "actual_alarms": list(alarms),
        "status": "mixed",
    }
    if mixed_on is not None or batch.mixed_on is None:
        changes["mixed_on"] = mixed_on or _dt.date.today()
    if cure_details:
        changes["cure_details"] = to_jsonable(dict(cure_details))
    if notes:
        changes["notes"] = "\n".join(x for x in (batch.notes, notes) if x)
    return correct(session, batch, note=note, recorded_by=recorded_by, **changes)


def plan_of(session: Session, batch: Batch) -> BatchPlan:
    """The plan row of a batch."""
    return session.get(BatchPlan, batch.plan_id)


def recipe_of(session: Session, batch: Batch) -> Recipe:
    """The recipe row the batch was planned from."""
    return session.get(Recipe, plan_of(session, batch).recipe_id)


def batch_by_uid(session: Session, uid: str) -> Batch | None:
    """The newest version of the batch record ``uid``."""
    return head_of(session, Batch, uid)
