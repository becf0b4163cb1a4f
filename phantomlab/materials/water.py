"""Absorption of pure liquid water from published tables, with its temperature coefficient (layer 1).

:func:`water_absorption_per_mm` interpolates the rows of a named source by PCHIP in log μa;
the sources (which published table over which band, and at which temperature each was
measured; a stock may name one in its ``water_source`` field) are
:mod:`phantomlab.materials.water_sources`.  One function per table
(:func:`water_absorption_PopeFry1997`, :func:`water_absorption_Kou1993`,
:func:`water_absorption_Segelstein1981`, :func:`water_absorption_HaleQuerry1973`) reads it
alone.

Temperature: each table holds water at its own temperature (Pope & Fry and Kou 22 °C,
Segelstein and Hale & Querry 25 °C).  ``water_absorption_per_mm(..., temperature_c=T)`` adds
the published linear coefficient ∂μa/∂T of the IOCCG 2018 protocols times (T − table
temperature), 300–1230 nm (:func:`water_temperature_coefficient_per_mm_per_c`).

The density of water (Kell 1975) is :mod:`phantomlab.materials.water_density`; its refractive
index (IAPWS R9-97) is :mod:`phantomlab.materials.dispersion_formulas`.
"""

from __future__ import annotations

import warnings
from functools import lru_cache

import numpy as np

from phantomlab.errors import InputError, PhantomlabWarning
from phantomlab.inputs import float_array
from phantomlab.materials.absorption_tables import LogPchip, absorption_table, coefficient_table
from phantomlab.materials.water_sources import (
    DEFAULT_WATER_SOURCE,
    KOU_1993_BAND_NM,
    KOU_1993_FILE,
    POPE_FRY_1997_BAND_NM,
    POPE_FRY_1997_FILE,
    TABLE_TEMPERATURE_C,
    water_absorption_rows,
    water_absorption_rows_and_files,
    water_source,
)

__all__ = [
    "water_absorption_at_temperature",
    "water_absorption_HaleQuerry1973",
    "water_absorption_Segelstein1981",
    "water_absorption_PopeFry1997",
    "water_absorption_Kou1993",
    "water_absorption_per_mm",
    "water_temperature_coefficient_per_mm_per_c",
    "checked_liquid_temperature",
    "LIQUID_WATER_RANGE_C",
]

#: The IOCCG 2018 table of the linear temperature coefficient ∂μa/∂T of pure water.
TEMPERATURE_COEFFICIENT_FILE = "water_temperature_coefficient_ioccg_2018.csv"

#: Farthest from a table's temperature that the linear coefficient is applied without a
#: warning [°C]; the IOCCG 2018 table states no range, so this bound is our choice, no source.
TEMPERATURE_SPAN_C = 15.0
#: Temperatures a user may give for a measurement of a phantom holding liquid water [°C]:
#: liquid at normal pressure, and the bench's range (a phantom warmer than 60 °C softens or
#: dries); the absorption tables warn beyond :data:`TEMPERATURE_SPAN_C` from their own.
LIQUID_WATER_RANGE_C = (0.0, 60.0)


@lru_cache(maxsize=None)
def _interpolant(source: str) -> LogPchip:
    return LogPchip(*water_absorption_rows(source))


def _checked_wavelengths(wavelength_nm, band, what: str) -> np.ndarray:
    wavelength = float_array(wavelength_nm, name="wavelength_nm")
    lo, hi = band
    finite = wavelength[np.isfinite(wavelength)]
    if finite.size and finite.min() <= 0:
        raise InputError(f"water absorption: wavelength must be > 0 nm, got {finite.min():g}")
    if finite.size and (finite.max() > hi or finite.min() < lo):
        bad = finite.max() if finite.max() > hi else finite.min()
        raise InputError(
            f"water absorption: wavelength {bad:g} nm outside the {lo:g}–{hi:g} nm of {what}; "
            f"give wavelengths in {lo:g}–{hi:g} nm"
        )
    return wavelength


def water_absorption_per_mm(wavelength_nm, *, source: str = DEFAULT_WATER_SOURCE, temperature_c=None) -> np.ndarray:
    """μa of pure liquid water [1/mm] from a published table.

    Parameters
    ----------
    wavelength_nm : float or array [nm]
        Inside the source's band (200–1230 nm for the default); outside, refused.
    source : str
        Key of :data:`WATER_ABSORPTION_SOURCES` (default :data:`DEFAULT_WATER_SOURCE`).
    temperature_c : float, optional [°C]
        None (default): each table at its own temperature, as published.  A temperature adds
        ∂μa/∂T × (T − table temperature) (:func:`water_temperature_coefficient_per_mm_per_c`,
        300–1230 nm; refused outside); more than 15 °C from the table's temperature warns.

    Returns
    -------
    ndarray [1/mm]
        Same shape as ``wavelength_nm``; NaN stays NaN.

    Notes
    -----
    The tabulated rows are reproduced exactly; between rows, PCHIP through log μa.  With the
    Pope & Fry composites, wavelengths below 380 nm come from Segelstein 1981, whose UV values
    lie well above the modern ones (≈5× Pope & Fry at 380 nm): a :class:`PhantomlabWarning`
    says so; water absorbs less than 1e-4 /mm there in either case.

    The temperature correction is linear (the IOCCG 2018 coefficients): near 740 nm about
    +0.6 % per °C, near 970 nm +0.5 % per °C, a few 0.1 % per °C in the visible.

    References
    ----------
    1. Pope, R. M. & Fry, E. S. (1997). Absorption spectrum (380–700 nm) of pure water. II.
       Integrating cavity measurements. Appl. Opt. 36(33), 8710–8723. doi:10.1364/AO.36.008710
    2. Kou, L., Labrie, D. & Chylek, P. (1993). Refractive indices of water and ice in the
       0.65- to 2.5-µm spectral range. Appl. Opt. 32(19), 3531–3540. doi:10.1364/AO.32.003531
    3. IOCCG Protocol Series (2018). Inherent Optical Property Measurements and Protocols:
       Absorption Coefficient. Neeley, A. R. & Mannino, A. (eds.), vol. 1.0, IOCCG, Dartmouth,
       NS, Canada (pure-water table: Kou et al. at 5 nm and ∂a_w/∂T).
    4. Segelstein, D. J. (1981). The complex refractive index of water. MSc thesis,
       University of Missouri-Kansas City.
    5. Hale, G. M. & Querry, M. R. (1973). Optical constants of water in the 200-nm to
       200-µm wavelength region. Appl. Opt. 12(3), 555–563. doi:10.1364/AO.12.000555
    """
    spec = water_source(source)
    wavelength = _checked_wavelengths(wavelength_nm, spec.band_nm, f"water source {spec.name} ({spec.citation})")
    finite = wavelength[np.isfinite(wavelength)]
    if (spec.name in ("popefry1997_segelstein1981", "popefry1997_kou1993") and finite.size
            and finite.min() < POPE_FRY_1997_BAND_NM[0]):
        warnings.warn(
            f"water absorption: {finite.min():g} nm is below the {POPE_FRY_1997_BAND_NM[0]:g} nm start of Pope & Fry "
            "1997; Segelstein 1981 is used there, about 5x the modern values at 380 nm (an upper estimate)",
            PhantomlabWarning,
            stacklevel=2,
        )
    mua = _interpolant(spec.name)(wavelength)
    if temperature_c is None:
        return mua
    temperature = float(float_array(temperature_c, name="temperature_c"))
    if not np.isfinite(temperature) or temperature <= -273.15:
        raise InputError(f"water absorption: temperature_c must be a finite temperature in °C, got {temperature_c!r}")
    coefficient, _ = water_temperature_coefficient_per_mm_per_c(wavelength)
    table_temperature = _table_temperature(spec.name, wavelength)
    shift = temperature - table_temperature
    if np.any(np.abs(shift[np.isfinite(shift)]) > TEMPERATURE_SPAN_C):
        warnings.warn(
            f"water absorption: {temperature:g} °C is more than {TEMPERATURE_SPAN_C:g} °C from the table temperature "
            "(22–25 °C); the linear temperature coefficient of IOCCG 2018 is extrapolated there",
            PhantomlabWarning,
            stacklevel=2,
        )
    return mua + coefficient * shift


def _table_temperature(source: str, wavelength: np.ndarray) -> np.ndarray:
    """Temperature of the table row each wavelength is interpolated from [°C]."""
    rows_nm, _, files = water_absorption_rows_and_files(source)
    temperatures = np.array([TABLE_TEMPERATURE_C[f] for f in files])
    index = np.clip(np.searchsorted(rows_nm, np.nan_to_num(wavelength, nan=rows_nm[0])), 0, len(rows_nm) - 1)
    return np.where(np.isfinite(wavelength), temperatures[index], np.nan)


@lru_cache(maxsize=1)
def _temperature_coefficient_rows() -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    table = coefficient_table(TEMPERATURE_COEFFICIENT_FILE)
    per_mm = 1e-4 * 1e-3  # the table's unit is 1e-4 /m per °C
    return (table.columns["wavelength_nm"], table.columns["dmua_dt_1e4_per_m_per_c"] * per_mm,
            table.columns["dmua_dt_sd_1e4_per_m_per_c"] * per_mm)


def water_temperature_coefficient_per_mm_per_c(wavelength_nm) -> tuple[np.ndarray, np.ndarray]:
    """Published linear temperature coefficient ∂μa/∂T of pure water, with its SD.

    Parameters
    ----------
    wavelength_nm : float or array [nm]
        300–1230 nm (the table's rows, every 5 nm); outside, refused.

    Returns
    -------
    coefficient, sd : ndarray [1/mm per °C]
        Linear interpolation between the rows of the IOCCG 2018 table (given there in units
        of 1e-4 /m per °C).

    References
    ----------
    1. IOCCG Protocol Series (2018). Inherent Optical Property Measurements and Protocols:
       Absorption Coefficient. Neeley, A. R. & Mannino, A. (eds.), vol. 1.0, IOCCG,
       Dartmouth, NS, Canada (pure-water table, columns ∂a_w/∂T and its σ).
    """
    rows_nm, coefficient, sd = _temperature_coefficient_rows()
    wavelength = _checked_wavelengths(wavelength_nm, (float(rows_nm[0]), float(rows_nm[-1])),
                                      "the temperature coefficients of IOCCG 2018")
    return np.interp(wavelength, rows_nm, coefficient), np.interp(wavelength, rows_nm, sd)


def checked_liquid_temperature(value, *, what: str) -> float:
    """A measuring temperature [°C] within :data:`LIQUID_WATER_RANGE_C`, or one InputError line naming ``what``."""
    low, high = LIQUID_WATER_RANGE_C
    try:
        temperature = float(value)
    except (TypeError, ValueError):
        raise InputError(f"{what}: {value!r} is not a number; give °C, {low:g} to {high:g}") from None
    if not (np.isfinite(temperature) and low <= temperature <= high):
        raise InputError(f"{what}: {value!r} °C; accepted {low:g} to {high:g} °C (liquid water at the bench)")
    return temperature


def water_absorption_at_temperature(wavelength_nm, *, source: str = DEFAULT_WATER_SOURCE, temperature_c) -> np.ndarray:
    """μa of pure water [1/mm] at a temperature where a published coefficient exists.

    :func:`water_absorption_per_mm` with ``temperature_c`` inside the IOCCG 2018 table's
    300–1230 nm, and the source's own table temperature outside it (no coefficient is
    published there; water absorbs little below 300 nm in any phantom's band).  For a batch's
    predicted optics at the recipe's ``measure_temperature_c``.

    Parameters
    ----------
    wavelength_nm : float or array [nm]
    source : str
        Key of :data:`WATER_ABSORPTION_SOURCES`.
    temperature_c : float or None [°C]
        None: the tables as published.
    """
    wavelength = np.atleast_1d(np.asarray(wavelength_nm, dtype=float))
    mua = np.array(water_absorption_per_mm(wavelength, source=source), dtype=float)
    if temperature_c is None:
        return mua
    rows_nm = _temperature_coefficient_rows()[0]
    inside = (wavelength >= rows_nm[0]) & (wavelength <= rows_nm[-1])
    if np.any(inside):
        mua[inside] = water_absorption_per_mm(wavelength[inside], source=source, temperature_c=temperature_c)
    return mua


def water_absorption_HaleQuerry1973(*, wavelength_nm) -> np.ndarray:
    """μa of pure water [1/mm] from every row of Hale & Querry 1973, Table 1, 200–1000 nm.

    μa = 4πk/λ from the tabulated k (25 nm spacing), PCHIP in log μa between rows; refused
    outside 200–1000 nm.

    Parameters
    ----------
    wavelength_nm : float or array [nm]

    Returns
    -------
    ndarray [1/mm]

    References
    ----------
    1. Hale, G. M. & Querry, M. R. (1973). Optical constants of water in the 200-nm to
       200-µm wavelength region. Appl. Opt. 12(3), 555–563. doi:10.1364/AO.12.000555
    """
    return water_absorption_per_mm(wavelength_nm, source="halequerry1973")


def water_absorption_Segelstein1981(*, wavelength_nm) -> np.ndarray:
    """μa of pure water [1/mm] from Segelstein 1981, 200–1100 nm (μa = 4πk/λ, PCHIP in log μa).

    Parameters
    ----------
    wavelength_nm : float or array [nm]

    Returns
    -------
    ndarray [1/mm]

    References
    ----------
    1. Segelstein, D. J. (1981). The complex refractive index of water. MSc thesis,
       University of Missouri-Kansas City.
    """
    return water_absorption_per_mm(wavelength_nm, source="segelstein1981")


def water_absorption_PopeFry1997(*, wavelength_nm) -> np.ndarray:
    """μa of pure water [1/mm] from Pope & Fry 1997, Table 3, 380–727.5 nm (PCHIP in log μa).

    Parameters
    ----------
    wavelength_nm : float or array [nm]
        Refused outside 380–727.5 nm.

    Returns
    -------
    ndarray [1/mm]

    References
    ----------
    1. Pope, R. M. & Fry, E. S. (1997). Absorption spectrum (380–700 nm) of pure water. II.
       Integrating cavity measurements. Appl. Opt. 36(33), 8710–8723. doi:10.1364/AO.36.008710
    """
    wavelength = _checked_wavelengths(wavelength_nm, POPE_FRY_1997_BAND_NM, "Pope & Fry 1997")
    return _file_interpolant(POPE_FRY_1997_FILE)(wavelength)


@lru_cache(maxsize=None)
def _file_interpolant(file_name: str) -> LogPchip:
    """PCHIP in log μa through every row of one shipped table (read once)."""
    table = absorption_table(file_name)
    return LogPchip(table.wavelength_nm, table.mua_per_mm)


def water_absorption_Kou1993(*, wavelength_nm) -> np.ndarray:
    """μa of pure water at 22 °C [1/mm] from Kou, Labrie & Chylek 1993, 730–1230 nm.

    The rows as the IOCCG 2018 protocols tabulate them every 5 nm (PCHIP in log μa between).

    Parameters
    ----------
    wavelength_nm : float or array [nm]
        Refused outside 730–1230 nm.

    Returns
    -------
    ndarray [1/mm]

    References
    ----------
    1. Kou, L., Labrie, D. & Chylek, P. (1993). Refractive indices of water and ice in the
       0.65- to 2.5-µm spectral range. Appl. Opt. 32(19), 3531–3540. doi:10.1364/AO.32.003531
    2. IOCCG Protocol Series (2018), vol. 1.0 (the 5 nm tabulation with its uncertainty).
    """
    wavelength = _checked_wavelengths(wavelength_nm, KOU_1993_BAND_NM, "Kou et al. 1993")
    return _file_interpolant(KOU_1993_FILE)(wavelength)
