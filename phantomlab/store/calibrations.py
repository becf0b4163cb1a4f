"""Calibration states: the potency of each stock lot with its SD (layer 4).

A calibration state lists potencies keyed by stock AND lot, with what they were computed
from.  A potency applies to a shelf only when the shelf's bottle has the same lot: a new
lot starts again from the stock file's prior (docs/design.md).
"""

from __future__ import annotations

import math
from typing import Any, Mapping

from sqlalchemy import select
from sqlalchemy.orm import Session

from phantomlab import __version__
from phantomlab.errors import InputError
from phantomlab.jsonable import to_jsonable
from phantomlab.store.history import current, new_record
from phantomlab.store.schema import CalibrationPotency, CalibrationState, StockLot

__all__ = [
    "calibration_potencies",
    "latest_calibration_state",
    "latest_potencies",
    "latest_potency_states",
    "potencies_for_shelf",
    "record_calibration",
]


def record_calibration(
    session: Session,
    *,
    potencies: Mapping[Any, tuple],
    computed_from: Mapping[str, Any],
    method: str,
    notes: str | None = None,
    recorded_by: str | None = None,
) -> CalibrationState:
    """Store a calibration state.

    Parameters
    ----------
    potencies : mapping
        ``{stock_key: (potency, potency_sd, lot)}`` — potency and SD dimensionless (> 0 and
        >= 0); ``lot`` as on the shelf (None for a stock without a lot).  For several lots
        of one stock in one state, key by ``(stock_key, lot)``: ``{(key, lot): (potency,
        potency_sd)}``.
    computed_from : mapping
        What the potencies came from, e.g. ``{"fit_ids": [...], "batches": [...]}``.
    method : str
        Name of the estimator (for the record).
    """
    if not potencies:
        raise InputError("a calibration state needs at least one stock potency (none given)")
    checked: list[tuple[str, float, float, str | None]] = []
    for key, value in potencies.items():
        try:
            if isinstance(key, tuple):
                key, lot = key
                potency, sd = value
            else:
                potency, sd, lot = value
            potency, sd = float(potency), float(sd)
        except (TypeError, ValueError):
            raise InputError(
                f"potency of {key!r} must be (potency, potency_sd, lot), or (potency, potency_sd) "
                f"under a (stock, lot) key; got {value!r}"
            ) from None
        if not (math.isfinite(potency) and potency > 0):
            raise InputError(f"potency of {key!r} is {potency!r}; accepted: a finite number > 0")
        if not (math.isfinite(sd) and sd >= 0):
            raise InputError(f"potency_sd of {key!r} is {sd!r}; accepted: a finite number >= 0")
        checked.append((str(key), potency, sd, None if lot in (None, "") else str(lot)))
    state = new_record(
        session,
        CalibrationState,
        recorded_by=recorded_by,
        method=str(method),
        computed_from=to_jsonable(dict(computed_from)),
        notes=notes,
        software_version=__version__,
    )
    for key, potency, sd, lot in checked:
        lot_row = session.scalars(
            current(session, StockLot, include_retracted=True).where(
                StockLot.stock_key == key,
                StockLot.lot.is_(None) if lot is None else StockLot.lot == lot,
            )
        ).first()
        session.add(
            CalibrationPotency(
                state_id=state.id,
                stock_key=key,
                lot=lot,
                stock_lot_id=lot_row.id if lot_row is not None else None,
                potency=potency,
                potency_sd=sd,
            )
        )
    session.flush()
    return state


def calibration_potencies(session: Session, state: CalibrationState) -> list[CalibrationPotency]:
    """The potency rows of one calibration state (by stock key, then lot).

    A corrected or retracted state keeps the potencies of the version that first held them.
    """
    ids = select(CalibrationState.id).where(CalibrationState.uid == state.uid)
    rows = session.scalars(
        select(CalibrationPotency)
        .where(CalibrationPotency.state_id.in_(ids))
        .order_by(CalibrationPotency.state_id.desc(), CalibrationPotency.stock_key)
    ).all()
    newest_state = rows[0].state_id if rows else None
    return sorted(
        (row for row in rows if row.state_id == newest_state),
        key=lambda row: (row.stock_key, row.lot or ""),
    )


def latest_calibration_state(session: Session) -> CalibrationState | None:
    """The newest calibration state that is not retracted."""
    states = list(session.scalars(current(session, CalibrationState)))
    return max(states, key=lambda s: (s.recorded_at, s.id), default=None)


def _potency_entries(session: Session) -> list[tuple[CalibrationState, CalibrationPotency]]:
    states = sorted(
        session.scalars(current(session, CalibrationState)), key=lambda s: (s.recorded_at, s.id)
    )
    entries = []
    for state in states:
        entries.extend((state, row) for row in calibration_potencies(session, state))
    return entries


def _latest_entries(session: Session, shelf) -> dict[str, tuple[CalibrationState, CalibrationPotency]]:
    result: dict[str, tuple[CalibrationState, CalibrationPotency]] = {}
    keys = set(shelf.keys()) if shelf is not None else None
    for state, row in _potency_entries(session):  # oldest first: later ones overwrite
        if keys is not None:
            if row.stock_key not in keys:
                continue
            shelf_lot = getattr(shelf[row.stock_key], "lot", None)
            shelf_lot = None if shelf_lot in (None, "") else str(shelf_lot)
            if shelf_lot != row.lot:
                continue
        result[row.stock_key] = (state, row)
    return result


def latest_potencies(store_or_session, *, shelf=None) -> dict[str, tuple[float, float, str | None]]:
    """The newest calibrated potency of each stock: ``{stock_key: (potency, sd, lot)}``.

    Parameters
    ----------
    store_or_session : Store or Session
    shelf : phantomlab.materials.Shelf, optional
        When given, only potencies of the lot now on the shelf are returned (per stock, the
        newest calibration of that lot); a stock whose lot was never calibrated is left
        out, so it keeps the stock file's prior.

    Returns
    -------
    dict
        Retracted calibration states are ignored.
    """
    if hasattr(store_or_session, "reading"):
        with store_or_session.reading() as inner:
            return latest_potencies(inner, shelf=shelf)
    return {
        key: (row.potency, row.potency_sd, row.lot)
        for key, (_state, row) in _latest_entries(store_or_session, shelf).items()
    }


def latest_potency_states(session: Session, *, shelf=None) -> dict[str, int]:
    """Which calibration state each of :func:`latest_potencies` comes from (state ids)."""
    return {key: state.id for key, (state, _row) in _latest_entries(session, shelf).items()}


def potencies_for_shelf(store_or_session, shelf) -> dict[str, tuple[float, float]]:
    """``{stock_key: (potency, sd)}`` for ``solve(recipe, potencies=...)``: only lots on the shelf."""
    return {
        key: (potency, sd)
        for key, (potency, sd, _lot) in latest_potencies(store_or_session, shelf=shelf).items()
    }
