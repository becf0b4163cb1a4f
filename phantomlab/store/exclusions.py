"""Batches and measurements left out of the potency calibration, with their reasons (layer 4).

An exclusion is an append-only record (:mod:`phantomlab.store.history`): excluding writes
version 1 with the reason as its note; including again writes a retracted version with its
own note; excluding once more unretracts.  Nothing is deleted, so ``batch show`` lists every
step with who did it and why.  One record per (batch, measurement); ``measurement_id`` None
stands for the whole batch.
"""

from __future__ import annotations

from typing import Any

from sqlalchemy import select
from sqlalchemy.orm import Session

from phantomlab.errors import InputError
from phantomlab.store.history import current, history_of, new_record, retract, unretract
from phantomlab.store.measurements import measurements_of
from phantomlab.store.schema import Batch, CalibrationExclusion

__all__ = ["MAX_REASON_CHARS", "exclude_from_calibration", "include_in_calibration", "calibration_exclusions",
           "exclusion_history"]

#: Longest reason kept with an exclusion [characters].
MAX_REASON_CHARS = 500


def _head(session: Session, code: str, measurement_id: int | None) -> CalibrationExclusion | None:
    rows = session.scalars(
        current(session, CalibrationExclusion, include_retracted=True).where(
            CalibrationExclusion.batch_code == code,
            CalibrationExclusion.measurement_id.is_(None) if measurement_id is None
            else CalibrationExclusion.measurement_id == measurement_id,
        )
    ).all()
    return rows[0] if rows else None


def _checked_measurement(session: Session, batch: Batch, measurement_id: int | None) -> int | None:
    if measurement_id is None:
        return None
    ids = [m.id for m in measurements_of(session, batch)]
    if int(measurement_id) not in ids:
        known = ", ".join(str(i) for i in ids) or "none"
        raise InputError(f"measurement {measurement_id} is not a measurement of batch {batch.code}; "
                         f"its measurements: {known}")
    return int(measurement_id)


def _reason(reason: str | None, *, required: bool) -> str | None:
    text = " ".join(str(reason or "").split())
    if required and not text:
        raise InputError("give a reason (--reason TEXT): an exclusion is kept with why it was made")
    if len(text) > MAX_REASON_CHARS:
        raise InputError(f"reason of {len(text)} characters; accepted: at most {MAX_REASON_CHARS}")
    return text or None


def _what(code: str, measurement_id: int | None) -> str:
    return f"batch {code}" if measurement_id is None else f"measurement {measurement_id} of batch {code}"


def exclude_from_calibration(session: Session, batch: Batch, *, measurement_id: int | None = None,
                             reason: str, recorded_by: str | None = None) -> CalibrationExclusion:
    """Leave a batch (or one of its measurements) out of every later calibration.

    Raises
    ------
    InputError
        Without a reason, for a measurement of another batch, or when it is excluded already.
    """
    note = _reason(reason, required=True)
    measurement_id = _checked_measurement(session, batch, measurement_id)
    head = _head(session, batch.code, measurement_id)
    if head is None:
        return new_record(session, CalibrationExclusion, recorded_by=recorded_by, batch_code=batch.code,
                          measurement_id=measurement_id, change_note=note)
    if not head.retracted:
        raise InputError(f"{_what(batch.code, measurement_id)} is already excluded from the calibration "
                         f"(since {head.recorded_at:%Y-%m-%d}: {head.change_note})")
    return unretract(session, head, note=note, recorded_by=recorded_by)


def include_in_calibration(session: Session, batch: Batch, *, measurement_id: int | None = None,
                           reason: str | None = None, recorded_by: str | None = None) -> CalibrationExclusion:
    """Take an excluded batch (or measurement) into the calibration again (a new version)."""
    note = _reason(reason, required=False) or "included again"
    head = _head(session, batch.code, None if measurement_id is None else int(measurement_id))
    if head is None or head.retracted:
        excluded = [_what(row.batch_code, row.measurement_id) for row in calibration_exclusions(session)]
        raise InputError(f"{_what(batch.code, measurement_id)} is not excluded from the calibration; "
                         f"excluded now: {', '.join(excluded) or 'nothing'}")
    return retract(session, head, note=note, recorded_by=recorded_by)


def calibration_exclusions(session: Session) -> list[CalibrationExclusion]:
    """The exclusions in force (heads that are not retracted), oldest first."""
    rows = session.scalars(current(session, CalibrationExclusion)).all()
    return sorted(rows, key=lambda row: (row.recorded_at, row.id))


def exclusion_history(session: Session, code: str) -> list[dict[str, Any]]:
    """Every exclusion step of one batch (all versions, oldest first) as plain values."""
    uids = session.scalars(select(CalibrationExclusion.uid).where(CalibrationExclusion.batch_code == code)
                           .distinct()).all()
    steps = []
    for uid in uids:
        for row in history_of(session, CalibrationExclusion, uid):
            steps.append({
                "event": "included in calibration again" if row.retracted else "excluded from calibration",
                "measurement_id": row.measurement_id, "reason": row.change_note,
                "recorded_at": row.recorded_at, "recorded_by": row.recorded_by, "version": row.version,
            })
    return sorted(steps, key=lambda step: step["recorded_at"])
