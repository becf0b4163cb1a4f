"""Absorption of the liquids stocks are made of besides water: ethanol and lipid (layer 1).

A stock's carrier or solvent displaces matrix in the batch and brings its own absorption
(:mod:`phantomlab.optics.intrinsic`).  Water has its own module
(:mod:`phantomlab.materials.water`); this one holds the published spectra of ethanol (an
absorber stock's solvent) and of lipid (the oil of an emulsion), each a shipped table with
its provenance line, PCHIP in log μa between rows, refused outside the table.
"""

from __future__ import annotations

from functools import lru_cache

import numpy as np

from phantomlab.errors import InputError
from phantomlab.materials.absorption_tables import LogPchip, absorption_table

__all__ = [
    "ethanol_absorption_Kedenburg2012",
    "lipid_absorption_vanVeen2004",
    "ETHANOL_KEDENBURG2012_BAND_NM",
    "LIPID_VANVEEN2004_BAND_NM",
]

ETHANOL_FILE = "ethanol_absorption_kedenburg_2012.csv"
LIPID_FILE = "lipid_absorption_van_veen_2004.csv"

#: Band of the shipped Kedenburg et al. 2012 ethanol rows [nm].
ETHANOL_KEDENBURG2012_BAND_NM = (500.0, 1095.0)
#: Band of the van Veen et al. 2004 lard spectrum [nm].
LIPID_VANVEEN2004_BAND_NM = (429.0, 1098.0)


@lru_cache(maxsize=None)
def _interpolant(file: str) -> LogPchip:
    table = absorption_table(file)
    return LogPchip(table.wavelength_nm, table.mua_per_mm)


def _evaluate(file: str, band, wavelength_nm, what: str) -> np.ndarray:
    try:
        wavelength = np.asarray(wavelength_nm, dtype=float)
    except (TypeError, ValueError):
        raise InputError(f"{what}: wavelength_nm must be numbers in nm, got {wavelength_nm!r}") from None
    finite = wavelength[np.isfinite(wavelength)]
    lo, hi = band
    if finite.size and (finite.min() < lo or finite.max() > hi):
        bad = finite.min() if finite.min() < lo else finite.max()
        raise InputError(f"{what}: wavelength {bad:g} nm outside the {lo:g}–{hi:g} nm of its table; "
                         f"give wavelengths in {lo:g}–{hi:g} nm")
    return _interpolant(file)(wavelength)


def ethanol_absorption_Kedenburg2012(*, wavelength_nm) -> np.ndarray:
    """μa of liquid ethanol at 20 °C [1/mm], 500–1095 nm.

    μa = 4πk/λ from the tabulated extinction index (1 nm rows), PCHIP in log μa.

    Parameters
    ----------
    wavelength_nm : float or array [nm]
        Refused outside 500–1095 nm.

    Returns
    -------
    ndarray [1/mm]

    References
    ----------
    1. Kedenburg, S., Vieweg, M., Gissibl, T. & Giessen, H. (2012). Linear refractive index
       and absorption measurements of nonlinear optical liquids in the visible and
       near-infrared spectral region. Opt. Mater. Express 2(11), 1588–1611.
       doi:10.1364/OME.2.001588
    """
    return _evaluate(ETHANOL_FILE, ETHANOL_KEDENBURG2012_BAND_NM, wavelength_nm, "ethanol absorption (Kedenburg 2012)")


def lipid_absorption_vanVeen2004(*, wavelength_nm) -> np.ndarray:
    """μa of lipid (purified pig lard) [1/mm], 429–1098 nm, PCHIP in log μa.

    Used for the oil of a soybean-oil emulsion: both are triglycerides whose NIR bands (the
    C–H overtones near 930 and 1040 nm) have the same origin; the lard spectrum is the
    published table closest to that oil that was available, so the oil absorption is an
    approximation of the right order, not a measurement of soybean oil.

    Parameters
    ----------
    wavelength_nm : float or array [nm]
        Refused outside 429–1098 nm.

    Returns
    -------
    ndarray [1/mm]

    References
    ----------
    1. van Veen, R. L. P., Sterenborg, H. J. C. M., Pifferi, A., Torricelli, A. & Cubeddu, R.
       (2004). Determination of VIS-NIR absorption coefficients of mammalian fat, with time-
       and spatially resolved diffuse reflectance and transmission spectroscopy. OSA
       Biomedical Topical Meeting; J. Biomed. Opt. 10(5), 054004 (2005).
    """
    return _evaluate(LIPID_FILE, LIPID_VANVEEN2004_BAND_NM, wavelength_nm, "lipid absorption (van Veen 2004)")
