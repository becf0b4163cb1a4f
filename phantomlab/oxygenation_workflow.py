"""Oxygenation series in the batch log (layer 5): one implementation for the command line and the page.

``record_oxygenation_series`` reads both files and unmixes every time point FIRST (a file that
does not parse, a reading without a time, an sO₂ outside 0–1 write nothing), then stores the
files and the results in one transaction.  ``oxygenation_of`` reads a batch's series back,
each with its reference readings set beside the fitted sO₂
(:func:`phantomlab.calibration.so2_series.compare_with_references`).
"""

from __future__ import annotations

import datetime as _dt
from dataclasses import dataclass, field
from typing import Any

from phantomlab.calibration.so2_series import (
    ReferenceReading,
    compare_with_references,
    parse_reference_csv,
    parse_series_csv,
    unmix_series,
)
from phantomlab.calibration.unmix import parse_chromophore_list
from phantomlab.materials.haemoglobin import DEFAULT_HAEMOGLOBIN_SOURCE, haemoglobin_source

__all__ = ["SeriesComputation", "compute_series", "record_oxygenation_series", "oxygenation_of"]


@dataclass(frozen=True)
class SeriesComputation:
    """A series read and unmixed, not yet stored."""

    chromophores: tuple
    source: str
    points: list
    readings: list
    comparison: list
    warnings: list = field(default_factory=list)
    water_temperature_c: float | None = None

    def to_json(self) -> dict[str, Any]:
        return {
            "chromophores": list(self.chromophores),
            "source": self.source,
            "water_temperature_c": self.water_temperature_c,
            "points": self.points,
            "readings": self.readings,
            "comparison": self.comparison,
        }


def _text(content, name: str) -> str:
    """Text of a file handed over (bytes: size limit, UTF-8, byte-order mark dropped, no NUL)."""
    from phantomlab.inputs import decode_text  # layer 0

    if isinstance(content, str):
        return content
    return decode_text(bytes(content), what="file", name=name)


def _point_json(moment: _dt.datetime, start: _dt.datetime, result) -> dict[str, Any]:
    payload = result.to_json()
    return {
        "measured_at": moment.isoformat(),
        "minutes": (moment - start).total_seconds() / 60.0,
        "so2": payload["so2"],
        "so2_sd": payload["so2_sd"],
        "thb_um": payload["thb_um"],
        "thb_sd_um": payload["thb_sd_um"],
        "water_fraction": payload["water_fraction"],
        "water_temperature_c": payload["water_temperature_c"],
        "lipid_fraction": payload.get("lipid_fraction"),
        "chi2_red": payload["chi2_red"],
        "condition_number": payload["condition_number"],
        "warnings": payload["warnings"],
    }


def _readings_json(readings) -> list[dict[str, Any]]:
    return [{"measured_at": r.measured_at.isoformat(), "reference_so2": r.so2, "method": r.method,
             "instrument": r.instrument} for r in readings]


def _compare(points: list[dict], readings: list[dict]) -> list[dict]:
    times = [_dt.datetime.fromisoformat(p["measured_at"]) for p in points]
    refs = [ReferenceReading(_dt.datetime.fromisoformat(r["measured_at"]), float(r["reference_so2"]),
                             r.get("method"), r.get("instrument")) for r in readings]
    start = times[0] if times else None
    rows = []
    for row in compare_with_references(times, [p["so2"] for p in points], [p["so2_sd"] for p in points], refs):
        item = row.to_json()
        item["minutes"] = None if start is None else (row.measured_at - start).total_seconds() / 60.0
        rows.append(item)
    return rows


def compute_series(series_content, *, chromophores, source: str = DEFAULT_HAEMOGLOBIN_SOURCE,
                   readings_content=None, series_file_name: str = "series file",
                   readings_file_name: str = "reference readings",
                   water_temperature_c: float | None = None) -> SeriesComputation:
    """Read the series (and the reference readings), unmix every time point (water at
    ``water_temperature_c`` [°C], None: as tabulated), compare."""
    names = parse_chromophore_list(chromophores if isinstance(chromophores, str) else ",".join(chromophores))
    haemoglobin_source(source)
    points = parse_series_csv(_text(series_content, series_file_name), name=series_file_name)
    readings = [] if readings_content is None else parse_reference_csv(
        _text(readings_content, readings_file_name), name=readings_file_name)
    results = unmix_series(points, chromophores=names, source=source, water_temperature_c=water_temperature_c)
    start = points[0].measured_at
    point_rows = [_point_json(p.measured_at, start, r) for p, r in zip(points, results)]
    reading_rows = _readings_json(readings)
    warnings = []
    for row in point_rows:
        for message in row["warnings"]:
            text = f"{row['measured_at']}: {message}"
            if text not in warnings:
                warnings.append(text)
    temperature = results[0].water_temperature_c if results else water_temperature_c
    return SeriesComputation(names, source, point_rows, reading_rows, _compare(point_rows, reading_rows), warnings,
                             temperature)


@dataclass(frozen=True)
class RecordedSeries:
    """A series stored with its batch."""

    code: str
    series_id: int
    name: str
    computation: SeriesComputation

    def to_json(self) -> dict[str, Any]:
        payload = {"batch": self.code, "series_id": self.series_id, "name": self.name}
        payload.update(self.computation.to_json())
        return payload


def record_oxygenation_series(store, code: str, *, name: str, series_file_name: str, series_content: bytes,
                              chromophores, source: str = DEFAULT_HAEMOGLOBIN_SOURCE,
                              readings_file_name: str | None = None, readings_content: bytes | None = None,
                              recorded_by: str | None = None,
                              water_temperature_c: float | None = None) -> RecordedSeries:
    """Read, unmix and compare first; then one transaction stores both files and the results.

    The water column absorbs at ``water_temperature_c`` [°C]; None: at the measuring
    temperature of the batch's recipe (``[preparation] measure_temperature_c``, default 20 °C).
    """
    from phantomlab.recipe.preparation import measure_temperature_of
    from phantomlab.store import get_batch
    from phantomlab.store.batches import recipe_of
    from phantomlab.store.oxygenation import add_oxygenation_series

    if readings_content is not None and readings_file_name is None:
        readings_file_name = "reference readings"
    if water_temperature_c is None:
        with store.reading() as session:
            water_temperature_c = measure_temperature_of(recipe_of(session, get_batch(session, code)).definition)
    computation = compute_series(series_content, chromophores=chromophores, source=source,
                                 readings_content=readings_content, series_file_name=series_file_name,
                                 readings_file_name=readings_file_name or "reference readings",
                                 water_temperature_c=water_temperature_c)
    series_bytes = series_content.encode("utf-8") if isinstance(series_content, str) else bytes(series_content)
    readings_bytes = None if readings_content is None else (
        readings_content.encode("utf-8") if isinstance(readings_content, str) else bytes(readings_content))
    with store.transaction() as session:
        batch = get_batch(session, code)
        row = add_oxygenation_series(
            session, batch, name=name, series_file_name=series_file_name, series_content=series_bytes,
            chromophores=computation.chromophores, extinction_source=computation.source,
            points=computation.points, readings=computation.readings,
            readings_file_name=readings_file_name, readings_content=readings_bytes, recorded_by=recorded_by,
        )
        series_id = row.id
        stored_name = row.name
    return RecordedSeries(code, series_id, stored_name, computation)


def oxygenation_of(store, code: str) -> list[dict[str, Any]]:
    """Every current oxygenation series of a batch, oldest first, with its comparison table."""
    from phantomlab.store import get_batch
    from phantomlab.store.oxygenation import oxygenation_series_of

    with store.reading() as session:
        batch = get_batch(session, code)
        rows = oxygenation_series_of(session, batch)
        series = [
            {
                "series_id": row.id,
                "name": row.name,
                "recorded_at": row.recorded_at.isoformat(),
                "recorded_by": row.recorded_by,
                "series_file_name": row.series_file_name,
                "readings_file_name": row.readings_file_name,
                "chromophores": row.chromophores.split(","),
                "source": row.extinction_source,
                "water_temperature_c": next((p.get("water_temperature_c") for p in row.points), None),
                "points": list(row.points),
                "readings": list(row.readings),
            }
            for row in rows
        ]
    for item in series:
        item["comparison"] = _compare(item["points"], item["readings"])
    return series
