"""Snapshots of stock lots and recipes as a batch used them (layer 4).

A batch records the exact stock definitions (with their resolved spectra) and the exact
recipe it was planned from.  The same definition is stored once: a lot or recipe whose
content did not change is reused; a changed one becomes a new version of its record.
"""

from __future__ import annotations

import datetime as _dt
import hashlib
import json
from typing import Any

from sqlalchemy import select
from sqlalchemy.orm import Session

from phantomlab.errors import InputError
from phantomlab.jsonable import to_jsonable
from phantomlab.store.history import correct, current, new_record
from phantomlab.store.schema import Recipe, StockLot

__all__ = ["content_sha256", "record_recipe", "record_stock_lot"]


def content_sha256(value: Any) -> str:
    """SHA-256 of the canonical JSON form of ``value`` (sorted keys, no spaces)."""
    text = json.dumps(to_jsonable(value), sort_keys=True, separators=(",", ":"), allow_nan=False)
    return hashlib.sha256(text.encode("utf-8")).hexdigest()


def _date_or_none(value: Any) -> _dt.date | None:
    if value is None or isinstance(value, _dt.date):
        return value
    try:
        return _dt.date.fromisoformat(str(value))
    except ValueError:
        raise InputError(f"expiry {value!r} is not a date; accepted: YYYY-MM-DD") from None


def record_stock_lot(
    session: Session,
    stock: Any,
    *,
    shelf_path: str | None = None,
    recorded_by: str | None = None,
) -> StockLot:
    """Store (or reuse) the snapshot of one stock lot and return its row.

    Parameters
    ----------
    stock : phantomlab.materials.Stock
        Needs ``key, kind, lot, expiry, potency, potency_sd, definition``.
    """
    definition = to_jsonable(dict(getattr(stock, "definition", {}) or {}))
    digest = content_sha256(definition)
    lot = getattr(stock, "lot", None)
    lot = None if lot in (None, "") else str(lot)
    query = current(session, StockLot, include_retracted=True).where(
        StockLot.stock_key == stock.key,
        StockLot.lot.is_(None) if lot is None else StockLot.lot == lot,
    )
    head = session.scalars(query).first()
    fields = dict(
        stock_key=str(stock.key),
        lot=lot,
        kind=str(stock.kind),
        expiry=_date_or_none(getattr(stock, "expiry", None)),
        potency_prior=_float_or_none(getattr(stock, "potency", None)),
        potency_sd_prior=_float_or_none(getattr(stock, "potency_sd", None)),
        definition=definition,
        definition_sha256=digest,
        shelf_path=shelf_path,
    )
    if head is None:
        return new_record(session, StockLot, recorded_by=recorded_by, **fields)
    if head.definition_sha256 == digest and not head.retracted:
        return head
    if head.retracted:
        raise InputError(
            f"stock {stock.key!r} lot {lot!r} was retracted from the batch log; "
            "give the bottle a new lot name in the stock file"
        )
    return correct(
        session,
        head,
        note="stock definition changed in the stock file",
        recorded_by=recorded_by,
        **fields,
    )


def _float_or_none(value: Any) -> float | None:
    return None if value is None else float(value)


def record_recipe(session: Session, recipe: Any, *, recorded_by: str | None = None) -> Recipe:
    """Store (or reuse) the recipe a batch is planned from and return its row.

    The same content (``content_hash``) is stored once; a changed recipe of the same name
    becomes a new version of that recipe's record.

    Parameters
    ----------
    recipe : phantomlab.recipe.Recipe
        Needs ``name, version, content_hash, path, definition``.
    """
    content_hash = str(recipe.content_hash)
    same = session.scalars(
        select(Recipe).where(Recipe.content_hash == content_hash).order_by(Recipe.version.desc())
    ).first()
    if same is not None:
        return same
    fields = dict(
        name=str(recipe.name),
        recipe_version=None if getattr(recipe, "version", None) is None else str(recipe.version),
        content_hash=content_hash,
        definition=to_jsonable(dict(recipe.definition)),
        source_path=None if getattr(recipe, "path", None) is None else str(recipe.path),
    )
    head = session.scalars(
        current(session, Recipe, include_retracted=True).where(Recipe.name == fields["name"])
    ).first()
    if head is None:
        return new_record(session, Recipe, recorded_by=recorded_by, **fields)
    if head.retracted:
        raise InputError(f"recipe {recipe.name!r} was retracted from the batch log; rename it")
    return correct(session, head, note="recipe file changed", recorded_by=recorded_by, **fields)
