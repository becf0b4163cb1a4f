"""Time-domain (td) measurement files: photon-arrival histograms and their IRF (layer 3).

One CSV per measurement, ``wavelength_nm,rho_mm,time_ps,counts``: a histogram per wavelength
and distance (reflectance: source–detector distance; transmittance: lateral offset from the
beam axis, usually 0), every curve on the same evenly spaced time bins (centres), rows sorted
by wavelength, then distance, then time.  The instrument response (IRF) is a second CSV
``time_ps,counts`` (or ``wavelength_nm,time_ps,counts``: one IRF per wavelength) on the same
time step, named by ``irf = "FILE.csv"`` in the TOML sidecar (beside the CSV) or given as an
option; the batch log stores it inline as an ``[irf]`` table (``time_ps``, ``counts``, optional
``wavelength_nm`` lists).

Sidecar keys besides the common ones (``n``, ``n_outside``, ``thickness_mm``, ``instrument``,
``date``, ...): ``geometry`` (``"reflectance"`` default, or ``"transmittance"``, which needs
``thickness_mm``), ``irf``, ``scale_counts_mm2`` (a calibrated system: counts per unit of
R·Δt [1/mm²]; the amplitude is then not fitted), ``background_counts`` (per bin; default:
estimated from the bins before the pulse), ``window_rise_fraction`` and
``window_tail_fraction`` (the fit window, fractions of the peak).

Everything that cannot be accepted is refused with one :class:`~phantomlab.errors.InputError`
line naming the file, the row (and file line) and the column.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, replace
from pathlib import Path
from typing import Any, Mapping

import numpy as np

from phantomlab.calibration.measurement_rows import (
    MAX_TIME_BINS,
    STEP_TOLERANCE,
    check_sorted,
    check_wavelength,
    fraction_value,
    positive_value,
    read_rows,
    read_source,
    uniform_step,
)
from phantomlab.calibration.measurements import MeasurementMetadata, metadata_from_mapping
from phantomlab.errors import InputError

__all__ = ["TD_COLUMNS", "IRF_COLUMNS", "TD_KEYS", "TimeDomainMeasurement", "read_td", "parse_irf_text",
           "irf_table", "sidecar_with_inline_irf", "combine_td_replicates"]

TD_COLUMNS = ("wavelength_nm", "rho_mm", "time_ps", "counts")
IRF_COLUMNS = ("time_ps", "counts")
#: Sidecar keys of this kind (the common ones are read by metadata_from_mapping).
TD_KEYS = ("geometry", "irf", "scale_counts_mm2", "background_counts", "window_rise_fraction",
           "window_tail_fraction")
#: Largest detection face a td sidecar may give (``detector = "fibre"``, ``fibre_core_mm``) [mm]:
#: time-resolved transmittance is often collected by a fibre bundle or a detector window some
#: millimetres wide on the axis.  # common practice, no source
TD_FIBRE_CORE_MAX_MM = 12.0


@dataclass(frozen=True, eq=False)  # holds arrays
class TimeDomainMeasurement:
    """A validated td file with its IRF, in canonical units.

    Attributes
    ----------
    kind : str
        ``"td"``.
    geometry : str
        ``reflectance`` or ``transmittance``.
    wavelength_nm : ndarray (W,) [nm]
    rho_mm : ndarray (R,) [mm]
        Distances (every distance of the file; a wavelength without one has NaN counts there).
    time_ps : ndarray (K,) [ps]
        Bin centres, one step.
    counts : ndarray (W, R, K)
        Photon counts per bin (NaN: no curve at that wavelength and distance).
    irf_time_ps : ndarray (J,) [ps]
    irf : ndarray (W, J) or (1, J)
        IRF counts (one row for all wavelengths, or one per wavelength).
    thickness_mm : float or None [mm]
    scale_counts_mm2, background_counts : float or None
    window_rise_fraction, window_tail_fraction : float or None
        The fit window's edges as fractions of the peak (None: the fit's defaults).
    metadata : MeasurementMetadata
    first_row : ndarray (W, R) of int
        Data row of each curve's first bin (for messages).
    source, name, irf_name : str
    replicates : int
    """

    kind: str
    geometry: str
    wavelength_nm: np.ndarray
    rho_mm: np.ndarray
    time_ps: np.ndarray
    counts: np.ndarray
    irf_time_ps: np.ndarray
    irf: np.ndarray
    thickness_mm: float | None
    metadata: MeasurementMetadata
    first_row: np.ndarray
    scale_counts_mm2: float | None = None
    background_counts: float | None = None
    window_rise_fraction: float | None = None
    window_tail_fraction: float | None = None
    source: str | None = None
    name: str = "<text>"
    irf_name: str = "<irf>"
    replicates: int = 1
    scale: str = "counts"

    @property
    def axis_name(self) -> str:
        return "rho_mm"

    @property
    def axis(self) -> np.ndarray:
        return self.rho_mm

    @property
    def step_ps(self) -> float:
        return float(self.time_ps[1] - self.time_ps[0])


def parse_irf_text(text: str, *, name: str, data_step_ps: float | None = None):
    """Read an IRF CSV: ``time_ps,counts`` or ``wavelength_nm,time_ps,counts``.

    Returns
    -------
    (ndarray (J,), ndarray (G, J), ndarray (G,) or None)
        Bin centres [ps], counts (one row per wavelength, or one row), their wavelengths [nm].
    """
    first = text.lstrip().splitlines()[0] if text.strip() else ""
    with_wavelength = "wavelength_nm" in first
    required = (("wavelength_nm",) if with_wavelength else ()) + IRF_COLUMNS
    layout = ",".join(required)
    _, records = read_rows(text, name=name, required=required, layout=layout)
    for where, record in records:
        if with_wavelength:
            check_wavelength(where, record["wavelength_nm"])
        if record["counts"] < 0:
            raise InputError(f"{where}, column counts: {record['counts']:g} is negative; accepted: >= 0")
        if record["time_ps"] < -1e6 or record["time_ps"] > 1e7:
            raise InputError(f"{where}, column time_ps: {record['time_ps']:g} outside -1e6..1e7 ps (is it in ns?)")
    check_sorted(records, ("wavelength_nm", "time_ps") if with_wavelength else ("time_ps",),
                  "wavelength_nm, then time_ps increasing" if with_wavelength else "time_ps increasing")
    groups: dict[float, list] = {}
    for where, record in records:
        groups.setdefault(record.get("wavelength_nm", math.nan), []).append((where, record))
    times = None
    rows = []
    for key, items in groups.items():
        t = np.array([r["time_ps"] for _, r in items])
        where = items[0][0]
        if t.size < 2:
            raise InputError(f"{where}, column time_ps: an IRF needs at least two time bins")
        if t.size > MAX_TIME_BINS:
            raise InputError(f"{where}: {t.size} IRF bins; at most {MAX_TIME_BINS}")
        step = uniform_step(t, where=where)
        if times is None:
            times = t
        elif t.size != times.size or np.max(np.abs(t - times)) > STEP_TOLERANCE * step:
            raise InputError(f"{where}, column time_ps: every wavelength's IRF must share one set of time bins")
        if data_step_ps is not None and abs(step - data_step_ps) > STEP_TOLERANCE * data_step_ps:
            raise InputError(f"{where}, column time_ps: the IRF's time step is {step:g} ps, the data's "
                             f"{data_step_ps:g} ps; accepted: the same step")
        counts = np.array([r["counts"] for _, r in items])
        if counts.sum() <= 0:
            raise InputError(f"{where}, column counts: the IRF holds no counts")
        rows.append(counts)
    wavelengths = np.array(sorted(groups)) if with_wavelength else None
    return times, np.array(rows), wavelengths


def irf_table(time_ps, counts, wavelength_nm=None) -> dict[str, Any]:
    """The inline ``[irf]`` sidecar table of an IRF (what the batch log stores)."""
    counts = np.atleast_2d(np.asarray(counts, float))
    table: dict[str, Any] = {"time_ps": [float(v) for v in np.asarray(time_ps, float)]}
    if wavelength_nm is not None and counts.shape[0] > 1:
        table["wavelength_nm"] = [float(v) for v in np.asarray(wavelength_nm, float)]
        table["counts"] = [[float(v) for v in row] for row in counts]
    else:
        table["counts"] = [float(v) for v in counts[0]]
    return table


def _irf_from_table(table: Mapping, *, where: str):
    if not isinstance(table, Mapping) or "time_ps" not in table or "counts" not in table:
        raise InputError(f"{where}: [irf] must hold time_ps and counts lists (or irf = \"FILE.csv\")")
    try:
        times = np.asarray(table["time_ps"], float)
        counts = np.atleast_2d(np.asarray(table["counts"], float))
    except (TypeError, ValueError):
        raise InputError(f"{where}: [irf] time_ps and counts must be lists of numbers") from None
    if times.ndim != 1 or counts.shape[1] != times.size or not np.all(np.isfinite(counts)) or np.any(counts < 0):
        raise InputError(f"{where}: [irf] needs one count >= 0 per time_ps entry in each row")
    wavelengths = table.get("wavelength_nm")
    if wavelengths is not None:
        wavelengths = np.asarray(wavelengths, float)
        if wavelengths.size != counts.shape[0]:
            raise InputError(f"{where}: [irf] has {counts.shape[0]} rows of counts for {wavelengths.size} wavelengths")
    uniform_step(times, where=f"{where} [irf]")
    return times, counts, wavelengths


def read_td(path_or_text, *, irf=None, **options) -> TimeDomainMeasurement:
    """Read a td file, its sidecar and its IRF (one-line refusals naming file, row and column).

    Parameters
    ----------
    path_or_text : str or Path
        The CSV file, or its text (a string holding a line break).
    irf : str, Path or None
        The IRF CSV (wins over the sidecar's ``irf``).
    **options
        Sidecar values that win over the file's (``n``, ``n_outside``, ``thickness_mm``,
        ``geometry``, ``sidecar`` (a mapping used instead of the TOML file), ...); None ignored.
    """
    options = {k: v for k, v in options.items() if v is not None}
    text, name, base_dir, table, where = read_source(path_or_text, options)
    table.update(options)
    geometry = table.get("geometry", "reflectance")
    if geometry not in ("reflectance", "transmittance"):
        raise InputError(f"{where}: geometry = {geometry!r}; accepted: reflectance, transmittance")
    common = {k: v for k, v in table.items() if k not in TD_KEYS + ("detector", "fibre_core_mm")}
    metadata = metadata_from_mapping(common, where=where, base_dir=base_dir)
    metadata = replace(metadata, **_td_detector(table, where))
    thickness = metadata.thickness_mm
    if geometry == "transmittance" and thickness is None:
        raise InputError(f"{where}: geometry = \"transmittance\" needs thickness_mm (the slab's thickness)")
    layout = ",".join(TD_COLUMNS)
    source, records = read_rows(text, name=name, required=TD_COLUMNS, layout=layout)
    for row_where, record in records:
        check_wavelength(row_where, record["wavelength_nm"])
        if record["rho_mm"] < 0:
            raise InputError(f"{row_where}, column rho_mm: {record['rho_mm']:g} is negative; accepted: >= 0")
        if geometry == "reflectance" and record["rho_mm"] == 0:
            raise InputError(f"{row_where}, column rho_mm: 0 mm in reflectance; source-detector distances must be > 0")
        if record["time_ps"] < 0:
            raise InputError(f"{row_where}, column time_ps: {record['time_ps']:g} is negative; accepted: times >= 0 "
                             "from the start of the instrument's window")
        if record["counts"] < 0:
            raise InputError(f"{row_where}, column counts: {record['counts']:g} is negative; accepted: >= 0")
    check_sorted(records, ("wavelength_nm", "rho_mm", "time_ps"), "wavelength_nm, then rho_mm, then time_ps increasing")
    wavelengths = np.unique([r["wavelength_nm"] for _, r in records])
    distances = np.unique([r["rho_mm"] for _, r in records])
    curves: dict[tuple[float, float], list] = {}
    for row_number, (row_where, record) in enumerate(records, start=1):
        curves.setdefault((record["wavelength_nm"], record["rho_mm"]), []).append((row_number, row_where, record))
    times = None
    first_row = np.zeros((wavelengths.size, distances.size), dtype=int)
    values = {}
    for key, items in curves.items():
        row_where = items[0][1]
        t = np.array([r["time_ps"] for _, _, r in items])
        if t.size < 2:
            raise InputError(f"{row_where}, column time_ps: a curve needs at least two time bins")
        if t.size > MAX_TIME_BINS:
            raise InputError(f"{row_where}: {t.size} time bins in one curve; at most {MAX_TIME_BINS}")
        step = uniform_step(t, where=row_where)
        if times is None:
            times = t
        elif t.size != times.size or np.max(np.abs(t - times)) > STEP_TOLERANCE * step:
            raise InputError(f"{row_where}, column time_ps: every curve must have the same time bins as the first")
        values[key] = np.array([r["counts"] for _, _, r in items])
        i, j = np.searchsorted(wavelengths, key[0]), np.searchsorted(distances, key[1])
        first_row[i, j] = items[0][0]
    counts = np.full((wavelengths.size, distances.size, times.size), np.nan)
    for (wl, rho), v in values.items():
        counts[np.searchsorted(wavelengths, wl), np.searchsorted(distances, rho)] = v
    step = float(np.median(np.diff(times)))
    irf_source = irf if irf is not None else table.get("irf")
    if irf_source is None:
        raise InputError(f"{name}: a td measurement needs its instrument response: give --irf IRF.csv or "
                         f"irf = \"IRF.csv\" in {where}")
    if isinstance(irf_source, Mapping):
        irf_time, irf_counts, irf_wavelengths = _irf_from_table(irf_source, where=where)
        irf_name = "[irf]"
        irf_step = float(np.median(np.diff(irf_time)))
        if abs(irf_step - step) > STEP_TOLERANCE * step:
            raise InputError(f"{where} [irf], column time_ps: the IRF's time step is {irf_step:g} ps, the data's "
                             f"{step:g} ps; accepted: the same step")
    else:
        irf_path = Path(str(irf_source))
        if base_dir is not None and not irf_path.is_absolute() and irf is None:
            irf_path = base_dir / irf_path
        if not irf_path.is_file():
            raise InputError(f"IRF file {str(irf_path)!r} not found (named by {'--irf' if irf is not None else where})")
        irf_name = irf_path.name
        irf_time, irf_counts, irf_wavelengths = parse_irf_text(irf_path.read_text(encoding="utf-8"), name=irf_name,
                                                               data_step_ps=step)
    if irf_wavelengths is not None:
        missing = [w for w in wavelengths if not np.any(np.isclose(irf_wavelengths, w))]
        if missing:
            raise InputError(f"{irf_name}, column wavelength_nm: no IRF for {missing[0]:g} nm (the data's wavelength)")
        order = [int(np.argmin(np.abs(irf_wavelengths - w))) for w in wavelengths]
        irf_counts = irf_counts[order]
    for array in (counts, irf_counts):
        array.setflags(write=False)
    return TimeDomainMeasurement(
        kind="td", geometry=geometry, wavelength_nm=wavelengths, rho_mm=distances, time_ps=times, counts=counts,
        irf_time_ps=irf_time, irf=irf_counts, thickness_mm=thickness, metadata=metadata, first_row=first_row,
        scale_counts_mm2=positive_value(table, "scale_counts_mm2", where),
        background_counts=positive_value(table, "background_counts", where, allow_zero=True),
        window_rise_fraction=fraction_value(table, "window_rise_fraction", where),
        window_tail_fraction=fraction_value(table, "window_tail_fraction", where),
        source=source, name=name, irf_name=irf_name,
    )


def sidecar_with_inline_irf(sidecar_toml: str | None, measurement: "TimeDomainMeasurement") -> str:
    """The sidecar TOML text with the measurement's IRF written in as an ``[irf]`` table.

    What the batch log stores beside a td file: a refit from the log then needs no other file.
    Every other key of the sidecar is kept as it was.
    """
    import tomllib

    import tomli_w

    table: dict[str, Any] = {}
    if sidecar_toml:
        try:
            table = tomllib.loads(sidecar_toml)
        except tomllib.TOMLDecodeError as exc:
            raise InputError(f"measurement metadata (TOML) not readable: {exc}") from None
    per_wavelength = measurement.irf.shape[0] > 1
    table["irf"] = irf_table(measurement.irf_time_ps, measurement.irf,
                             measurement.wavelength_nm if per_wavelength else None)
    table.setdefault("geometry", measurement.geometry)
    return tomli_w.dumps(table)


def combine_td_replicates(items) -> TimeDomainMeasurement:
    """Replicate td histograms of one phantom, summed (counts add; one IRF, one grid)."""
    items = list(items)
    first = items[0]
    for other in items[1:]:
        if not (isinstance(other, TimeDomainMeasurement) and other.counts.shape == first.counts.shape
                and np.allclose(other.time_ps, first.time_ps) and np.allclose(other.rho_mm, first.rho_mm)
                and np.allclose(other.wavelength_nm, first.wavelength_nm)):
            raise InputError(f"replicates: {other.name} has another grid than {first.name}")
    if len(items) == 1:
        return first
    total = np.sum([m.counts for m in items], axis=0)
    total.setflags(write=False)
    return replace(first, counts=total, replicates=sum(m.replicates for m in items),
                   name="+".join(m.name for m in items))


def _td_detector(table, where: str) -> dict:
    """``detector`` (``point``, the default, or ``fibre``) and ``fibre_core_mm`` of a td sidecar, checked."""
    detector = table.get("detector", "point")
    if detector not in ("point", "fibre"):
        raise InputError(f"{where}: detector = {detector!r}; accepted for td: point, fibre (with fibre_core_mm)")
    core = table.get("fibre_core_mm")
    if detector == "point":
        if core is not None:
            raise InputError(f"{where}: fibre_core_mm is given but detector is not 'fibre'; add detector = 'fibre'")
        return {"detector": "point", "fibre_core_mm": None}
    try:
        core = float(core)
    except (TypeError, ValueError):
        raise InputError(f"{where}: detector = 'fibre' needs fibre_core_mm, the face's diameter in mm (> 0 and at "
                         f"most {TD_FIBRE_CORE_MAX_MM:g})") from None
    if not (np.isfinite(core) and 0 < core <= TD_FIBRE_CORE_MAX_MM):
        raise InputError(f"{where}: fibre_core_mm = {core:g}; accepted: > 0 and at most {TD_FIBRE_CORE_MAX_MM:g} mm")
    return {"detector": "fibre", "fibre_core_mm": core}
