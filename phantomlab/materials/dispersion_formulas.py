"""Published dispersion formulas of phantom materials (layer 1), one function per formula.

Water (IAPWS R9-97, with the density of Kell 1975), polystyrene (Ma et al. 2003), fused
silica (Malitson 1965), rutile (DeVore 1951), alumina (Malitson & Dodge 1972) and PMMA
(Sultanova et al. 2009).  Every formula takes ``wavelength_nm`` (vacuum wavelength, nm)
keyword-only and returns the real refractive index as a float array of the same shape.
Outside the band a formula was fitted on (its ``*_BAND_NM`` constant), a
:class:`~phantomlab.errors.PhantomlabWarning` names the value and the band.

The registry that picks a formula by material name, and the matrices given as constants or
offsets from water, are in :mod:`phantomlab.materials.refractive_index`.
"""

from __future__ import annotations

import warnings

import numpy as np

from phantomlab.errors import InputError, PhantomlabWarning
from phantomlab.materials.water_density import water_density_Kell1975

__all__ = [
    "water_index_IAPWS1997",
    "polystyrene_index_Ma2003",
    "silica_index_Malitson1965",
    "rutile_index_DeVore1951",
    "alumina_index_MalitsonDodge1972",
    "pmma_index_Sultanova2009",
    "checked_wavelength_um",
    "WATER_IAPWS1997_BAND_NM",
    "POLYSTYRENE_MA2003_BAND_NM",
    "SILICA_MALITSON1965_BAND_NM",
    "RUTILE_DEVORE1951_BAND_NM",
    "ALUMINA_MALITSONDODGE1972_BAND_NM",
    "PMMA_SULTANOVA2009_BAND_NM",
]


def checked_wavelength_um(wavelength_nm) -> np.ndarray:
    """Vacuum wavelength [nm] → [µm] as a float array; non-numbers and values <= 0 refused."""
    try:
        wavelength = np.asarray(wavelength_nm, dtype=float)
    except (TypeError, ValueError):
        raise InputError(
            f"wavelength_nm must be a number or an array of numbers [nm], got {wavelength_nm!r}"
        ) from None
    finite = wavelength[np.isfinite(wavelength)]
    if finite.size and finite.min() <= 0:
        raise InputError(f"wavelength_nm must be > 0 nm, got {finite.min():g}")
    return wavelength / 1000.0


def _check_band(name: str, wavelength_um: np.ndarray, band_nm: tuple[float, float]) -> None:
    finite = wavelength_um[np.isfinite(wavelength_um)] * 1000.0
    lo, hi = band_nm
    outside = finite[(finite < lo - 1e-9) | (finite > hi + 1e-9)]
    if outside.size:
        span = f"{outside.min():g}" if outside.min() == outside.max() else f"{outside.min():g}–{outside.max():g}"
        warnings.warn(
            f"{name}: wavelength {span} nm outside the {lo:g}–{hi:g} nm the formula was fitted on "
            "(extrapolated there)",
            PhantomlabWarning,
            stacklevel=3,
        )


def _sellmeier(wavelength_um, b, c_um):
    """n² − 1 = Σ B_i λ² / (λ² − C_i²), resonances C_i in µm."""
    l2 = wavelength_um**2
    n2 = 1.0 + sum(bi * l2 / (l2 - ci**2) for bi, ci in zip(b, c_um))
    return np.sqrt(n2)


# ---- water ------------------------------------------------------------------------------------

#: IAPWS R9-97 coefficients a0…a7 (ref. eq. 1) and reduced constants.
_IAPWS_A = (
    0.244257733,
    9.74634476e-3,
    -3.73234996e-3,
    2.68678472e-4,
    1.58920570e-3,
    2.45934259e-3,
    0.900704920,
    -1.66626219e-2,
)
_IAPWS_LAMBDA_UV = 0.2292020  # reduced, λ*/0.589 µm
_IAPWS_LAMBDA_IR = 5.432937
_IAPWS_T_REF_K = 273.15
_IAPWS_RHO_REF_KG_M3 = 1000.0
_IAPWS_LAMBDA_REF_UM = 0.589
WATER_IAPWS1997_BAND_NM = (200.0, 1100.0)


def water_index_IAPWS1997(*, wavelength_nm, temperature_c=20.0, density_kg_m3=None) -> np.ndarray:
    """Refractive index of liquid water, IAPWS R9-97.

    Parameters
    ----------
    wavelength_nm : float or array [nm]
        Vacuum wavelength; the formula covers 200–1100 nm (warning outside).
    temperature_c : float or array [°C]
        The release covers −12 to 500 °C; the density default (Kell 1975) covers 0–150 °C.
    density_kg_m3 : float or array [kg/m³], optional
        Density of the water; by default the density of liquid water at 1 atm from
        :func:`~phantomlab.materials.water_density.water_density_Kell1975` (Kell 1975).

    Returns
    -------
    ndarray [dimensionless]

    Notes
    -----
    (n² − 1)/(n² + 2) · 1/ρ̄ = a0 + a1 ρ̄ + a2 T̄ + a3 λ̄² T̄ + a4/λ̄² + a5/(λ̄² − λ̄UV²)
    + a6/(λ̄² − λ̄IR²) + a7 ρ̄²  with T̄ = T/273.15 K, ρ̄ = ρ/1000 kg/m³, λ̄ = λ/0.589 µm.

    References
    ----------
    1. IAPWS (1997). Release on the Refractive Index of Ordinary Water Substance as a
       Function of Wavelength, Temperature and Pressure (R9-97), eq. 1 and Table 1.
    2. Harvey, A. H., Gallagher, J. S. & Levelt Sengers, J. M. H. (1998). Revised formulation
       for the refractive index of water and steam as a function of wavelength, temperature
       and density. J. Phys. Chem. Ref. Data 27(4), 761–774. doi:10.1063/1.556029
    3. Kell, G. S. (1975). J. Chem. Eng. Data 20(1), 97–105 (the density default).
    """
    wavelength_um = checked_wavelength_um(wavelength_nm)
    _check_band("water (IAPWS R9-97)", wavelength_um, WATER_IAPWS1997_BAND_NM)
    temperature = np.asarray(temperature_c, dtype=float)
    if density_kg_m3 is None:
        density = water_density_Kell1975(temperature_c=temperature) * 1000.0
    else:
        density = np.asarray(density_kg_m3, dtype=float)
    t = (temperature + 273.15) / _IAPWS_T_REF_K
    rho = density / _IAPWS_RHO_REF_KG_M3
    lam = wavelength_um / _IAPWS_LAMBDA_REF_UM
    a = _IAPWS_A
    lam2 = lam**2
    rhs = (  # R9-97 eq. 1
        a[0]
        + a[1] * rho
        + a[2] * t
        + a[3] * lam2 * t
        + a[4] / lam2
        + a[5] / (lam2 - _IAPWS_LAMBDA_UV**2)
        + a[6] / (lam2 - _IAPWS_LAMBDA_IR**2)
        + a[7] * rho**2
    )
    lorentz = rhs * rho  # (n² − 1)/(n² + 2)
    return np.sqrt((1.0 + 2.0 * lorentz) / (1.0 - lorentz))


# ---- polymers, oxides -------------------------------------------------------------------------

POLYSTYRENE_MA2003_BAND_NM = (370.0, 1610.0)


def polystyrene_index_Ma2003(*, wavelength_nm, temperature_c=20.0) -> np.ndarray:
    """Refractive index of polystyrene microspheres (Cauchy form).

    n = 1.5725 + 0.0031080/λ² + 0.00034779/λ⁴, λ in µm, fitted 370–1610 nm.

    Parameters
    ----------
    wavelength_nm : float or array [nm]
    temperature_c : float or array [°C]
        Accepted for a uniform interface; not used (the paper gives no temperature term).

    Returns
    -------
    ndarray [dimensionless]

    References
    ----------
    1. Ma, X., Lu, J. Q., Brock, R. S., Jacobs, K. M., Yang, P. & Hu, X.-H. (2003).
       Determination of complex refractive index of polystyrene microspheres from 370 to
       1610 nm. Phys. Med. Biol. 48(24), 4165–4172. doi:10.1088/0031-9155/48/24/013
    """
    wavelength_um = checked_wavelength_um(wavelength_nm)
    _check_band("polystyrene (Ma 2003)", wavelength_um, POLYSTYRENE_MA2003_BAND_NM)
    return 1.5725 + 0.0031080 / wavelength_um**2 + 0.00034779 / wavelength_um**4  # Ma 2003


SILICA_MALITSON1965_BAND_NM = (210.0, 3710.0)


def silica_index_Malitson1965(*, wavelength_nm, temperature_c=20.0) -> np.ndarray:
    """Refractive index of fused silica, three-term Sellmeier, 20 °C.

    Parameters
    ----------
    wavelength_nm : float or array [nm]
        Fitted 210–3710 nm.
    temperature_c : float or array [°C]
        Not used (the formula is for 20 °C).

    Returns
    -------
    ndarray [dimensionless]

    References
    ----------
    1. Malitson, I. H. (1965). Interspecimen comparison of the refractive index of fused
       silica. J. Opt. Soc. Am. 55(10), 1205–1209. doi:10.1364/JOSA.55.001205
    """
    wavelength_um = checked_wavelength_um(wavelength_nm)
    _check_band("silica (Malitson 1965)", wavelength_um, SILICA_MALITSON1965_BAND_NM)
    return _sellmeier(  # Malitson 1965, Sellmeier with three terms
        wavelength_um, (0.6961663, 0.4079426, 0.8974794), (0.0684043, 0.1162414, 9.896161)
    )


#: DeVore 1951 ordinary-ray formula range as the refractiveindex.info database states it
#: (database/data-nk/main/TiO2/Devore-o.yml: 0.43–1.53 µm).
RUTILE_DEVORE1951_BAND_NM = (430.0, 1530.0)


def rutile_index_DeVore1951(*, wavelength_nm, temperature_c=20.0) -> np.ndarray:
    """Ordinary-ray refractive index of rutile TiO₂.

    n_o² = 5.913 + 0.2441/(λ² − 0.0803), λ in µm.

    Parameters
    ----------
    wavelength_nm : float or array [nm]
        The formula's range is 430–1530 nm (:data:`RUTILE_DEVORE1951_BAND_NM`); warning outside.
    temperature_c : float or array [°C]
        Not used.

    Returns
    -------
    ndarray [dimensionless]

    Notes
    -----
    Rutile is birefringent (n_e ≈ n_o + 0.29).  Pigment grains are randomly oriented, and
    the ordinary index is used as the grain index; Mie for a powder is a first guess that
    the calibration loop corrects, and the birefringence is one reason why.

    References
    ----------
    1. DeVore, J. R. (1951). Refractive indices of rutile and sphalerite. J. Opt. Soc. Am.
       41(6), 416–419. doi:10.1364/JOSA.41.000416
    """
    wavelength_um = checked_wavelength_um(wavelength_nm)
    _check_band("rutile (DeVore 1951)", wavelength_um, RUTILE_DEVORE1951_BAND_NM)
    return np.sqrt(5.913 + 0.2441 / (wavelength_um**2 - 0.0803))  # DeVore 1951, ordinary ray


#: Malitson & Dodge 1972 ordinary-ray formula range as the refractiveindex.info database
#: states it (database/data-nk/main/Al2O3/Malitson-o.yml: 0.20–5.0 µm).
ALUMINA_MALITSONDODGE1972_BAND_NM = (200.0, 5000.0)


def alumina_index_MalitsonDodge1972(*, wavelength_nm, temperature_c=20.0) -> np.ndarray:
    """Ordinary-ray refractive index of α-Al₂O₃ (sapphire), three-term Sellmeier.

    Parameters
    ----------
    wavelength_nm : float or array [nm]
        The formula's range is 200–5000 nm (:data:`ALUMINA_MALITSONDODGE1972_BAND_NM`); warning outside.
    temperature_c : float or array [°C]
        Not used.

    Returns
    -------
    ndarray [dimensionless]

    References
    ----------
    1. Malitson, I. H. & Dodge, M. J. (1972). Refractive index and birefringence of
       synthetic sapphire. J. Opt. Soc. Am. 62, 1405 (abstract).
    """
    wavelength_um = checked_wavelength_um(wavelength_nm)
    _check_band("alumina (Malitson & Dodge 1972)", wavelength_um, ALUMINA_MALITSONDODGE1972_BAND_NM)
    return _sellmeier(  # Malitson & Dodge 1972, ordinary ray
        wavelength_um, (1.4313493, 0.65054713, 5.3414021), (0.0726631, 0.1193242, 18.028251)
    )


#: Sultanova et al. 2009 measured range as the refractiveindex.info database states it
#: (Sultanova.yml under poly(methyl methacrylate): 0.4368–1.052 µm).
PMMA_SULTANOVA2009_BAND_NM = (436.8, 1052.0)


def pmma_index_Sultanova2009(*, wavelength_nm, temperature_c=20.0) -> np.ndarray:
    """Refractive index of PMMA, one-term Sellmeier.

    n² − 1 = 1.1819 λ²/(λ² − 0.011313), λ in µm.

    Parameters
    ----------
    wavelength_nm : float or array [nm]
        Measured 436.8–1052 nm (:data:`PMMA_SULTANOVA2009_BAND_NM`); warning outside.
    temperature_c : float or array [°C]
        Not used.

    Returns
    -------
    ndarray [dimensionless]

    References
    ----------
    1. Sultanova, N., Kasarova, S. & Nikolov, I. (2009). Dispersion properties of optical
       polymers. Acta Phys. Pol. A 116(4), 585–587. doi:10.12693/APhysPolA.116.585
    """
    wavelength_um = checked_wavelength_um(wavelength_nm)
    _check_band("PMMA (Sultanova 2009)", wavelength_um, PMMA_SULTANOVA2009_BAND_NM)
    l2 = wavelength_um**2
    return np.sqrt(1.0 + 1.1819 * l2 / (l2 - 0.011313))  # Sultanova 2009
