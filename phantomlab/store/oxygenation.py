"""Oxygenation series attached to batches (layer 4).

A series keeps its two files byte for byte (the μa spectra over time and the reference sO₂
readings) with what was computed from them when they were recorded: the unmixing of every
time point (``points``) and the readings (``readings``), both plain JSON.
"""

from __future__ import annotations

import hashlib
from typing import Any, Sequence

from sqlalchemy import select
from sqlalchemy.orm import Session

from phantomlab import __version__
from phantomlab.errors import InputError
from phantomlab.jsonable import to_jsonable
from phantomlab.store.history import current, new_record
from phantomlab.store.schema import Batch, OxygenationSeries

__all__ = ["add_oxygenation_series", "oxygenation_series_of"]

#: Longest series name [characters].
MAX_NAME = 200


def add_oxygenation_series(
    session: Session,
    batch: Batch,
    *,
    name: str,
    series_file_name: str,
    series_content: bytes,
    chromophores: Sequence[str],
    extinction_source: str,
    points: list[dict[str, Any]],
    readings: list[dict[str, Any]],
    readings_file_name: str | None = None,
    readings_content: bytes | None = None,
    recorded_by: str | None = None,
) -> OxygenationSeries:
    """Attach an oxygenation series to (the newest version of) a batch."""
    if batch.retracted:
        raise InputError(f"batch {batch.code} is retracted; a series cannot be attached")
    if not str(name).strip() or len(str(name)) > MAX_NAME:
        raise InputError(f"series name must be 1-{MAX_NAME} characters, got {name!r}")
    if not isinstance(series_content, (bytes, bytearray)) or not series_content:
        raise InputError(f"series file {series_file_name!r} is empty")
    if not points:
        raise InputError("a series needs at least one time point")
    readings_bytes = None if readings_content is None else bytes(readings_content)
    return new_record(
        session,
        OxygenationSeries,
        recorded_by=recorded_by,
        batch_id=batch.id,
        name=str(name).strip(),
        series_file_name=str(series_file_name),
        series_content=bytes(series_content),
        series_sha256=hashlib.sha256(bytes(series_content)).hexdigest(),
        readings_file_name=None if readings_bytes is None else str(readings_file_name),
        readings_content=readings_bytes,
        readings_sha256=None if readings_bytes is None else hashlib.sha256(readings_bytes).hexdigest(),
        chromophores=",".join(chromophores),
        extinction_source=str(extinction_source),
        points=to_jsonable(list(points)),
        readings=to_jsonable(list(readings)),
        software_version=__version__,
    )


def oxygenation_series_of(session: Session, batch: Batch, *, include_retracted: bool = False) -> list[OxygenationSeries]:
    """The current oxygenation series of a batch (over all versions of the batch record), oldest first."""
    versions = select(Batch.id).where(Batch.uid == batch.uid)
    query = current(session, OxygenationSeries, include_retracted=include_retracted).where(
        OxygenationSeries.batch_id.in_(versions)
    )
    return list(session.scalars(query))
