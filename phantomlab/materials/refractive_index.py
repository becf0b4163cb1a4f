"""Refractive index of phantom materials by name (layer 1): the registry and its front function.

The front function :func:`refractive_index` picks a formula from :data:`INDEX_MODELS` by
material name; an unknown name is refused with the list of valid ones.  The published
dispersion formulas (water, polystyrene, silica, rutile, alumina, PMMA) are in
:mod:`phantomlab.materials.dispersion_formulas`; the matrices without a published formula
(silicone, epoxy, and gelatin and agar gels as offsets from water) are here, each a
constant or an offset marked common practice, no source.  Every model takes
``wavelength_nm`` (vacuum wavelength, nm) keyword-only and returns the real refractive index
as a float array of the same shape.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Callable

import numpy as np

from phantomlab.errors import InputError
from phantomlab.materials.dispersion_formulas import (
    ALUMINA_MALITSONDODGE1972_BAND_NM,
    PMMA_SULTANOVA2009_BAND_NM,
    POLYSTYRENE_MA2003_BAND_NM,
    RUTILE_DEVORE1951_BAND_NM,
    SILICA_MALITSON1965_BAND_NM,
    WATER_IAPWS1997_BAND_NM,
    alumina_index_MalitsonDodge1972,
    checked_wavelength_um,
    pmma_index_Sultanova2009,
    polystyrene_index_Ma2003,
    rutile_index_DeVore1951,
    silica_index_Malitson1965,
    water_index_IAPWS1997,
)

__all__ = [
    "IndexModel",
    "INDEX_MODELS",
    "refractive_index",
    "index_model",
    "silicone_index_constant",
    "epoxy_index_constant",
    "gelatin_index_water_offset",
    "agar_index_water_offset",
]


# ---- matrices given as constants or offsets (common practice) --------------------------------

#: Index of cured PDMS silicone, vis–NIR.  Common practice, no source: FIELD notes give
#: 1.40–1.43 for platinum-cure PDMS; 1.41 is the value usually quoted for the common
#: two-part 10:1 kits.  No published dispersion formula is used.
SILICONE_INDEX = 1.41
#: Index of cured epoxy, vis–NIR.  Common practice, no source (FIELD notes: 1.54–1.57).
EPOXY_INDEX = 1.55
#: Offset of a 5–20 % w/v gelatin gel above water.  Common practice, no source: FIELD notes
#: give n ≈ 1.35 for such gels against 1.33 for water.
GELATIN_OFFSET = 0.02
#: Offset of a 0.5–2 % agar/agarose gel above water.  Common practice, no source (FIELD
#: notes: n ≈ 1.33–1.34).
AGAR_OFFSET = 0.003


def _constant(value: float, wavelength_nm) -> np.ndarray:
    wavelength_um = checked_wavelength_um(wavelength_nm)
    return np.where(np.isfinite(wavelength_um), value, np.nan)


def silicone_index_constant(*, wavelength_nm, temperature_c=20.0) -> np.ndarray:
    """Refractive index of cured PDMS silicone: the constant 1.41 (common practice, no source).

    Parameters
    ----------
    wavelength_nm : float or array [nm]
    temperature_c : float or array [°C]
        Not used.

    Returns
    -------
    ndarray [dimensionless]

    Notes
    -----
    No dispersion formula is applied: the kits differ more between brands (1.40–1.43) than
    the dispersion changes the index over 400–1000 nm.  Measure your own cured base when
    silica or another low-contrast scatterer is used in silicone.
    """
    return _constant(SILICONE_INDEX, wavelength_nm)


def epoxy_index_constant(*, wavelength_nm, temperature_c=20.0) -> np.ndarray:
    """Refractive index of cured epoxy: the constant 1.55 (common practice, no source).

    Parameters
    ----------
    wavelength_nm : float or array [nm]
    temperature_c : float or array [°C]
        Not used.

    Returns
    -------
    ndarray [dimensionless]
    """
    return _constant(EPOXY_INDEX, wavelength_nm)


def gelatin_index_water_offset(*, wavelength_nm, temperature_c=20.0) -> np.ndarray:
    """Refractive index of a gelatin gel: water (IAPWS R9-97) + 0.02 (common practice).

    Parameters
    ----------
    wavelength_nm : float or array [nm]
    temperature_c : float or array [°C]
        Temperature of the water term.

    Returns
    -------
    ndarray [dimensionless]
    """
    return water_index_IAPWS1997(wavelength_nm=wavelength_nm, temperature_c=temperature_c) + (
        GELATIN_OFFSET
    )


def agar_index_water_offset(*, wavelength_nm, temperature_c=20.0) -> np.ndarray:
    """Refractive index of an agar/agarose gel: water (IAPWS R9-97) + 0.003 (common practice).

    Parameters
    ----------
    wavelength_nm : float or array [nm]
    temperature_c : float or array [°C]
        Temperature of the water term.

    Returns
    -------
    ndarray [dimensionless]
    """
    return water_index_IAPWS1997(wavelength_nm=wavelength_nm, temperature_c=temperature_c) + (
        AGAR_OFFSET
    )


# ---- registry ---------------------------------------------------------------------------------


@dataclass(frozen=True)
class IndexModel:
    """One entry of the refractive-index registry.

    Attributes
    ----------
    name : str
        Material name used in stock files (``material = "polystyrene"``).
    function : callable
        ``function(*, wavelength_nm, temperature_c) -> ndarray``.
    source : str
        Short citation, or "common practice, no source".
    band_nm : tuple of float or None
        Fitted band [nm]; None for constants.
    water_based : bool
        True when the material is mostly water (its background absorption is water's).
    """

    name: str
    function: Callable[..., np.ndarray]
    source: str
    band_nm: tuple[float, float] | None
    water_based: bool = False


INDEX_MODELS: dict[str, IndexModel] = {
    model.name: model
    for model in (
        IndexModel("water", water_index_IAPWS1997, "IAPWS R9-97 (1997)", WATER_IAPWS1997_BAND_NM, True),
        IndexModel("polystyrene", polystyrene_index_Ma2003, "Ma et al. 2003", POLYSTYRENE_MA2003_BAND_NM),
        IndexModel("silica", silica_index_Malitson1965, "Malitson 1965", SILICA_MALITSON1965_BAND_NM),
        IndexModel("rutile", rutile_index_DeVore1951, "DeVore 1951 (ordinary ray)", RUTILE_DEVORE1951_BAND_NM),
        IndexModel(
            "alumina",
            alumina_index_MalitsonDodge1972,
            "Malitson & Dodge 1972 (ordinary ray)",
            ALUMINA_MALITSONDODGE1972_BAND_NM,
        ),
        IndexModel("pmma", pmma_index_Sultanova2009, "Sultanova et al. 2009", PMMA_SULTANOVA2009_BAND_NM),
        IndexModel("silicone", silicone_index_constant, "constant 1.41, common practice, no source", None),
        IndexModel("epoxy", epoxy_index_constant, "constant 1.55, common practice, no source", None),
        IndexModel(
            "gelatin",
            gelatin_index_water_offset,
            "IAPWS R9-97 water + 0.02, common practice, no source",
            WATER_IAPWS1997_BAND_NM,
            True,
        ),
        IndexModel(
            "agar",
            agar_index_water_offset,
            "IAPWS R9-97 water + 0.003, common practice, no source",
            WATER_IAPWS1997_BAND_NM,
            True,
        ),
    )
}


def index_model(material: str) -> IndexModel:
    """Return the registry entry of ``material``; an unknown name is refused with the list."""
    try:
        return INDEX_MODELS[material]
    except (KeyError, TypeError):
        raise InputError(
            f"unknown material {material!r}; known materials: {', '.join(sorted(INDEX_MODELS))}"
        ) from None


def refractive_index(material: str, *, wavelength_nm, temperature_c=20.0) -> np.ndarray:
    """Refractive index of a registered material on any wavelength grid.

    Parameters
    ----------
    material : str
        A name of :data:`INDEX_MODELS` (water, polystyrene, silica, rutile, alumina, pmma,
        silicone, epoxy, gelatin, agar).
    wavelength_nm : float or array [nm]
        Vacuum wavelength.
    temperature_c : float [°C]
        Used by the water-based models; the others ignore it.

    Returns
    -------
    ndarray [dimensionless], the shape of ``wavelength_nm``

    Raises
    ------
    InputError
        Unknown material (the message lists the known ones) or a non-positive wavelength.
    """
    model = index_model(material)
    return np.asarray(
        model.function(wavelength_nm=wavelength_nm, temperature_c=temperature_c), dtype=float
    )
