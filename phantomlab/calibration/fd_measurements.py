"""Frequency-domain (fd) measurement files: AC amplitude and phase lag (layer 3).

One CSV per measurement,
``wavelength_nm,rho_mm,frequency_mhz,amplitude,phase_deg[,amplitude_sd,phase_sd_deg]``: AC
amplitude and phase lag per wavelength, distance and modulation frequency, rows sorted by
wavelength, then distance, then frequency.  Sidecar keys besides the common ones:
``amplitude`` (``"absolute"`` — [1/mm²] per unit incident AC power — or ``"relative"``, the
default: a scale per wavelength and frequency is fitted) and ``phase_offset_deg`` (the system's
phase, subtracted; absent: fitted per wavelength and frequency).

Everything that cannot be accepted is refused with one :class:`~phantomlab.errors.InputError`
line naming the file, the row (and file line) and the column; phases that are radians in the
``phase_deg`` column are recognised and refused.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, replace

import numpy as np

from phantomlab.calibration.measurement_rows import check_sorted, check_wavelength, read_rows, read_source
from phantomlab.calibration.measurements import MeasurementMetadata, metadata_from_mapping
from phantomlab.errors import InputError

__all__ = ["FD_COLUMNS", "FD_SD_COLUMNS", "FD_KEYS", "FrequencyDomainMeasurement", "read_fd",
           "combine_fd_replicates"]

FD_COLUMNS = ("wavelength_nm", "rho_mm", "frequency_mhz", "amplitude", "phase_deg")
FD_SD_COLUMNS = ("amplitude_sd", "phase_sd_deg")
#: Sidecar keys of this kind.
FD_KEYS = ("amplitude", "phase_offset_deg")


@dataclass(frozen=True, eq=False)  # holds arrays
class FrequencyDomainMeasurement:
    """A validated fd file in canonical units.

    Attributes
    ----------
    kind : str
        ``"fd"``.
    wavelength_nm : ndarray (W,) [nm]
    rho_mm : ndarray (R,) [mm]
    frequency_mhz : ndarray (F,) [MHz]
    amplitude, phase_deg : ndarray (W, R, F)
        AC amplitude (absolute: [1/mm²] per unit incident AC power) and phase lag [degrees];
        NaN where the file has no row.
    amplitude_sd, phase_sd_deg : ndarray (W, R, F) or None
    amplitude_scale : str
        ``absolute`` or ``relative`` (a scale per wavelength and frequency is fitted).
    phase_offset_deg : float or None
        The system's phase (subtracted before the fit); None: fitted per wavelength and frequency.
    metadata : MeasurementMetadata
    """

    kind: str
    wavelength_nm: np.ndarray
    rho_mm: np.ndarray
    frequency_mhz: np.ndarray
    amplitude: np.ndarray
    phase_deg: np.ndarray
    amplitude_sd: np.ndarray | None
    phase_sd_deg: np.ndarray | None
    amplitude_scale: str
    phase_offset_deg: float | None
    metadata: MeasurementMetadata
    source: str | None = None
    name: str = "<text>"
    replicates: int = 1

    @property
    def axis_name(self) -> str:
        return "rho_mm"

    @property
    def axis(self) -> np.ndarray:
        return self.rho_mm

    @property
    def scale(self) -> str:
        return self.amplitude_scale


def read_fd(path_or_text, **options) -> FrequencyDomainMeasurement:
    """Read an fd file and its sidecar (one-line refusals naming file, row and column)."""
    options = {k: v for k, v in options.items() if v is not None}
    text, name, base_dir, table, where = read_source(path_or_text, options)
    table.update(options)
    scale = table.get("amplitude", "relative")
    if scale not in ("absolute", "relative"):
        raise InputError(f"{where}: amplitude = {scale!r}; accepted: absolute, relative")
    offset = table.get("phase_offset_deg")
    if offset is not None and (isinstance(offset, bool) or not isinstance(offset, (int, float))):
        raise InputError(f"{where}: phase_offset_deg = {offset!r}; accepted: a number [degrees]")
    metadata = metadata_from_mapping({k: v for k, v in table.items() if k not in FD_KEYS}, where=where,
                                     base_dir=base_dir)
    layout = ",".join(FD_COLUMNS) + "[," + ",".join(FD_SD_COLUMNS) + "]"
    source, records = read_rows(text, name=name, required=FD_COLUMNS, optional=FD_SD_COLUMNS, layout=layout)
    for row_where, record in records:
        check_wavelength(row_where, record["wavelength_nm"])
        if record["rho_mm"] <= 0:
            raise InputError(f"{row_where}, column rho_mm: {record['rho_mm']:g}; accepted: distances > 0")
        if record["frequency_mhz"] <= 0 or record["frequency_mhz"] > 1e5:
            raise InputError(f"{row_where}, column frequency_mhz: {record['frequency_mhz']:g}; accepted: "
                             "0 < f <= 100000 MHz")
        if record["amplitude"] <= 0:
            raise InputError(f"{row_where}, column amplitude: {record['amplitude']:g}; accepted: > 0")
        for column in FD_SD_COLUMNS:
            if column in record and record[column] <= 0:
                raise InputError(f"{row_where}, column {column}: {record[column]:g}; accepted: > 0")
    check_sorted(records, ("wavelength_nm", "rho_mm", "frequency_mhz"),
                  "wavelength_nm, then rho_mm, then frequency_mhz increasing")
    wl = np.unique([r["wavelength_nm"] for _, r in records])
    rho = np.unique([r["rho_mm"] for _, r in records])
    freq = np.unique([r["frequency_mhz"] for _, r in records])
    shape = (wl.size, rho.size, freq.size)
    amplitude = np.full(shape, np.nan)
    phase = np.full(shape, np.nan)
    with_sd = FD_SD_COLUMNS[0] in records[0][1]
    amplitude_sd = np.full(shape, np.nan) if with_sd else None
    phase_sd = np.full(shape, np.nan) if with_sd else None
    rows_at = np.zeros(shape, dtype=int)
    for number, (_, r) in enumerate(records, start=1):
        idx = (np.searchsorted(wl, r["wavelength_nm"]), np.searchsorted(rho, r["rho_mm"]),
               np.searchsorted(freq, r["frequency_mhz"]))
        amplitude[idx] = r["amplitude"]
        phase[idx] = r["phase_deg"]
        rows_at[idx] = number
        if with_sd:
            amplitude_sd[idx] = r["amplitude_sd"]
            phase_sd[idx] = r["phase_sd_deg"]
    _check_phase_unit(phase, amplitude, rho, freq, rows_at, name=name, n=metadata.n or 1.4)
    for array in (amplitude, phase, amplitude_sd, phase_sd):
        if array is not None:
            array.setflags(write=False)
    return FrequencyDomainMeasurement(
        kind="fd", wavelength_nm=wl, rho_mm=rho, frequency_mhz=freq, amplitude=amplitude, phase_deg=phase,
        amplitude_sd=amplitude_sd, phase_sd_deg=phase_sd, amplitude_scale=scale,
        phase_offset_deg=None if offset is None else float(offset), metadata=metadata, source=source, name=name,
    )


def _implied_ratio(k_r: float, k_i: float, omega_over_v: float) -> float:
    """μs′/μa implied by the slopes (Fantini et al. 1994, D = 1/(3(μa + μs′))); NaN if unphysical."""
    if k_i <= 0 or k_r <= 0:
        return math.nan
    mua = 0.5 * omega_over_v * (k_r / k_i - k_i / k_r)
    if mua <= 0:
        return math.nan
    musp = (k_r**2 - k_i**2) / (3 * mua) - mua
    return musp / mua


def _check_phase_unit(phase, amplitude, rho, freq, rows_at, *, name: str, n: float) -> None:
    """Refuse phases that are radians in a phase_deg column.

    In the diffusion picture the slopes of ln(ρ² AC) (−k_r) and of the phase lag (k_i)
    against ρ give μa and μs′ (Fantini et al. 1994, J Opt Soc Am B 11:2128).  Read as degrees,
    radians make k_i 57 times too small, and the implied medium absorbs more than it scatters
    (μs′/μa < 1: no diffuse light would reach the detectors); when that happens while the
    same numbers read as radians imply μs′/μa >= 1, and every phase lies within ±2π, the
    column is taken to hold radians.
    """
    from phantomlab.transport.time_domain_images import SPEED_OF_LIGHT_MM_PER_PS

    if rho.size < 2:
        return
    v = SPEED_OF_LIGHT_MM_PER_PS / n
    for i in range(phase.shape[0]):
        for f in range(phase.shape[2]):
            ok = np.isfinite(phase[i, :, f]) & np.isfinite(amplitude[i, :, f])
            if ok.sum() < 2 or np.max(np.abs(phase[i, ok, f])) > 2 * math.pi:
                continue
            x = rho[ok]
            k_i = float(np.polyfit(x, np.radians(phase[i, ok, f]), 1)[0])
            k_r = -float(np.polyfit(x, np.log(x**2 * amplitude[i, ok, f]), 1)[0])
            omega_over_v = 2 * math.pi * freq[f] * 1e-6 / v
            as_degrees = _implied_ratio(k_r, k_i, omega_over_v)
            as_radians = _implied_ratio(k_r, math.degrees(k_i), omega_over_v)
            if not (as_degrees >= 1.0) and as_radians >= 1.0:
                row = int(rows_at[i, np.flatnonzero(ok)[0], f])
                raise InputError(
                    f"{name}: row {row}, column phase_deg: the phases at {freq[f]:g} MHz grow by "
                    f"{math.degrees(k_i):.3g} degrees/mm, too little for degrees (they look like radians); "
                    "accepted: phase lag in degrees")


def combine_fd_replicates(items) -> FrequencyDomainMeasurement:
    """Replicate fd files of one phantom: the mean, with the spread as SD (as for the other kinds)."""
    items = list(items)
    first = items[0]
    for other in items[1:]:
        if other.amplitude.shape != first.amplitude.shape:
            raise InputError(f"replicates: {other.name} has another grid than {first.name}")
    if len(items) == 1:
        return first
    amp = np.stack([m.amplitude for m in items])
    pha = np.stack([m.phase_deg for m in items])
    k = len(items)
    amp_sd = np.std(amp, axis=0, ddof=1) / math.sqrt(k)
    pha_sd = np.std(pha, axis=0, ddof=1) / math.sqrt(k)
    if all(m.amplitude_sd is not None for m in items):
        amp_sd = np.fmax(amp_sd, np.sqrt(np.sum([m.amplitude_sd**2 for m in items], axis=0)) / k)
        pha_sd = np.fmax(pha_sd, np.sqrt(np.sum([m.phase_sd_deg**2 for m in items], axis=0)) / k)
    return replace(first, amplitude=amp.mean(0), phase_deg=pha.mean(0), amplitude_sd=amp_sd, phase_sd_deg=pha_sd,
                   replicates=k, name="+".join(m.name for m in items))
