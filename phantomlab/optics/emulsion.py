"""Empirical scattering models of lipid emulsions (layer 2).

Only models with a citation are built in.  The 10 % product is not half the 20 % one (its
droplet sizes differ), so no 10 % model is derived from the 20 % formula; a stock file that
asks for one is refused by the stock loader.
"""

from __future__ import annotations

import warnings

import numpy as np

from phantomlab.errors import InputError, PhantomlabWarning

__all__ = ["emulsion_scattering_Michels2008", "MICHELS2008_BAND_NM", "MICHELS2008_CITATION", "EMULSION_SCATTERING"]

#: Band of the Michels 2008 measurements [nm]: "measured for wavelengths between 350 nm and
#: 900 nm" (Michels, Foschum & Kienle 2008, abstract).
MICHELS2008_BAND_NM = (350.0, 900.0)
#: The citation the band warning names.
MICHELS2008_CITATION = "Michels, Foschum & Kienle 2008, Opt. Express 16:5907"


def emulsion_scattering_Michels2008(*, wavelength_nm) -> tuple[np.ndarray, np.ndarray]:
    """Intrinsic μs and g of a 20 % soybean-oil emulsion stock.

    μs = 3.873e8 · λ^−2.397 [1/mm], g = 1.090 − 6.812e−4 · λ, λ in nm; "intrinsic" means
    per volume fraction of the undiluted 20 % stock in the final mix.

    Parameters
    ----------
    wavelength_nm : float or array [nm]
        Outside 350–900 nm, the band the paper measured, a :class:`PhantomlabWarning`
        names the wavelengths, the band and the paper (the power law is then extrapolated).

    Returns
    -------
    mus_per_mm : ndarray [1/mm]
    g : ndarray [dimensionless]

    Notes
    -----
    Above ≈10 % v/v of stock scattering grows less than linearly (dependent scattering,
    Aernouts et al. 2014); the mixing rule warns.  Batches differ by ≈2 % (Di Ninni et al.
    2011); the calibration loop carries that as the stock's potency.

    References
    ----------
    1. Michels, R., Foschum, F. & Kienle, A. (2008). Optical properties of fat emulsions.
       Opt. Express 16(8), 5907–5925. doi:10.1364/OE.16.005907 (power-law fits for the
       20 % emulsion).
    2. Di Ninni, P., Martelli, F. & Zaccanti, G. (2011). Intralipid: towards a diffusive
       reference standard for optical tissue phantoms. Phys. Med. Biol. 56(2), N21–N28.
    """
    wavelength = np.asarray(wavelength_nm, dtype=float)
    finite = wavelength[np.isfinite(wavelength)]
    if finite.size and finite.min() <= 0:
        raise InputError(f"emulsion model: wavelength must be > 0 nm, got {finite.min():g}")
    lo, hi = MICHELS2008_BAND_NM
    outside = finite[(finite < lo) | (finite > hi)]
    if outside.size:
        warnings.warn(
            f"emulsion model michels2008: wavelength {_span(outside)} outside "
            f"the {lo:g}–{hi:g} nm measured by {MICHELS2008_CITATION}; its scattering is extrapolated there",
            PhantomlabWarning,
            stacklevel=2,
        )
    mus = 3.873e8 * wavelength**-2.397  # Michels 2008, power law for μs of the 20 % emulsion
    g = 1.090 - 6.812e-4 * wavelength  # Michels 2008, linear fit of g
    return mus, g


def _span(values) -> str:
    low, high = float(values.min()), float(values.max())
    return f"{low:g} nm" if low == high else f"{low:g}–{high:g} nm"


#: Emulsion model name (as in stock files) → function.
EMULSION_SCATTERING = {"michels2008": emulsion_scattering_Michels2008}
