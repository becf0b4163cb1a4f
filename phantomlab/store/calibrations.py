"""Calibration states: the potency of each stock lot with its SD (layer 4).

A calibration state lists potencies keyed by stock AND lot (with the lot's spectral
correction, when it has one), with what they were computed from.  A potency applies to a
shelf only when the shelf's bottle has the same lot: a new lot starts again from the stock
file's prior (docs/design.md).

The potencies in force come from folding the states oldest first, each overwriting the
stocks it holds.  A *rollback* (:func:`restore_calibration_state`) is a new state that points
at an earlier one (``restores_state_id``) and carries copies of its rows: folding it first
resets the potencies to exactly what they were right after that state, so a stock calibrated
only later goes back to its stock file's prior.
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
    "CalibratedPotency",
    "calibration_potencies",
    "calibration_states",
    "restore_calibration_state",
    "latest_calibration_state",
    "latest_potencies",
    "latest_potency_states",
    "potencies_for_shelf",
    "record_calibration",
]


class CalibratedPotency(tuple):
    """``(potency, potency_sd, lot)`` of a stored calibration, with its ``spectral`` correction.

    A plain 3-tuple to everything that unpacks or compares it; the recipe solver reads the
    ``spectral`` attribute (a ``SpectralCorrection.to_json()`` mapping, or None).
    """

    def __new__(cls, potency: float, sd: float, lot: str | None, spectral: Mapping[str, Any] | None = None):
        item = super().__new__(cls, (potency, sd, lot))
        item.spectral = dict(spectral) if spectral else None
        return item


def record_calibration(
    session: Session,
    *,
    potencies: Mapping[Any, tuple],
    computed_from: Mapping[str, Any],
    method: str,
    notes: str | None = None,
    recorded_by: str | None = None,
    restores_state_id: int | None = None,
) -> CalibrationState:
    """Store a calibration state.

    Parameters
    ----------
    potencies : mapping
        ``{stock_key: (potency, potency_sd, lot)}`` — potency and SD dimensionless (> 0 and
        >= 0); ``lot`` as on the shelf (None for a stock without a lot).  For several lots
        of one stock in one state, key by ``(stock_key, lot)``: ``{(key, lot): (potency,
        potency_sd)}``.  A fourth element (third under a (stock, lot) key) is the lot's
        spectral correction as a JSON mapping, or None.
    computed_from : mapping
        What the potencies came from, e.g. ``{"fit_ids": [...], "batches": [...]}``.
    method : str
        Name of the estimator (for the record).
    """
    if not potencies:
        raise InputError("a calibration state needs at least one stock potency (none given)")
    checked: list[tuple[str, float, float, str | None, Any]] = []
    for key, value in potencies.items():
        try:
            spectral = getattr(value, "spectral", None)
            if isinstance(key, tuple):
                key, lot = key
                potency, sd, *rest = value
            else:
                potency, sd, lot, *rest = value
            if rest:
                spectral = rest[0]
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
        if spectral is not None and not isinstance(spectral, Mapping):
            raise InputError(f"spectral correction of {key!r} must be a mapping or None")
        checked.append((str(key), potency, sd, None if lot in (None, "") else str(lot),
                        to_jsonable(dict(spectral)) if spectral else None))
    state = new_record(
        session,
        CalibrationState,
        recorded_by=recorded_by,
        method=str(method),
        computed_from=to_jsonable(dict(computed_from)),
        notes=notes,
        software_version=__version__,
        restores_state_id=restores_state_id,
    )
    for key, potency, sd, lot, spectral in checked:
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
                spectral=spectral,
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
    keys = set(shelf.keys()) if shelf is not None else None
    states = sorted(session.scalars(current(session, CalibrationState)), key=lambda s: (s.recorded_at, s.id))
    after: dict[int, dict] = {}
    result: dict[str, tuple[CalibrationState, CalibrationPotency]] = {}
    for state in states:  # oldest first: later ones overwrite; a rollback resets first
        if state.restores_state_id is not None and state.restores_state_id in after:
            result = dict(after[state.restores_state_id])
        for row in calibration_potencies(session, state):
            if keys is not None:
                if row.stock_key not in keys:
                    continue
                shelf_lot = getattr(shelf[row.stock_key], "lot", None)
                shelf_lot = None if shelf_lot in (None, "") else str(shelf_lot)
                if shelf_lot != row.lot:
                    continue
            result[row.stock_key] = (state, row)
        after[state.id] = dict(result)
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
        key: CalibratedPotency(row.potency, row.potency_sd, row.lot, row.spectral)
        for key, (_state, row) in _latest_entries(store_or_session, shelf).items()
    }


def latest_potency_states(session: Session, *, shelf=None) -> dict[str, int]:
    """Which calibration state each of :func:`latest_potencies` comes from (state ids)."""
    return {key: state.id for key, (state, _row) in _latest_entries(session, shelf).items()}


def potencies_for_shelf(store_or_session, shelf) -> dict[str, tuple[float, float]]:
    """``{stock_key: (potency, sd)}`` for ``solve(recipe, potencies=...)``: only lots on the shelf."""
    return {
        key: (value[0], value[1])
        for key, value in latest_potencies(store_or_session, shelf=shelf).items()
    }


def calibration_states(session: Session) -> list[dict[str, Any]]:
    """Every calibration state that is not retracted, oldest first, with its potencies.

    Returns
    -------
    list of dict
        ``state_id``, ``recorded_at``, ``recorded_by``, ``method``, ``restores_state_id``,
        ``notes``, ``current`` (the newest), ``batches``, ``excluded`` (what the state was
        computed without), ``chi2_red``, and ``potencies`` [{stock, lot, potency, potency_sd,
        spectral}].
    """
    states = sorted(session.scalars(current(session, CalibrationState)), key=lambda s: (s.recorded_at, s.id))
    newest = states[-1].id if states else None
    out = []
    for state in states:
        made_from = state.computed_from or {}
        out.append({
            "state_id": state.id, "recorded_at": state.recorded_at, "recorded_by": state.recorded_by,
            "method": state.method, "restores_state_id": state.restores_state_id, "notes": state.notes,
            "current": state.id == newest, "batches": list(made_from.get("batches", [])),
            "excluded": list(made_from.get("excluded", [])), "chi2_red": made_from.get("chi2_red"),
            "potencies": [{"stock": row.stock_key, "lot": row.lot, "potency": row.potency,
                           "potency_sd": row.potency_sd, "spectral": row.spectral}
                          for row in calibration_potencies(session, state)],
        })
    return out


def restore_calibration_state(session: Session, state_id: int, *, note: str | None = None,
                              recorded_by: str | None = None) -> CalibrationState:
    """Make calibration state ``state_id`` current again: a new state that points at it.

    The new state copies the earlier one's rows (with their spectral corrections) and sets
    ``restores_state_id``; :func:`latest_potencies` then gives exactly what it gave right
    after the earlier state was recorded.

    Raises
    ------
    InputError
        For a state that does not exist, is retracted, or is current already.
    """
    states = sorted(session.scalars(current(session, CalibrationState)), key=lambda s: (s.recorded_at, s.id))
    known = {state.id: state for state in states}
    try:
        state_id = int(state_id)
    except (TypeError, ValueError):
        raise InputError(f"calibration state {state_id!r} is not a number; see phantomlab calibration list") from None
    if state_id not in known:
        listed = ", ".join(str(i) for i in known) or "none recorded"
        raise InputError(f"calibration state {state_id} does not exist (or was retracted); states: {listed}")
    if states[-1].id == state_id:
        raise InputError(f"calibration state {state_id} is current already; nothing to restore")
    earlier = known[state_id]
    rows = calibration_potencies(session, earlier)
    restored = new_record(
        session, CalibrationState, recorded_by=recorded_by,
        method=f"rollback to calibration state {state_id}",
        computed_from=to_jsonable({**(earlier.computed_from or {}), "restores_state_id": state_id}),
        notes=note or f"calibration state {state_id} of {earlier.recorded_at:%Y-%m-%d %H:%M} made current again",
        software_version=__version__, restores_state_id=state_id,
    )
    for row in rows:
        session.add(CalibrationPotency(state_id=restored.id, stock_key=row.stock_key, lot=row.lot,
                                       stock_lot_id=row.stock_lot_id, potency=row.potency,
                                       potency_sd=row.potency_sd, spectral=row.spectral))
    session.flush()
    return restored
