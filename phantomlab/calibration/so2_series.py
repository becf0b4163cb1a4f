"""Oxygenation series of one batch: μa spectra over time, reference sO₂ readings, and both compared (layer 3).

A blood phantom is deoxygenated step by step (yeast, nitrogen) and re-oxygenated; at
recorded times its μa(λ) is measured (fitted from any measurement kind), and samples are
drawn for a blood-gas analyser or co-oximeter.  Two files (docs/formats.md):

* the **series file**, ``measured_at,wavelength_nm,mua_per_mm[,mua_sd_per_mm]``: one block of
  rows per time point (long layout), each unmixed into sO₂ and total haemoglobin by
  :func:`phantomlab.calibration.unmix.unmix_spectrum`;
* the **reference readings**, ``measured_at`` and ``reference_so2`` (fraction 0–1) or
  ``reference_so2_percent`` (0–100), optionally ``method`` and ``instrument``.

Times are ISO 8601 (``2026-03-02T10:15`` or with seconds), the lab's clock as typed, no time
zone.  Every reading needs its time: a reading without one cannot be set beside the optical
series and is refused.

The comparison sets each reference reading beside the fitted sO₂ at the same moment:
linear interpolation in time between the two fitted points around it (SD interpolated the
same way), or — outside the fitted span — the nearest fitted point, with the time gap.
"""

from __future__ import annotations

import csv
import datetime as _dt
import io
import math
from dataclasses import dataclass, field

import numpy as np

from phantomlab.calibration.unmix import UnmixResult, parse_chromophore_list, unmix_spectrum
from phantomlab.errors import InputError

__all__ = [
    "MAX_SERIES_POINTS",
    "MAX_SERIES_ROWS",
    "MAX_REFERENCE_READINGS",
    "MAX_FILE_BYTES",
    "SeriesPoint",
    "ReferenceReading",
    "parse_time",
    "parse_series_csv",
    "parse_reference_csv",
    "unmix_series",
    "compare_with_references",
]

#: Most time points in one series file.
MAX_SERIES_POINTS = 500
#: Most data rows in one series file (time points × wavelengths).
MAX_SERIES_ROWS = 200_000
#: Most reference readings in one file.
MAX_REFERENCE_READINGS = 1000
#: Largest series or reference file read [bytes].
MAX_FILE_BYTES = 20_000_000
#: Longest method or instrument text [characters].
MAX_TEXT = 200


@dataclass(frozen=True)
class SeriesPoint:
    """One time point of a series: the μa spectrum measured then."""

    measured_at: _dt.datetime
    wavelength_nm: np.ndarray
    mua_per_mm: np.ndarray
    mua_sd_per_mm: np.ndarray | None


@dataclass(frozen=True)
class ReferenceReading:
    """One reference sO₂ reading (blood-gas analyser, co-oximeter) at its time."""

    measured_at: _dt.datetime
    so2: float
    method: str | None = None
    instrument: str | None = None


def parse_time(text, *, where: str) -> _dt.datetime:
    """Read an ISO 8601 date-time (``2026-03-02T10:15[:30]``, a space allowed for the T)."""
    value = str(text).strip() if text is not None else ""
    if not value:
        raise InputError(f"{where}: no time (measured_at); every row needs the time it was taken, e.g. 2026-03-02T10:15")
    if len(value) > 40:
        raise InputError(f"{where}, column measured_at: not a date and time; write it as 2026-03-02T10:15")
    try:
        moment = _dt.datetime.fromisoformat(value)
    except ValueError:
        raise InputError(f"{where}, column measured_at: not a date and time; write it as 2026-03-02T10:15") from None
    if moment.tzinfo is not None:
        raise InputError(f"{where}, column measured_at: carries a time zone; give the lab's clock time without one")
    if moment.year < 1900:
        raise InputError(f"{where}, column measured_at: before 1900; give the date and time it was taken")
    return moment


def _read_text(text: str, name: str) -> list[tuple[int, list[str]]]:
    if len(text) > MAX_FILE_BYTES:
        raise InputError(f"{name}: larger than {MAX_FILE_BYTES // 1_000_000} MB")
    rows = []
    reader = csv.reader(io.StringIO(text))
    for number, cells in enumerate(reader, start=1):
        if not cells or all(not c.strip() for c in cells) or cells[0].lstrip().startswith("#"):
            continue
        rows.append((number, [c.strip() for c in cells]))
    if not rows:
        raise InputError(f"{name}: empty; a header row and data rows are expected")
    return rows


def _number(cell: str, where: str, column: str) -> float:
    try:
        value = float(cell)
    except ValueError:
        raise InputError(f"{where}, column {column}: not a number (cells hold bare numbers in the unit the "
                         "header names)") from None
    if not math.isfinite(value):
        raise InputError(f"{where}, column {column}: not a finite number")
    return value


def parse_series_csv(text: str, *, name: str = "series file") -> list[SeriesPoint]:
    """Read a series file: μa spectra at recorded times.

    Parameters
    ----------
    text : str
        ``measured_at,wavelength_nm,mua_per_mm[,mua_sd_per_mm]``; ``#`` lines are comments.
        Rows of one time point share its ``measured_at`` (they need not be adjacent).
    name : str
        File name for messages.

    Returns
    -------
    list of SeriesPoint, in time order
    """
    rows = _read_text(text, name)
    (_, header), data = rows[0], rows[1:]
    required = ["measured_at", "wavelength_nm", "mua_per_mm"]
    allowed = required + ["mua_sd_per_mm"]
    for column in header:
        if column not in allowed:
            raise InputError(f"{name}: header, column {column!r}: not a series column ({','.join(required)}[,mua_sd_per_mm])")
    missing = [c for c in required if c not in header]
    if missing:
        raise InputError(f"{name}: header lacks {', '.join(missing)}; a series file is {','.join(required)}[,mua_sd_per_mm]")
    if len(data) > MAX_SERIES_ROWS:
        raise InputError(f"{name}: {len(data)} data rows; at most {MAX_SERIES_ROWS}")
    index = {c: header.index(c) for c in header}
    has_sd = "mua_sd_per_mm" in index
    groups: dict[_dt.datetime, list[tuple[float, float, float]]] = {}
    for number, cells in data:
        where = f"{name}, line {number}"
        if len(cells) != len(header):
            raise InputError(f"{where}: {len(cells)} cells for {len(header)} columns")
        moment = parse_time(cells[index["measured_at"]], where=where)
        wavelength = _number(cells[index["wavelength_nm"]], where, "wavelength_nm")
        mua = _number(cells[index["mua_per_mm"]], where, "mua_per_mm")
        sd = _number(cells[index["mua_sd_per_mm"]], where, "mua_sd_per_mm") if has_sd else math.nan
        if wavelength <= 0:
            raise InputError(f"{where}, column wavelength_nm: must be > 0")
        if mua < 0:
            raise InputError(f"{where}, column mua_per_mm: must be >= 0")
        if has_sd and sd <= 0:
            raise InputError(f"{where}, column mua_sd_per_mm: must be > 0")
        groups.setdefault(moment, []).append((wavelength, mua, sd))
        if len(groups) > MAX_SERIES_POINTS:
            raise InputError(f"{name}: more than {MAX_SERIES_POINTS} time points")
    if not groups:
        raise InputError(f"{name}: no data rows")
    points = []
    for moment in sorted(groups):
        array = np.array(sorted(groups[moment]))
        if len(np.unique(array[:, 0])) != len(array):
            raise InputError(f"{name}: time {moment.isoformat()} lists a wavelength twice")
        points.append(SeriesPoint(moment, array[:, 0], array[:, 1], array[:, 2] if has_sd else None))
    return points


def parse_reference_csv(text: str, *, name: str = "reference readings") -> list[ReferenceReading]:
    """Read reference sO₂ readings with their times.

    Parameters
    ----------
    text : str
        ``measured_at`` and exactly one of ``reference_so2`` (fraction, 0–1) or
        ``reference_so2_percent`` (0–100 %); optional ``method``, ``instrument``.
    name : str

    Returns
    -------
    list of ReferenceReading, in time order
    """
    rows = _read_text(text, name)
    (_, header), data = rows[0], rows[1:]
    allowed = ("measured_at", "reference_so2", "reference_so2_percent", "method", "instrument")
    for column in header:
        if column not in allowed:
            raise InputError(f"{name}: header, column {column!r}: not a reference column ({', '.join(allowed)})")
    if "measured_at" not in header:
        raise InputError(f"{name}: header lacks measured_at; every reading needs the time it was taken")
    so2_columns = [c for c in ("reference_so2", "reference_so2_percent") if c in header]
    if len(so2_columns) != 1:
        raise InputError(
            f"{name}: give exactly one of reference_so2 (fraction 0-1) or reference_so2_percent (0-100 %)"
        )
    column = so2_columns[0]
    percent = column.endswith("_percent")
    top = 100.0 if percent else 1.0
    if len(data) > MAX_REFERENCE_READINGS:
        raise InputError(f"{name}: {len(data)} readings; at most {MAX_REFERENCE_READINGS}")
    if not data:
        raise InputError(f"{name}: no readings")
    index = {c: header.index(c) for c in header}
    readings = []
    for number, cells in data:
        where = f"{name}, line {number}"
        if len(cells) != len(header):
            raise InputError(f"{where}: {len(cells)} cells for {len(header)} columns")
        moment = parse_time(cells[index["measured_at"]], where=where)
        value = _number(cells[index[column]], where, column)
        if not 0.0 <= value <= top:
            unit = "0-100 % (reference_so2_percent)" if percent else "0-1 (reference_so2 is a fraction; use reference_so2_percent for %)"
            raise InputError(f"{where}, column {column}: {value:g} is outside {unit}")
        texts = {}
        for key in ("method", "instrument"):
            texts[key] = cells[index[key]] if key in index and cells[index[key]] else None
            if texts[key] is not None and len(texts[key]) > MAX_TEXT:
                raise InputError(f"{where}, column {key}: longer than {MAX_TEXT} characters")
        readings.append(ReferenceReading(moment, value / top, texts["method"], texts["instrument"]))
    return sorted(readings, key=lambda r: r.measured_at)


def unmix_series(points, *, chromophores, source, water_temperature_c: float | None = None) -> list[UnmixResult]:
    """Unmix every time point of a series (:func:`unmix_spectrum`), in order, water at ``water_temperature_c`` [°C]."""
    names = parse_chromophore_list(",".join(chromophores) if not isinstance(chromophores, str) else chromophores)
    results = []
    for point in points:
        try:
            results.append(unmix_spectrum(wavelength_nm=point.wavelength_nm, mua_per_mm=point.mua_per_mm,
                                          mua_sd_per_mm=point.mua_sd_per_mm, chromophores=names, source=source,
                                          water_temperature_c=water_temperature_c))
        except InputError as error:
            raise InputError(f"time {point.measured_at.isoformat()}: {error}") from None
    return results


@dataclass(frozen=True)
class Comparison:
    """One reference reading beside the fitted sO₂ at its time."""

    measured_at: _dt.datetime
    reference_so2: float
    fitted_so2: float | None
    fitted_so2_sd: float | None
    difference: float | None
    gap_min: float
    how: str
    method: str | None = None
    instrument: str | None = None
    extra: dict = field(default_factory=dict)

    def to_json(self) -> dict:
        return {
            "measured_at": self.measured_at.isoformat(),
            "reference_so2": self.reference_so2,
            "fitted_so2": self.fitted_so2,
            "fitted_so2_sd": self.fitted_so2_sd,
            "difference": self.difference,
            "gap_min": self.gap_min,
            "how": self.how,
            "method": self.method,
            "instrument": self.instrument,
        }


def compare_with_references(times, so2, so2_sd, readings) -> list[Comparison]:
    """Set each reference reading beside the fitted sO₂ at its time.

    Parameters
    ----------
    times : sequence of datetime
        Fitted time points, increasing.
    so2, so2_sd : sequence of float or None
        Fitted sO₂ and its SD at those times (None where undefined).
    readings : sequence of ReferenceReading

    Returns
    -------
    list of Comparison
        ``how`` is ``interpolated`` (between the two fitted points around the reading; the
        gap is to the nearer one) or ``nearest`` (outside the fitted span).  ``difference``
        is fitted − reference.
    """
    valid = [(t, s, d) for t, s, d in zip(times, so2, so2_sd) if s is not None and np.isfinite(s)]
    out = []
    for reading in readings:
        if not valid:
            out.append(Comparison(reading.measured_at, reading.so2, None, None, None, math.nan, "none",
                                  reading.method, reading.instrument))
            continue
        seconds = np.array([(t - valid[0][0]).total_seconds() for t, _, _ in valid])
        at = (reading.measured_at - valid[0][0]).total_seconds()
        values = np.array([s for _, s, _ in valid])
        sds = np.array([np.nan if d is None else d for _, _, d in valid])
        gap = float(np.min(np.abs(seconds - at)) / 60.0)
        if seconds[0] <= at <= seconds[-1] and len(valid) > 1:
            fitted = float(np.interp(at, seconds, values))
            sd = float(np.interp(at, seconds, sds))
            how = "interpolated"
        else:
            nearest = int(np.argmin(np.abs(seconds - at)))
            fitted, sd, how = float(values[nearest]), float(sds[nearest]), "nearest"
        out.append(Comparison(reading.measured_at, reading.so2, fitted, sd if np.isfinite(sd) else None,
                              fitted - reading.so2, gap, how, reading.method, reading.instrument))
    return out
