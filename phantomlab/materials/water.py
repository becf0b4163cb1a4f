"""Liquid water: density from temperature and the Hale & Querry 1973 absorption (layer 1).

The refractive index of water (IAPWS R9-97) lives with the other index formulas in
:mod:`phantomlab.materials.refractive_index`; it takes its density from
:func:`water_density_Kell1975` here.
"""

from __future__ import annotations

import warnings
from functools import lru_cache
from importlib import resources

import numpy as np

from phantomlab.errors import InputError, PhantomlabWarning

__all__ = [
    "water_density_Kell1975",
    "water_absorption_HaleQuerry1973",
    "water_absorption_per_mm",
    "WATER_ABSORPTION_TABLE_BAND_NM",
]

#: Temperature range of Kell's 1975 density formula [°C].
KELL1975_BAND_C = (0.0, 150.0)

#: Wavelength band of the shipped Hale & Querry 1973 table [nm].
WATER_ABSORPTION_TABLE_BAND_NM = (600.0, 1000.0)

_TABLE_FILE = "water_absorption_hale_querry_1973.csv"


def _as_float_array(value, name: str) -> np.ndarray:
    try:
        array = np.asarray(value, dtype=float)
    except (TypeError, ValueError):
        raise InputError(f"{name} must be a number or an array of numbers, got {value!r}") from None
    return array


def water_density_Kell1975(*, temperature_c=20.0) -> np.ndarray:
    """Density of air-free liquid water at 1 atm from its temperature.

    Parameters
    ----------
    temperature_c : float or array [°C]
        Valid 0–150 °C; outside it a :class:`PhantomlabWarning` names the value.

    Returns
    -------
    ndarray [g/mL]

    Notes
    -----
    Kell's rational function (ref. 1, eq. 16, the IPTS-68 fit)::

        ρ = (999.83952 + 16.945176 t − 7.9870401e−3 t² − 46.170461e−6 t³
             + 105.56302e−9 t⁴ − 280.54253e−12 t⁵) / (1 + 16.879850e−3 t)   [kg/m³]

    The difference between the IPTS-68 and ITS-90 temperature scales (< 0.01 K here)
    is ignored; it moves the density by less than 2 ppm.

    References
    ----------
    1. Kell, G. S. (1975). Density, thermal expansivity, and compressibility of liquid water
       from 0° to 150 °C. J. Chem. Eng. Data 20(1), 97–105. doi:10.1021/je60064a005
    """
    t = _as_float_array(temperature_c, "temperature_c")
    lo, hi = KELL1975_BAND_C
    finite = t[np.isfinite(t)]
    if finite.size and (finite.min() < lo or finite.max() > hi):
        warnings.warn(
            f"water density: temperature {finite.min():g}–{finite.max():g} °C outside the "
            f"{lo:g}–{hi:g} °C of Kell 1975",
            PhantomlabWarning,
            stacklevel=2,
        )
    numerator = (
        999.83952
        + 16.945176 * t
        - 7.9870401e-3 * t**2
        - 46.170461e-6 * t**3
        + 105.56302e-9 * t**4
        - 280.54253e-12 * t**5
    )
    density_kg_m3 = numerator / (1.0 + 16.879850e-3 * t)  # Kell 1975, eq. 16
    return density_kg_m3 / 1000.0


@lru_cache(maxsize=1)
def _table() -> tuple[np.ndarray, np.ndarray, str]:
    text = resources.files("phantomlab").joinpath("data", _TABLE_FILE).read_text(encoding="utf-8")
    lines = [line.strip() for line in text.splitlines() if line.strip()]
    source = lines[0]
    rows = [line.split(",") for line in lines[2:]]
    wavelength = np.array([float(r[0]) for r in rows])
    mua_per_cm = np.array([float(r[1]) for r in rows])
    return wavelength, mua_per_cm / 10.0, source


def water_absorption_HaleQuerry1973(*, wavelength_nm) -> np.ndarray:
    """Absorption coefficient of pure liquid water from the Hale & Querry 1973 table.

    The table (shipped in ``phantomlab/data/water_absorption_hale_querry_1973.csv``, μa =
    4πk/λ, 600–1000 nm) is interpolated by a shape-preserving cubic (PCHIP) through
    log(μa), so the interpolant never overshoots between the tabulated points and stays
    positive.

    Parameters
    ----------
    wavelength_nm : float or array [nm]

    Returns
    -------
    ndarray [1/mm]

    Notes
    -----
    Departures and limits, stated plainly:

    * **Below 600 nm** the shipped table stops.  The 600 nm value (0.00228 /cm) is held
      constant down to any shorter wavelength and a :class:`PhantomlabWarning` says so.
      Water absorbs less in the blue–green than at 600 nm, so the held value is an upper
      estimate there; it is 2.3e-4 /mm, below the μa of almost any phantom.
    * **Above 1000 nm** the absorption of water climbs steeply (1150 and 1450 nm bands);
      holding a value would understate it, so the function refuses (InputError).
    * Temperature dependence of the NIR bands (a few % per 10 °C near 970 nm) is ignored.

    References
    ----------
    1. Hale, G. M. & Querry, M. R. (1973). Optical constants of water in the 200-nm to
       200-µm wavelength region. Appl. Opt. 12(3), 555–563. doi:10.1364/AO.12.000555
    """
    from scipy.interpolate import PchipInterpolator

    wavelength = _as_float_array(wavelength_nm, "wavelength_nm")
    table_nm, table_mua, _ = _table()
    lo, hi = WATER_ABSORPTION_TABLE_BAND_NM
    finite = wavelength[np.isfinite(wavelength)]
    if finite.size and finite.max() > hi:
        raise InputError(
            f"water absorption: wavelength {finite.max():g} nm above the {hi:g} nm end of the "
            f"Hale & Querry 1973 table shipped ({lo:g}–{hi:g} nm); give wavelengths <= {hi:g} nm"
        )
    if finite.size and finite.min() <= 0:
        raise InputError(f"water absorption: wavelength must be > 0 nm, got {finite.min():g}")
    if finite.size and finite.min() < lo:
        warnings.warn(
            f"water absorption: wavelength {finite.min():g} nm below the {lo:g}–{hi:g} nm of the "
            f"Hale & Querry 1973 table shipped; the {lo:g} nm value is held (an upper estimate)",
            PhantomlabWarning,
            stacklevel=2,
        )
    interpolant = PchipInterpolator(table_nm, np.log(table_mua), extrapolate=False)
    held = np.clip(wavelength, lo, hi)
    with np.errstate(invalid="ignore"):
        result = np.exp(interpolant(held))
    return np.where(np.isfinite(wavelength), result, np.nan)


def water_absorption_per_mm(wavelength_nm) -> np.ndarray:
    """μa of pure water [1/mm] on any grid: :func:`water_absorption_HaleQuerry1973`.

    Parameters
    ----------
    wavelength_nm : float or array [nm]

    Returns
    -------
    ndarray [1/mm]
    """
    return water_absorption_HaleQuerry1973(wavelength_nm=wavelength_nm)
