"""The batch-log schema (layer 4): SQLAlchemy 2 declarative tables.

History is append-only.  Every record that a person may correct or retract carries the
columns of :class:`VersionedMixin`: ``uid`` names the logical record (shared by all its
versions), ``version`` counts from 1, ``supersedes_id`` points at the version it corrects
(unique, so a version is corrected at most once and history stays a single chain), and
``retracted`` marks a version that withdraws the record while keeping every earlier version.
Nothing is ever updated in place or deleted.

Timestamps are naive UTC (``recorded_at``); calendar dates (``planned_on``, ``measured_on``,
``expiry``) are plain dates.  JSON columns hold plain JSON values only (see
:func:`phantomlab.jsonable.to_jsonable`).

The schema here is the *head* of the migrations in ``phantomlab/store/migrations``; a test
checks that migrating an empty database to the head yields exactly these tables.
"""

from __future__ import annotations

import datetime as _dt
from typing import Any

from sqlalchemy import (
    JSON,
    Boolean,
    CheckConstraint,
    Date,
    DateTime,
    Float,
    ForeignKey,
    Integer,
    LargeBinary,
    String,
    Text,
    UniqueConstraint,
)
from sqlalchemy.orm import DeclarativeBase, Mapped, declared_attr, mapped_column

__all__ = [
    "BATCH_STATUSES",
    "Base",
    "Batch",
    "BatchPlan",
    "CalibrationExclusion",
    "BatchPlanLot",
    "CalibrationPotency",
    "CalibrationState",
    "Fit",
    "Measurement",
    "OxygenationSeries",
    "Recipe",
    "StockLot",
    "VersionedMixin",
    "VERSIONED_MODELS",
    "utc_now",
]

#: The life of a batch, in order.  ``retired`` ends it (the record stays).
BATCH_STATUSES: tuple[str, ...] = ("planned", "mixed", "characterised", "retired")


def utc_now() -> _dt.datetime:
    """The current time as naive UTC, to the microsecond (the stored timestamp form)."""
    return _dt.datetime.now(_dt.timezone.utc).replace(tzinfo=None)


class Base(DeclarativeBase):
    """Declarative base of every phantomlab table."""

    type_annotation_map = {dict[str, Any]: JSON, list[Any]: JSON}


class VersionedMixin:
    """Columns shared by every append-only, versioned record."""

    id: Mapped[int] = mapped_column(Integer, primary_key=True)
    uid: Mapped[str] = mapped_column(String(32), index=True)
    version: Mapped[int] = mapped_column(Integer)
    retracted: Mapped[bool] = mapped_column(Boolean, default=False)
    change_note: Mapped[str | None] = mapped_column(Text, nullable=True)
    recorded_at: Mapped[_dt.datetime] = mapped_column(DateTime, default=utc_now)
    recorded_by: Mapped[str | None] = mapped_column(String(200), nullable=True)

    @declared_attr
    def supersedes_id(cls) -> Mapped[int | None]:  # noqa: N805 (SQLAlchemy idiom)
        return mapped_column(
            Integer, ForeignKey(f"{cls.__tablename__}.id"), unique=True, nullable=True
        )


class StockLot(VersionedMixin, Base):
    """One bottle of stock as it was when a batch used it: a snapshot of its definition."""

    __tablename__ = "stock_lots"
    __table_args__ = (UniqueConstraint("uid", "version", name="uq_stock_lots_uid_version"),)

    stock_key: Mapped[str] = mapped_column(String(100), index=True)
    lot: Mapped[str | None] = mapped_column(String(200), nullable=True)
    kind: Mapped[str] = mapped_column(String(20))
    expiry: Mapped[_dt.date | None] = mapped_column(Date, nullable=True)
    potency_prior: Mapped[float | None] = mapped_column(Float, nullable=True)
    potency_sd_prior: Mapped[float | None] = mapped_column(Float, nullable=True)
    definition: Mapped[dict[str, Any]] = mapped_column(JSON)
    definition_sha256: Mapped[str] = mapped_column(String(64))
    shelf_path: Mapped[str | None] = mapped_column(Text, nullable=True)


class Recipe(VersionedMixin, Base):
    """A recipe as it was used; a changed file of the same name is a new version."""

    __tablename__ = "recipes"
    __table_args__ = (UniqueConstraint("uid", "version", name="uq_recipes_uid_version"),)

    name: Mapped[str] = mapped_column(String(300), index=True)
    recipe_version: Mapped[str | None] = mapped_column(String(50), nullable=True)
    content_hash: Mapped[str] = mapped_column(String(128), index=True)
    definition: Mapped[dict[str, Any]] = mapped_column(JSON)
    source_path: Mapped[str | None] = mapped_column(Text, nullable=True)


class BatchPlan(Base):
    """The plan of a batch exactly as printed (immutable; batch versions share it)."""

    __tablename__ = "batch_plans"

    id: Mapped[int] = mapped_column(Integer, primary_key=True)
    recipe_id: Mapped[int] = mapped_column(ForeignKey("recipes.id"))
    plan: Mapped[dict[str, Any]] = mapped_column(JSON)
    sheet_html: Mapped[str | None] = mapped_column(Text, nullable=True)
    potencies_used: Mapped[dict[str, Any]] = mapped_column(JSON)
    calibration_state_id: Mapped[int | None] = mapped_column(
        ForeignKey("calibration_states.id"), nullable=True
    )
    software_version: Mapped[str] = mapped_column(String(50))
    created_at: Mapped[_dt.datetime] = mapped_column(DateTime, default=utc_now)


class BatchPlanLot(Base):
    """Which stock lot each stock of a plan came from."""

    __tablename__ = "batch_plan_lots"

    plan_id: Mapped[int] = mapped_column(ForeignKey("batch_plans.id"), primary_key=True)
    stock_key: Mapped[str] = mapped_column(String(100), primary_key=True)
    stock_lot_id: Mapped[int] = mapped_column(ForeignKey("stock_lots.id"))


class Batch(VersionedMixin, Base):
    """One phantom batch; every status change, amount record or correction is a version."""

    __tablename__ = "batches"
    __table_args__ = (
        UniqueConstraint("uid", "version", name="uq_batches_uid_version"),
        UniqueConstraint("code", "version", name="uq_batches_code_version"),
        CheckConstraint(
            "status IN ('planned', 'mixed', 'characterised', 'retired')",
            name="ck_batches_status",
        ),
    )

    code: Mapped[str] = mapped_column(String(20), index=True)
    plan_id: Mapped[int] = mapped_column(ForeignKey("batch_plans.id"))
    status: Mapped[str] = mapped_column(String(20))
    operator: Mapped[str | None] = mapped_column(String(200), nullable=True)
    planned_on: Mapped[_dt.date] = mapped_column(Date)
    mixed_on: Mapped[_dt.date | None] = mapped_column(Date, nullable=True)
    matrix_details: Mapped[dict[str, Any] | None] = mapped_column(JSON, nullable=True)
    cure_details: Mapped[dict[str, Any] | None] = mapped_column(JSON, nullable=True)
    notes: Mapped[str | None] = mapped_column(Text, nullable=True)
    actual_amounts: Mapped[list[Any] | None] = mapped_column(JSON, nullable=True)
    actual_prediction: Mapped[dict[str, Any] | None] = mapped_column(JSON, nullable=True)
    actual_alarms: Mapped[list[Any] | None] = mapped_column(JSON, nullable=True)


class Measurement(VersionedMixin, Base):
    """A measurement file attached to a batch, kept byte for byte as uploaded."""

    __tablename__ = "measurements"
    __table_args__ = (UniqueConstraint("uid", "version", name="uq_measurements_uid_version"),)

    batch_id: Mapped[int] = mapped_column(ForeignKey("batches.id"), index=True)
    kind: Mapped[str] = mapped_column(String(20))
    file_name: Mapped[str] = mapped_column(String(500))
    raw_content: Mapped[bytes] = mapped_column(LargeBinary)
    content_sha256: Mapped[str] = mapped_column(String(64))
    metadata_toml: Mapped[str | None] = mapped_column(Text, nullable=True)
    instrument: Mapped[str | None] = mapped_column(String(200), nullable=True)
    geometry: Mapped[dict[str, Any] | None] = mapped_column(JSON, nullable=True)
    measured_on: Mapped[_dt.date | None] = mapped_column(Date, nullable=True)
    phantom_age_days: Mapped[float | None] = mapped_column(Float, nullable=True)
    # added by migration 0002
    temperature_c: Mapped[float | None] = mapped_column(Float, nullable=True)


class Fit(VersionedMixin, Base):
    """An inverse fit of one measurement: the fit object as the fit command printed it."""

    __tablename__ = "fits"
    __table_args__ = (UniqueConstraint("uid", "version", name="uq_fits_uid_version"),)

    measurement_id: Mapped[int] = mapped_column(ForeignKey("measurements.id"), index=True)
    model: Mapped[str] = mapped_column(String(100))
    results: Mapped[dict[str, Any]] = mapped_column(JSON)
    covariance: Mapped[list[Any] | None] = mapped_column(JSON, nullable=True)
    warnings: Mapped[list[Any]] = mapped_column(JSON)
    chi2_red: Mapped[float | None] = mapped_column(Float, nullable=True)
    software_version: Mapped[str] = mapped_column(String(50))


class CalibrationState(VersionedMixin, Base):
    """A set of stock-lot potencies and what they were computed from."""

    __tablename__ = "calibration_states"
    __table_args__ = (
        UniqueConstraint("uid", "version", name="uq_calibration_states_uid_version"),
    )

    method: Mapped[str] = mapped_column(String(200))
    computed_from: Mapped[dict[str, Any]] = mapped_column(JSON)
    notes: Mapped[str | None] = mapped_column(Text, nullable=True)
    software_version: Mapped[str] = mapped_column(String(50))
    # migration 0005: a rollback is a new state that makes an earlier one current again
    restores_state_id: Mapped[int | None] = mapped_column(
        ForeignKey("calibration_states.id", name="fk_calibration_states_restores_state_id"), nullable=True
    )


class CalibrationPotency(Base):
    """The potency of one stock lot in one calibration state (immutable)."""

    __tablename__ = "calibration_potencies"
    __table_args__ = (
        # migration 0003: one row per stock LOT (was: per stock)
        UniqueConstraint(
            "state_id", "stock_key", "lot", name="uq_calibration_potencies_state_stock_lot"
        ),
    )

    id: Mapped[int] = mapped_column(Integer, primary_key=True)
    state_id: Mapped[int] = mapped_column(ForeignKey("calibration_states.id"), index=True)
    stock_key: Mapped[str] = mapped_column(String(100))
    lot: Mapped[str | None] = mapped_column(String(200), nullable=True)
    stock_lot_id: Mapped[int | None] = mapped_column(ForeignKey("stock_lots.id"), nullable=True)
    potency: Mapped[float] = mapped_column(Float)
    potency_sd: Mapped[float] = mapped_column(Float)
    # migration 0005: the lot's spectral correction (SpectralCorrection.to_json()), or None
    spectral: Mapped[dict[str, Any] | None] = mapped_column(JSON, nullable=True)


class CalibrationExclusion(VersionedMixin, Base):
    """A batch (or one of its measurements) left out of the potency calibration, and why.

    Version 1 excludes (``change_note`` holds the reason); a retracted version includes it
    again (its note says why); an unretracted one excludes it once more.  Added by migration
    0005.
    """

    __tablename__ = "calibration_exclusions"
    __table_args__ = (
        UniqueConstraint("uid", "version", name="uq_calibration_exclusions_uid_version"),
    )

    batch_code: Mapped[str] = mapped_column(String(20), index=True)
    measurement_id: Mapped[int | None] = mapped_column(ForeignKey("measurements.id"), nullable=True)


class OxygenationSeries(VersionedMixin, Base):
    """An oxygenation series of one batch: μa spectra over time and reference sO₂ readings.

    Both files are kept byte for byte; ``points`` holds the unmixing of every time point and
    ``readings`` the reference readings, as the command printed them.  Added by migration 0004.
    """

    __tablename__ = "oxygenation_series"
    __table_args__ = (UniqueConstraint("uid", "version", name="uq_oxygenation_series_uid_version"),)

    batch_id: Mapped[int] = mapped_column(ForeignKey("batches.id"), index=True)
    name: Mapped[str] = mapped_column(String(200))
    series_file_name: Mapped[str] = mapped_column(String(500))
    series_content: Mapped[bytes] = mapped_column(LargeBinary)
    series_sha256: Mapped[str] = mapped_column(String(64))
    readings_file_name: Mapped[str | None] = mapped_column(String(500), nullable=True)
    readings_content: Mapped[bytes | None] = mapped_column(LargeBinary, nullable=True)
    readings_sha256: Mapped[str | None] = mapped_column(String(64), nullable=True)
    chromophores: Mapped[str] = mapped_column(String(100))
    extinction_source: Mapped[str] = mapped_column(String(50))
    points: Mapped[list[Any]] = mapped_column(JSON)
    readings: Mapped[list[Any]] = mapped_column(JSON)
    software_version: Mapped[str] = mapped_column(String(50))


#: Models whose records are corrected by new versions and retracted by a mark.
VERSIONED_MODELS = (StockLot, Recipe, Batch, Measurement, Fit, CalibrationState, OxygenationSeries,
                    CalibrationExclusion)
