"""Materials (layer 1): refractive-index formulas, water, absorber spectra, the stock model.

The names other layers use:

* :func:`refractive_index` (registry :data:`INDEX_MODELS`) and the formula functions;
* :func:`water_absorption_per_mm` (Pope & Fry 1997 / Segelstein 1981 / Hale & Querry 1973) and :func:`water_density_Kell1975`;
* :func:`load_shelf` → :class:`Shelf` of :class:`Stock`.

The names are loaded on first use (PEP 562 module ``__getattr__``), so that a sub-module
(``phantomlab.materials.haemoglobin`` for the source names of ``phantomlab --help``) comes
without the stock model and every spectrum table.  :func:`refractive_index` is bound at
once: it shares its name with its sub-module, which would otherwise shadow it once loaded.
"""

from __future__ import annotations

from phantomlab.lazy_names import lazy_names
from phantomlab.materials.refractive_index import refractive_index

#: Public name -> the sub-module that defines it.
_SOURCES: dict[str, str] = {
    "alumina_index_MalitsonDodge1972": "dispersion_formulas",
    "pmma_index_Sultanova2009": "dispersion_formulas",
    "polystyrene_index_Ma2003": "dispersion_formulas",
    "rutile_index_DeVore1951": "dispersion_formulas",
    "silica_index_Malitson1965": "dispersion_formulas",
    "water_index_IAPWS1997": "dispersion_formulas",
    "INDEX_MODELS": "refractive_index",
    "IndexModel": "refractive_index",
    "agar_index_water_offset": "refractive_index",
    "epoxy_index_constant": "refractive_index",
    "gelatin_index_water_offset": "refractive_index",
    "index_model": "refractive_index",
    "silicone_index_constant": "refractive_index",
    "SizeDistribution": "sizes",
    "histogram_sizes": "sizes",
    "lognormal_sizes": "sizes",
    "normal_sizes": "sizes",
    "DilutionFit": "spectra",
    "fit_dilution_series": "spectra",
    "mua_from_molar_extinction": "spectra",
    "mua_from_specific_extinction": "spectra",
    "HAZARD_KEYS": "stock",
    "KINDS": "stock",
    "AbsorberSpec": "stock",
    "EmulsionSpec": "stock",
    "MatrixSpec": "stock",
    "PowderSpec": "stock",
    "Shelf": "stock",
    "SpheresSpec": "stock",
    "Stock": "stock",
    "load_shelf": "stock",
    "parse_shelf": "stock",
    "water_absorption_HaleQuerry1973": "water",
    "water_absorption_Kou1993": "water",
    "water_absorption_PopeFry1997": "water",
    "water_absorption_Segelstein1981": "water",
    "water_absorption_per_mm": "water",
    "water_temperature_coefficient_per_mm_per_c": "water",
    "water_density_Kell1975": "water_density",
    "DEFAULT_WATER_SOURCE": "water_sources",
    "WATER_ABSORPTION_SOURCES": "water_sources",
}

__all__ = [
    "INDEX_MODELS",
    "IndexModel",
    "index_model",
    "refractive_index",
    "water_index_IAPWS1997",
    "polystyrene_index_Ma2003",
    "silica_index_Malitson1965",
    "rutile_index_DeVore1951",
    "alumina_index_MalitsonDodge1972",
    "pmma_index_Sultanova2009",
    "silicone_index_constant",
    "epoxy_index_constant",
    "gelatin_index_water_offset",
    "agar_index_water_offset",
    "water_absorption_HaleQuerry1973",
    "water_absorption_PopeFry1997",
    "water_absorption_Segelstein1981",
    "water_absorption_per_mm",
    "water_absorption_Kou1993",
    "water_temperature_coefficient_per_mm_per_c",
    "WATER_ABSORPTION_SOURCES",
    "DEFAULT_WATER_SOURCE",
    "water_density_Kell1975",
    "SizeDistribution",
    "normal_sizes",
    "lognormal_sizes",
    "histogram_sizes",
    "DilutionFit",
    "fit_dilution_series",
    "mua_from_molar_extinction",
    "mua_from_specific_extinction",
    "HAZARD_KEYS",
    "KINDS",
    "Stock",
    "Shelf",
    "MatrixSpec",
    "SpheresSpec",
    "PowderSpec",
    "EmulsionSpec",
    "AbsorberSpec",
    "load_shelf",
    "parse_shelf",
]


__getattr__, __dir__ = lazy_names(__name__, _SOURCES, globals())
