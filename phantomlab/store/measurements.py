"""Measurements attached to batches, and the fits made of them (layer 4).

The measurement file is kept byte for byte as uploaded (with its metadata TOML beside it,
when there is one); a fit keeps the fit object as the fit command printed it.
"""

from __future__ import annotations

import datetime as _dt
import hashlib
from typing import Any, Mapping

from sqlalchemy import select
from sqlalchemy.orm import Session

from phantomlab import __version__
from phantomlab.errors import InputError
from phantomlab.jsonable import to_jsonable
from phantomlab.store.history import current, new_record
from phantomlab.store.schema import Batch, Fit, Measurement

__all__ = [
    "MEASUREMENT_KINDS",
    "add_fit",
    "add_measurement",
    "fits_of",
    "get_measurement",
    "measurements_of",
]

#: Measurement kinds of the file formats in docs/formats.md.
MEASUREMENT_KINDS: tuple[str, ...] = ("srdr", "sfdi", "slab", "sphere", "optics", "td", "fd")


def add_measurement(
    session: Session,
    batch: Batch,
    *,
    kind: str,
    file_name: str,
    raw_content: bytes,
    metadata_toml: str | None = None,
    instrument: str | None = None,
    geometry: Mapping[str, Any] | None = None,
    measured_on: _dt.date | None = None,
    phantom_age_days: float | None = None,
    temperature_c: float | None = None,
    recorded_by: str | None = None,
) -> Measurement:
    """Attach a measurement file to (the newest version of) a batch."""
    if kind not in MEASUREMENT_KINDS:
        raise InputError(f"measurement kind {kind!r} not accepted; accepted: {', '.join(MEASUREMENT_KINDS)}")
    if not isinstance(raw_content, (bytes, bytearray)) or len(raw_content) == 0:
        raise InputError(f"measurement file {file_name!r} is empty; a CSV with a header row is expected")
    if batch.retracted:
        raise InputError(f"batch {batch.code} is retracted; measurements cannot be attached")
    if phantom_age_days is not None and not phantom_age_days >= 0:
        raise InputError(f"phantom age {phantom_age_days!r} days must be >= 0")
    return new_record(
        session,
        Measurement,
        recorded_by=recorded_by,
        batch_id=batch.id,
        kind=kind,
        file_name=str(file_name),
        raw_content=bytes(raw_content),
        content_sha256=hashlib.sha256(bytes(raw_content)).hexdigest(),
        metadata_toml=metadata_toml,
        instrument=instrument,
        geometry=to_jsonable(dict(geometry)) if geometry else None,
        measured_on=measured_on,
        phantom_age_days=None if phantom_age_days is None else float(phantom_age_days),
        temperature_c=None if temperature_c is None else float(temperature_c),
    )


def add_fit(
    session: Session,
    measurement: Measurement,
    *,
    results: Mapping[str, Any],
    model: str | None = None,
    covariance: Any = None,
    warnings: list[str] | None = None,
    chi2_red: float | None = None,
    recorded_by: str | None = None,
) -> Fit:
    """Store the fit of a measurement (``results`` is the fit object as printed)."""
    results = to_jsonable(dict(results))
    model = model or results.get("model")
    if not model:
        raise InputError("a fit needs its model name (the fit object has no 'model')")
    chi2 = chi2_red if chi2_red is not None else results.get("chi2_red")
    return new_record(
        session,
        Fit,
        recorded_by=recorded_by,
        measurement_id=measurement.id,
        model=str(model),
        results=results,
        covariance=to_jsonable(covariance) if covariance is not None else None,
        warnings=list(warnings if warnings is not None else results.get("warnings", [])),
        chi2_red=None if chi2 is None else float(chi2),
        software_version=__version__,
    )


def get_measurement(session: Session, measurement_id: int) -> Measurement:
    """A measurement version by its id; unknown ids are refused with one line."""
    row = session.get(Measurement, int(measurement_id))
    if row is None:
        raise InputError(f"unknown measurement {measurement_id}")
    return row


def measurements_of(session: Session, batch: Batch, *, include_retracted: bool = False) -> list[Measurement]:
    """The current measurements of a batch (over all versions of the batch record)."""
    versions = select(Batch.id).where(Batch.uid == batch.uid)
    query = current(session, Measurement, include_retracted=include_retracted).where(
        Measurement.batch_id.in_(versions)
    )
    return list(session.scalars(query))


def fits_of(session: Session, measurement: Measurement, *, include_retracted: bool = False) -> list[Fit]:
    """The current fits of a measurement (over all versions of the measurement record)."""
    versions = select(Measurement.id).where(Measurement.uid == measurement.uid)
    query = current(session, Fit, include_retracted=include_retracted).where(
        Fit.measurement_id.in_(versions)
    )
    return list(session.scalars(query))
