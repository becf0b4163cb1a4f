"""Measurement CSV files: reading, validating and combining what an instrument recorded (layer 3).

The CSV layouts are those of docs/formats.md ("Measurement CSV"); one header row, one row
per point, an optional first line ``# source: ...``:

* ``srdr``  ``wavelength_nm,rho_mm,reflectance_per_mm2[,sd]`` (absolute) or
  ``wavelength_nm,rho_mm,reflectance_relative[,sd]`` (scale unknown, fitted) or
  ``wavelength_nm,rho_mm,reading[,sd]`` (raw instrument reading, calibrated with a reference
  phantom named in the sidecar, see :mod:`phantomlab.calibration.reference`);
* ``sfdi``  ``wavelength_nm,fx_per_mm,reflectance[,sd]`` or ``...,reading[,sd]`` (raw);
* ``slab``  ``wavelength_nm,total_reflectance,total_transmittance[,collimated_transmittance]``
  ``[,sd_r,sd_t[,sd_tc]]`` (already corrected for the sphere);
* ``sphere`` ``wavelength_nm,r_sample,r_standard,r_dark,t_sample,t_open,t_dark``
  ``[,tc_sample,tc_open,tc_dark]``: raw detector readings of integrating spheres, the sphere
  geometry in the sidecar's ``[sphere]`` table (:mod:`phantomlab.calibration.sphere_readings`);
* ``optics`` ``wavelength_nm,mua_per_mm,musp_per_mm[,mua_sd_per_mm,musp_sd_per_mm]``;
* ``td`` and ``fd`` (photon-arrival histograms with their IRF; AC amplitude and phase) have
  their own readers, :mod:`phantomlab.calibration.td_measurements` and
  :mod:`phantomlab.calibration.fd_measurements`; :func:`read_measurement` hands them over.

Metadata sit in a TOML file of the same name beside the CSV (``m1.csv`` → ``m1.toml``) or
come as keyword arguments (which win over the sidecar); they are read and checked in
:mod:`phantomlab.calibration.measurement_metadata` (:class:`MeasurementMetadata`,
:class:`ReferenceSpec`, :func:`metadata_from_mapping` and :func:`read_sidecar` are importable
from here too, as the td and fd readers import them).  Everything that cannot be accepted
is refused with one :class:`~phantomlab.errors.InputError` line naming the row (and the file
line) and the column.
"""

from __future__ import annotations

import csv
import io
import math
from dataclasses import dataclass, replace
from pathlib import Path
from typing import Sequence

import numpy as np

from phantomlab.calibration.measurement_metadata import (  # the sidecar's reader; re-exported
    DETECTORS,
    MeasurementMetadata,
    ReferenceSpec,
    metadata_from_mapping,
    read_sidecar,
)
from phantomlab.errors import InputError
from phantomlab.inputs import read_text_file
from phantomlab.limits import check_limit

__all__ = [
    "KINDS",
    "Measurement",
    "MeasurementMetadata",
    "ReferenceSpec",
    "read_measurement",
    "parse_measurement_text",
    "read_sidecar",
    "metadata_from_mapping",
    "DETECTORS",
    "combine_replicates",
]

#: Measurement kinds and the abscissa column each one has (None: one point per wavelength).
KINDS: dict[str, str | None] = {"srdr": "rho_mm", "sfdi": "fx_per_mm", "slab": None, "sphere": None,
                                "optics": None, "td": "rho_mm", "fd": "rho_mm"}
#: Kinds read by their own modules (td_measurements, fd_measurements).
OWN_READER_KINDS = ("td", "fd")

#: Raw sphere readings (kind ``sphere``): reflection, transmission, optional collimated beam.
SPHERE_READING_COLUMNS = ("r_sample", "r_standard", "r_dark", "t_sample", "t_open", "t_dark")
SPHERE_COLLIMATED_COLUMNS = ("tc_sample", "tc_open", "tc_dark")

#: Plausible wavelength range of an optical phantom measurement [nm]; outside it, the number is
#: most likely in another unit (um) and is refused.
WAVELENGTH_RANGE_NM = (200.0, 3000.0)

_VALUE_COLUMNS: dict[str, tuple[tuple[str, ...], ...]] = {
    # each alternative: the value column(s); sd columns follow in _SD_COLUMNS
    "srdr": (("reflectance_per_mm2",), ("reflectance_relative",), ("reading",)),
    "sfdi": (("reflectance",), ("reading",)),
    "slab": (("total_reflectance", "total_transmittance", "collimated_transmittance"),
             ("total_reflectance", "total_transmittance")),
    "sphere": (SPHERE_READING_COLUMNS + SPHERE_COLLIMATED_COLUMNS, SPHERE_READING_COLUMNS),
    "optics": (("mua_per_mm", "musp_per_mm"),),
}
_SD_COLUMNS: dict[str, tuple[str, ...]] = {
    "srdr": ("sd",),
    "sfdi": ("sd",),
    "slab": ("sd_r", "sd_t", "sd_tc"),
    "sphere": (),
    "optics": ("mua_sd_per_mm", "musp_sd_per_mm"),
}
# Unit-bearing stems: a column with this stem but another unit suffix is a unit slip.
_UNIT_STEMS = {
    "wavelength": "wavelength_nm",
    "rho": "rho_mm",
    "fx": "fx_per_mm",
    "mua": "mua_per_mm",
    "musp": "musp_per_mm",
    "reflectance_per": "reflectance_per_mm2",
}


@dataclass(frozen=True)
class Measurement:
    """One measurement on a wavelength grid, validated, in canonical units.

    Attributes
    ----------
    kind : str
        ``srdr``, ``sfdi``, ``slab`` or ``optics``.
    scale : str
        ``absolute``, ``relative`` (unknown scale factor) or ``raw`` (instrument reading
        to be calibrated with a reference phantom).
    wavelength_nm : ndarray, shape (W,) [nm]
    axis : ndarray, shape (R,)
        ``rho_mm`` [mm] for srdr, ``fx_per_mm`` [1/mm] for sfdi; empty for slab and optics.
    values : ndarray, shape (W, R) or (W, 2)
        Reflectance [1/mm^2 for srdr, dimensionless for sfdi]; for slab the columns are
        total reflectance and total transmittance; for optics mua and musp [1/mm].
        NaN where a wavelength lacks a point of the common axis.
    sd : ndarray or None
        Standard uncertainties of ``values`` (None when the file gives none).
    source : str or None
        The ``# source:`` line.
    metadata : MeasurementMetadata
    replicates : int
        How many files were combined into this one.
    name : str
        File name (or ``<text>``), used in messages.
    """

    kind: str
    scale: str
    wavelength_nm: np.ndarray
    axis: np.ndarray
    values: np.ndarray
    sd: np.ndarray | None
    source: str | None
    metadata: MeasurementMetadata
    replicates: int = 1
    name: str = "<text>"

    @property
    def axis_name(self) -> str | None:
        """``rho_mm``, ``fx_per_mm`` or None."""
        return KINDS[self.kind]


def _check_kind(kind: str) -> str:
    if kind not in KINDS:
        raise InputError(f"unknown measurement kind {kind!r}; accepted: {', '.join(KINDS)}")
    return kind


def _number(cell: str, *, where: str, column: str) -> float:
    text = cell.strip()
    if text == "":
        raise InputError(f"{where}, column {column}: empty cell; every cell needs a number")
    try:
        value = float(text)
    except ValueError:
        raise InputError(
            f"{where}, column {column}: not a number "
            f"(cells hold bare numbers in the unit the header names)"
        ) from None
    if not math.isfinite(value):
        raise InputError(f"{where}, column {column}: not a finite number")
    return value


def _check_header(header: list[str], kind: str, name: str) -> tuple[tuple[str, ...], tuple[str, ...]]:
    # A header cell that is not one of ours is named by its position, never quoted back.
    seen = set()
    for position, column in enumerate(header, start=1):
        if column in seen:
            raise InputError(f"{name}: header, column {position}: repeats an earlier column name")
        seen.add(column)
    for position, column in enumerate(header, start=1):
        for stem, canonical in _UNIT_STEMS.items():
            if column != canonical and column.startswith(stem + "_") and column not in (
                "reflectance_relative",
            ) and not column.startswith("mua_sd") and not column.startswith("musp_sd"):
                raise InputError(
                    f"{name}: header, column {position} ({stem}_...): unit not accepted; "
                    f"this column must be {canonical}"
                )
    axis = KINDS[kind]
    required = ["wavelength_nm"] + ([axis] if axis else [])
    for column in required:
        if column not in header:
            raise InputError(
                f"{name}: header lacks column {column}; a {kind} file needs "
                f"{_layout(kind)}"
            )
    values = None
    for alternative in _VALUE_COLUMNS[kind]:
        if all(c in header for c in alternative):
            if values is not None and set(alternative) <= set(values):
                continue  # an optional column's shorter layout
            if values is not None:
                raise InputError(
                    f"{name}: header has both {','.join(values)} and {','.join(alternative)}; "
                    f"give one value column ({_layout(kind)})"
                )
            values = alternative
    if values is None:
        raise InputError(f"{name}: header lacks the value column(s); a {kind} file needs {_layout(kind)}")
    sds = tuple(c for c in _SD_COLUMNS[kind][: len(values)] if c in header)
    if sds and len(sds) != len(values):
        raise InputError(
            f"{name}: header gives {','.join(sds)} but not all of "
            f"{','.join(_SD_COLUMNS[kind][: len(values)])}; give all SD columns or none"
        )
    known = set(required) | set(values) | set(_SD_COLUMNS[kind])
    partial = [c for a in _VALUE_COLUMNS[kind] for c in a if c in header and c not in values]
    if partial:
        group = next(a for a in _VALUE_COLUMNS[kind] if partial[0] in a)
        missing = [c for c in group if c not in header]
        raise InputError(f"{name}: header has {partial[0]} but lacks {','.join(missing)}; a {kind} file needs "
                         f"{_layout(kind)}")
    for position, column in enumerate(header, start=1):
        if column not in known:
            raise InputError(
                f"{name}: header, column {position}: not a column of a {kind} file ({_layout(kind)})"
            )
    return values, sds


def _layout(kind: str) -> str:
    axis = KINDS[kind]
    lead = "wavelength_nm" + (f",{axis}" if axis else "")
    alternatives = " or ".join(",".join(a) for a in _VALUE_COLUMNS[kind])
    sds = ",".join(_SD_COLUMNS[kind])
    if kind == "slab":
        return f"{lead},total_reflectance,total_transmittance[,collimated_transmittance][,sd_r,sd_t[,sd_tc]]"
    if kind == "sphere":
        return f"{lead},{','.join(SPHERE_READING_COLUMNS)}[,{','.join(SPHERE_COLLIMATED_COLUMNS)}]"
    return f"{lead},{alternatives}[,{sds}]"


def parse_measurement_text(
    text: str, *, kind: str, name: str = "<text>", metadata: MeasurementMetadata | None = None
) -> Measurement:
    """Parse the CSV text of a measurement file and validate it.

    Parameters
    ----------
    text : str
        The file content.
    kind : str
        ``srdr``, ``sfdi``, ``slab`` or ``optics``.
    name : str
        Shown in error messages.
    metadata : MeasurementMetadata, optional

    Returns
    -------
    Measurement

    Raises
    ------
    InputError
        One line naming the row (and file line) and the column of the first problem.
    """
    _check_kind(kind)
    if kind in OWN_READER_KINDS:
        return _own_reader(kind)(text if "\n" in text else text + "\n")
    metadata = metadata or MeasurementMetadata()
    check_limit("file_mb", len(text) / 1e6, given=f"measurement {name!r}")
    if text.startswith("\ufeff"):  # a byte-order mark (spreadsheet export)
        text = text[1:]
    lines = text.splitlines()
    source = None
    body_start = 0
    while body_start < len(lines) and (not lines[body_start].strip() or lines[body_start].lstrip().startswith("#")):
        stripped = lines[body_start].strip()
        if stripped.lower().startswith("# source:"):
            source = stripped.split(":", 1)[1].strip() or None
        body_start += 1
    if body_start >= len(lines):
        raise InputError(f"{name}: no header row; a {kind} file needs {_layout(kind)}")
    reader = csv.reader(io.StringIO("\n".join(lines[body_start:])))
    rows = list(reader)
    header = [h.strip() for h in rows[0]]
    value_columns, sd_columns = _check_header(header, kind, name)
    index = {c: i for i, c in enumerate(header)}
    axis_name = KINDS[kind]
    data_rows = [(i, r) for i, r in enumerate(rows[1:], start=1) if any(c.strip() for c in r)]
    if not data_rows:
        raise InputError(f"{name}: no data rows after the header")
    records = []
    for row_number, row in data_rows:
        where = f"{name}: row {row_number} (file line {body_start + 1 + row_number})"
        if len(row) != len(header):
            raise InputError(f"{where}: {len(row)} cells, the header has {len(header)}")
        record = {c: _number(row[index[c]], where=where, column=c) for c in header}
        _check_ranges(record, kind, where, value_columns, sd_columns)
        records.append((where, record))
    # ordering: wavelength non-decreasing; inside one wavelength, the axis strictly increasing
    previous = None
    for where, record in records:
        wl = record["wavelength_nm"]
        if previous is not None:
            pwl, paxis = previous
            if wl < pwl:
                raise InputError(
                    f"{where}, column wavelength_nm: {wl:g} after {pwl:g}; rows must be sorted "
                    f"by wavelength_nm increasing" + (f", then {axis_name} increasing" if axis_name else "")
                )
            if wl == pwl:
                if axis_name is None:
                    raise InputError(f"{where}, column wavelength_nm: {wl:g} appears twice; one row per wavelength")
                if record[axis_name] <= paxis:
                    raise InputError(
                        f"{where}, column {axis_name}: {record[axis_name]:g} after {paxis:g} at "
                        f"{wl:g} nm; {axis_name} must increase within each wavelength"
                    )
        previous = (wl, record[axis_name] if axis_name else None)
    wavelengths = np.unique([r["wavelength_nm"] for _, r in records])
    if axis_name:
        axis = np.unique([r[axis_name] for _, r in records])
        values = np.full((wavelengths.size, axis.size), np.nan)
        sd = np.full_like(values, np.nan) if sd_columns else None
        for _, r in records:
            i = np.searchsorted(wavelengths, r["wavelength_nm"])
            j = np.searchsorted(axis, r[axis_name])
            values[i, j] = r[value_columns[0]]
            if sd is not None:
                sd[i, j] = r[sd_columns[0]]
    else:
        axis = np.zeros(0)
        values = np.array([[r[c] for c in value_columns] for _, r in records])
        sd = np.array([[r[c] for c in sd_columns] for _, r in records]) if sd_columns else None
    scale = {"reflectance_relative": "relative", "reading": "raw", "r_sample": "raw"}.get(value_columns[0], "absolute")
    if kind == "sphere":
        from phantomlab.calibration.sphere_readings import check_readings

        values, sd = check_readings(values, value_columns, wavelengths, records, metadata, name)
    if scale == "raw" and kind != "sphere" and metadata.reference is None:
        raise InputError(
            f"{name}: column {value_columns[0]} holds raw readings but no reference phantom is "
            f"given; add a [reference] table to the sidecar TOML (mua_per_mm, musp_per_mm, reading_csv)"
        )
    for array in (values, sd):
        if array is not None:
            array.setflags(write=False)
    return Measurement(
        kind=kind, scale=scale, wavelength_nm=wavelengths, axis=axis, values=values, sd=sd,
        source=source, metadata=metadata, name=name,
    )


def _check_ranges(record, kind, where, value_columns, sd_columns) -> None:
    lo, hi = WAVELENGTH_RANGE_NM
    wl = record["wavelength_nm"]
    if not lo <= wl <= hi:
        raise InputError(
            f"{where}, column wavelength_nm: {wl:g} outside {lo:g}-{hi:g} nm (is it in um?)"
        )
    axis_name = KINDS[kind]
    if axis_name and record[axis_name] < 0:
        raise InputError(f"{where}, column {axis_name}: {record[axis_name]:g} is negative; accepted: >= 0")
    if axis_name == "rho_mm" and record[axis_name] == 0:
        raise InputError(f"{where}, column rho_mm: 0 mm; source-detector distances must be > 0")
    for column in value_columns:
        value = record[column]
        if kind == "sphere":
            continue  # raw readings: their net signals are checked after the dark is taken off
        if value < 0:
            raise InputError(f"{where}, column {column}: {value:g} is negative; accepted: >= 0")
        if kind == "slab" and column == "collimated_transmittance" and value == 0:
            raise InputError(f"{where}, column collimated_transmittance: 0; accepted: > 0 (leave the column "
                             f"out where the collimated beam was not measurable)")
        if kind == "slab" and value > 1:
            raise InputError(f"{where}, column {column}: {value:g} above 1; accepted: 0 to 1 (a fraction, not %)")
        if kind == "optics" and column == "musp_per_mm" and value == 0:
            raise InputError(f"{where}, column musp_per_mm: 0; accepted: > 0")
    if kind == "slab" and record["total_reflectance"] + record["total_transmittance"] > 1.0:
        raise InputError(
            f"{where}, column total_transmittance: R + T = "
            f"{record['total_reflectance'] + record['total_transmittance']:g} exceeds 1"
        )
    for column in sd_columns:
        if record[column] <= 0:
            raise InputError(f"{where}, column {column}: {record[column]:g}; accepted: > 0")


def read_measurement(path_or_text, *, kind: str, **options) -> Measurement:
    """Read a measurement file (or its text) with its sidecar metadata and options.

    Parameters
    ----------
    path_or_text : str or pathlib.Path
        A path to the CSV file, or the CSV text itself (a string holding a line break).
    kind : str
        ``srdr``, ``sfdi``, ``slab`` or ``optics``.
    **options
        Metadata that win over the sidecar (``n``, ``n_outside``, ``thickness_mm``, ``g``,
        ``n_slide``, ``slide_thickness_mm``, ``slides``, ``specular_included``, ``reference``
        (a mapping as in the sidecar's ``[reference]`` table, or a ReferenceSpec),
        ``sidecar`` (a mapping used instead of the TOML file)). None values are ignored.

    Returns
    -------
    Measurement
    """
    _check_kind(kind)
    if kind in OWN_READER_KINDS:
        return _own_reader(kind)(path_or_text, **options)
    options = {k: v for k, v in options.items() if v is not None}
    sidecar_given = options.pop("sidecar", None)
    if isinstance(path_or_text, Path) or ("\n" not in str(path_or_text)):
        path = Path(path_or_text)
        text = read_text_file(path, what="measurement file")
        name = path.name
        base_dir = path.parent
        table = dict(sidecar_given) if sidecar_given is not None else read_sidecar(path, kind=kind)
        where = path.with_suffix(".toml").name
    else:
        text = str(path_or_text)
        name = "<text>"
        base_dir = None
        table = dict(sidecar_given or {})
        where = "metadata"
    table.update(options)
    metadata = metadata_from_mapping(table, where=where, base_dir=base_dir, kind=kind)
    return parse_measurement_text(text, kind=kind, name=name, metadata=metadata)


def _own_reader(kind: str):
    if kind == "td":
        from phantomlab.calibration.td_measurements import read_td

        return read_td
    from phantomlab.calibration.fd_measurements import read_fd

    return read_fd


def combine_replicates(measurements: Sequence[Measurement]) -> Measurement:
    """Combine replicate measurements of one phantom into one, with their spread.

    The combined value is the mean; its SD is the larger of (a) the standard error from the
    replicates' own spread, s/√k, and (b) the standard error from the stated SDs,
    √(Σσ²)/k. Points missing in some replicates use the others.

    Parameters
    ----------
    measurements : sequence of Measurement
        Same kind, scale and grid (wavelengths and axis).

    Returns
    -------
    Measurement
        ``replicates`` holds the number of files combined.
    """
    items = list(measurements)
    if not items:
        raise InputError("combine_replicates: no measurements given")
    first = items[0]
    if getattr(first, "kind", None) == "td":
        from phantomlab.calibration.td_measurements import combine_td_replicates

        return combine_td_replicates(items)
    if getattr(first, "kind", None) == "fd":
        from phantomlab.calibration.fd_measurements import combine_fd_replicates

        return combine_fd_replicates(items)
    for other in items[1:]:
        if other.kind != first.kind or other.scale != first.scale:
            raise InputError(
                f"replicates: {other.name} is {other.kind}/{other.scale}, {first.name} is "
                f"{first.kind}/{first.scale}; replicates must be of one kind"
            )
        if other.wavelength_nm.shape != first.wavelength_nm.shape or not np.allclose(
            other.wavelength_nm, first.wavelength_nm
        ) or other.axis.shape != first.axis.shape or not np.allclose(other.axis, first.axis):
            raise InputError(f"replicates: {other.name} has another wavelength or distance grid than {first.name}")
    if len(items) == 1:
        return first
    stack = np.stack([m.values for m in items])
    count = np.sum(np.isfinite(stack), axis=0)
    with np.errstate(invalid="ignore", divide="ignore"):
        mean = np.nanmean(stack, axis=0)
        spread = np.nanstd(stack, axis=0, ddof=1) / np.sqrt(count)
        spread = np.where(count > 1, spread, np.nan)
        if all(m.sd is not None for m in items):
            stated = np.sqrt(np.nansum(np.stack([m.sd for m in items]) ** 2, axis=0)) / count
            sd = np.fmax(spread, stated)
        else:
            sd = spread
    return replace(first, values=mean, sd=sd, replicates=sum(m.replicates for m in items),
                   name="+".join(m.name for m in items))
