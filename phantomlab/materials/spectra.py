"""Absorber spectra (layer 1): spectrum CSV files, extinction tables, cuvette dilution series.

Three ways a lab knows how strongly an absorber stock absorbs, all ending in the *intrinsic*
μa(λ) of the undiluted stock (per volume fraction of the stock in the final mix, 1/mm):

* a measured intrinsic spectrum, ``wavelength_nm,mua_per_mm`` (or ``mut_per_mm`` for a
  collimated attenuation that includes scattering, as an ink in a cuvette gives);
* a published extinction table with the stock's concentration: molar, base 10,
  ``epsilon_per_molar_per_cm`` [1/(M·cm)], or specific, ``epsilon_per_mg_per_ml_per_cm``
  [1/((mg/mL)·cm)], so μa = ln(10) · ε · c (per cm, divided by 10 for per mm);
* cuvette absorbance readings of a dilution series, ``wavelength_nm,stock_volume_fraction,
  absorbance`` (base 10, blank-corrected, one path length), fitted per wavelength.

Absorbance is base 10, μa natural log: the factor ln(10) is applied here and nowhere else
in this layer.
"""

from __future__ import annotations

import csv
import math
import warnings
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from phantomlab.errors import InputError, PhantomlabWarning
from phantomlab.inputs import read_text_file
from phantomlab.units import LN10

__all__ = [
    "CsvTable",
    "read_csv_table",
    "mua_from_molar_extinction",
    "mua_from_specific_extinction",
    "DilutionFit",
    "fit_dilution_series",
    "CUVETTE_ABSORBANCE_RANGE",
]

#: Cuvette absorbance range in which readings are trusted: stray light bends the top, noise
#: the bottom.  Common practice, no source (FIELD notes: keep A within ≈0.1–1.5).
CUVETTE_ABSORBANCE_RANGE = (0.1, 1.5)


@dataclass(frozen=True)
class CsvTable:
    """A numeric CSV file: one optional ``# source: ...`` line, one header row, numbers.

    Attributes
    ----------
    path : str
    source : str or None
        The provenance line without its ``#``, or None when the file has none.
    columns : dict of str to ndarray
    """

    path: str
    source: str | None
    columns: dict

    def to_definition(self) -> dict:
        """Plain-JSON copy (for database snapshots of a stock definition)."""
        return {
            "path": self.path,
            "source": self.source,
            "columns": {k: v.tolist() for k, v in self.columns.items()},
        }


def read_csv_table(path, *, required: tuple[str, ...], optional: tuple[str, ...] = (), context: str) -> CsvTable:
    """Read a small numeric CSV with named columns.

    Parameters
    ----------
    path : str or Path
    required : tuple of str
        Columns that must be present.
    optional : tuple of str
        Columns that may be present; any other column is refused.
    context : str
        Prefix of every error message (e.g. ``"stock dye_blue, field spectrum_csv"``).

    Returns
    -------
    CsvTable

    Raises
    ------
    InputError
        Missing file, a file past the ``file_mb`` limit or not UTF-8 text, missing or
        unknown columns, non-numeric or non-finite cells, fewer than two rows.  The message
        names rows and expected columns, never what the file holds.
    """
    file = Path(path)
    text = read_text_file(file, what=f"{context}: file")
    lines = [line for line in text.splitlines() if line.strip()]
    source = None
    body = []
    for line in lines:
        if line.lstrip().startswith("#"):
            if source is None and not body:
                source = line.lstrip()[1:].strip()
            continue
        body.append(line)
    if not body:
        raise InputError(f"{context}: {str(file)!r} is empty; expected a header row {','.join(required)}")
    reader = list(csv.reader(body))
    header = [h.strip() for h in reader[0]]
    allowed = set(required) | set(optional)
    missing = [c for c in required if c not in header]
    unknown = [c for c in header if c not in allowed]
    expected = ",".join(required) + "".join(f"[,{o}]" for o in optional)
    if missing or unknown:
        what = []
        if missing:
            what.append(f"missing column(s) {', '.join(missing)}")
        if unknown:  # by position: a header that is not ours is not quoted back
            positions = ", ".join(str(header.index(c) + 1) for c in unknown[:5])
            what.append(f"unknown column(s) (number {positions})")
        raise InputError(f"{context}: {str(file)!r} has {'; '.join(what)}; expected columns {expected}")
    if len(set(header)) != len(header):
        raise InputError(f"{context}: {str(file)!r} repeats a column name; expected columns {expected}")
    rows = reader[1:]
    if len(rows) < 2:
        raise InputError(f"{context}: {str(file)!r} needs at least two data rows")
    values = {name: [] for name in header}
    for number, row in enumerate(rows, start=2):
        if len(row) != len(header):
            raise InputError(
                f"{context}: {str(file)!r} data row {number - 1} has {len(row)} cells, header has {len(header)}"
            )
        for name, cell in zip(header, row):
            try:
                value = float(cell)
            except ValueError:
                raise InputError(
                    f"{context}: {str(file)!r} data row {number - 1}, column {name}: not a number"
                ) from None
            if not math.isfinite(value):
                raise InputError(
                    f"{context}: {str(file)!r} data row {number - 1}, column {name}: value must be finite"
                )
            values[name].append(value)
    columns = {name: np.asarray(v, dtype=float) for name, v in values.items()}
    for array in columns.values():
        array.setflags(write=False)
    return CsvTable(path=str(file), source=source, columns=columns)


def mua_from_molar_extinction(*, epsilon_per_molar_per_cm, concentration_mol_per_l) -> np.ndarray:
    """Intrinsic μa of a dye stock from its molar (base-10) extinction coefficient.

    μa = ln(10) · ε · c, in 1/cm, divided by 10 for 1/mm.

    Parameters
    ----------
    epsilon_per_molar_per_cm : float or array [1/(M·cm)], base 10
    concentration_mol_per_l : float [mol/L]

    Returns
    -------
    ndarray [1/mm]

    Notes
    -----
    Published molar extinction tables of dyes are base 10 (absorbance A = ε c L); the
    factor ln(10) turns them into a natural-log absorption coefficient.

    References
    ----------
    1. Beer–Lambert law, base-10 absorbance, μa = ln(10) A / L.
    """
    epsilon = np.asarray(epsilon_per_molar_per_cm, dtype=float)
    return LN10 * epsilon * float(concentration_mol_per_l) / 10.0


def mua_from_specific_extinction(*, epsilon_per_mg_per_ml_per_cm, concentration_mg_per_ml) -> np.ndarray:
    """Intrinsic μa of a stock from a specific (per mg/mL, base 10) extinction coefficient.

    μa = ln(10) · ε_specific · c, in 1/cm, divided by 10 for 1/mm.

    Parameters
    ----------
    epsilon_per_mg_per_ml_per_cm : float or array [1/((mg/mL)·cm)], base 10
    concentration_mg_per_ml : float [mg/mL]

    Returns
    -------
    ndarray [1/mm]
    """
    epsilon = np.asarray(epsilon_per_mg_per_ml_per_cm, dtype=float)
    return LN10 * epsilon * float(concentration_mg_per_ml) / 10.0


@dataclass(frozen=True)
class DilutionFit:
    """Intrinsic attenuation of a stock from a cuvette dilution series, per wavelength.

    The model at each wavelength is μ(f) = μ1 f + μ2 f² for the stock volume fraction f in
    the cuvette, with μ(f) = ln(10) · A / L.  ``coefficient_per_mm`` is μ1 of the
    straight-line fit through the origin (Beer–Lambert); ``curvature_per_mm`` is μ2 of the
    fit with the curvature term, which is reported and flagged, not used.

    Attributes
    ----------
    wavelength_nm : ndarray [nm]
    coefficient_per_mm : ndarray [1/mm]
        Intrinsic (undiluted-stock) attenuation, natural log.
    coefficient_sd_per_mm : ndarray [1/mm]
        Its standard error from the residual scatter of the straight-line fit.
    curvature_per_mm : ndarray [1/mm]
        μ2 of the quadratic fit; negative when the response flattens (aggregation, stray light).
    curvature_sd_per_mm : ndarray [1/mm]
    relative_nonlinearity : ndarray [dimensionless]
        μ2 f_max / μ1 of the quadratic fit: the departure from a straight line at the
        strongest dilution.
    nonlinear : ndarray of bool
        True where the curvature is significant (|μ2| > 2 SD) and the departure exceeds 5 %
        (thresholds: common practice, no source).
    fractions : ndarray
        The distinct stock volume fractions of the series.
    """

    wavelength_nm: np.ndarray
    coefficient_per_mm: np.ndarray
    coefficient_sd_per_mm: np.ndarray
    curvature_per_mm: np.ndarray
    curvature_sd_per_mm: np.ndarray
    relative_nonlinearity: np.ndarray
    nonlinear: np.ndarray
    fractions: np.ndarray

    @property
    def any_nonlinear(self) -> bool:
        return bool(np.any(self.nonlinear))


#: Departure from a straight line above which a significant curvature is flagged.
#: Common practice, no source.
NONLINEARITY_THRESHOLD = 0.05


def fit_dilution_series(*, wavelength_nm, stock_volume_fraction, absorbance, path_length_mm, context: str = "dilution series") -> DilutionFit:
    """Fit cuvette absorbance readings of a dilution series to the intrinsic attenuation.

    Parameters
    ----------
    wavelength_nm : array [nm]
        One entry per reading.
    stock_volume_fraction : array [dimensionless]
        Volume fraction of the undiluted stock in the cuvette sample, one per reading.
    absorbance : array [dimensionless, base 10]
        Blank-corrected absorbance A = −log10(T), one per reading.
    path_length_mm : float [mm]
        Cuvette path length.
    context : str
        Prefix of error and warning messages.

    Returns
    -------
    DilutionFit

    Notes
    -----
    Per wavelength, least squares through the origin: μ(f) = ln(10) A/L = μ1 f (straight
    line, giving the intrinsic value and its standard error s/√Σf²) and μ1 f + μ2 f²
    (giving the curvature and its standard error).  At least three distinct fractions per
    wavelength are needed so that the curvature has a standard error.  Readings with
    absorbance outside 0.1–1.5 (common practice) raise a :class:`PhantomlabWarning`.

    References
    ----------
    1. Beer–Lambert law, base-10 absorbance, μa = ln(10) A / L.
    """
    wavelength = np.asarray(wavelength_nm, dtype=float)
    fraction = np.asarray(stock_volume_fraction, dtype=float)
    reading = np.asarray(absorbance, dtype=float)
    if not (wavelength.shape == fraction.shape == reading.shape) or wavelength.ndim != 1:
        raise InputError(f"{context}: wavelength_nm, stock_volume_fraction and absorbance must be 1-D of one length")
    if not (isinstance(path_length_mm, (int, float)) and path_length_mm > 0 and math.isfinite(path_length_mm)):
        raise InputError(f"{context}: path length must be a number > 0 mm, got {path_length_mm!r}")
    if np.any(~np.isfinite(fraction)) or np.any(fraction <= 0) or np.any(fraction > 1):
        raise InputError(f"{context}: stock_volume_fraction must lie in (0, 1]")
    grid = np.unique(wavelength)
    distinct = np.unique(fraction)
    lo, hi = CUVETTE_ABSORBANCE_RANGE
    if np.any(reading < lo) or np.any(reading > hi):
        warnings.warn(
            f"{context}: absorbance {reading.min():.3g}–{reading.max():.3g} outside the "
            f"{lo:g}–{hi:g} where cuvette readings are trusted (common practice)",
            PhantomlabWarning,
            stacklevel=2,
        )
    mu = LN10 * reading / float(path_length_mm)
    # per wavelength, all at once: sums over each wavelength's readings by bincount
    index = np.searchsorted(grid, wavelength)
    distinct_per_wavelength = np.bincount(np.unique(np.column_stack([index, fraction]), axis=0)[:, 0].astype(int),
                                          minlength=grid.size)
    if np.any(distinct_per_wavelength < 3):
        i = int(np.argmax(distinct_per_wavelength < 3))
        raise InputError(
            f"{context}: at {grid[i]:g} nm the series has {distinct_per_wavelength[i]} distinct dilution(s); "
            "at least 3 are needed"
        )

    def total(values):
        return np.bincount(index, weights=values, minlength=grid.size)

    f, y = fraction, mu
    count = np.bincount(index, minlength=grid.size).astype(float)
    s_ff, s_fff, s_ffff = total(f * f), total(f**3), total(f**4)
    s_fy, s_ffy = total(f * y), total(f * f * y)
    # straight line through the origin
    slope = s_fy / s_ff
    dof = count - 1
    s2 = total((y - slope[index] * f) ** 2) / dof
    # with the curvature term: normal equations of y = c0 f + c1 f^2 (2 x 2, solved in closed form)
    determinant = s_ff * s_ffff - s_fff**2
    c0 = (s_ffff * s_fy - s_fff * s_ffy) / determinant
    c1 = (s_ff * s_ffy - s_fff * s_fy) / determinant
    dof_q = count - 2
    s2q = total((y - c0[index] * f - c1[index] * f * f) ** 2) / dof_q
    variance_c1 = s2q * s_ff / determinant  # (A^-1)[1, 1] times the residual variance
    with np.errstate(divide="ignore", invalid="ignore"):
        f_max = np.maximum.reduceat(f[np.argsort(index, kind="stable")], np.searchsorted(np.sort(index), np.arange(grid.size)))
        relative = np.where(c0 != 0, c1 * f_max / c0, np.inf)
    out = {"c1": slope, "s1": np.sqrt(s2 / s_ff), "c2": c1, "s2": np.sqrt(np.maximum(variance_c1, 0.0)),
           "rel": relative}
    significant = np.abs(out["c2"]) > 2.0 * out["s2"]
    nonlinear = significant & (np.abs(out["rel"]) > NONLINEARITY_THRESHOLD)
    if np.any(out["c1"] <= 0):
        raise InputError(f"{context}: the fitted attenuation is not positive at some wavelengths; check the blank")
    fit = DilutionFit(
        wavelength_nm=grid,
        coefficient_per_mm=out["c1"],
        coefficient_sd_per_mm=out["s1"],
        curvature_per_mm=out["c2"],
        curvature_sd_per_mm=out["s2"],
        relative_nonlinearity=out["rel"],
        nonlinear=nonlinear,
        fractions=distinct,
    )
    if fit.any_nonlinear:
        worst = int(np.argmax(np.where(nonlinear, np.abs(out["rel"]), -1)))
        warnings.warn(
            f"{context}: Beer–Lambert bends at {int(nonlinear.sum())} of {grid.size} wavelengths "
            f"(up to {100 * out['rel'][worst]:+.1f} % at {grid[worst]:g} nm at the strongest dilution); "
            "use more dilute samples",
            PhantomlabWarning,
            stacklevel=2,
        )
    return fit
