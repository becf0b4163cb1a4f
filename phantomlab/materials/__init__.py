"""Materials (layer 1): refractive-index formulas, water, absorber spectra, the stock model.

The names other layers use:

* :func:`refractive_index` (registry :data:`INDEX_MODELS`) and the formula functions;
* :func:`water_absorption_per_mm` (Pope & Fry 1997 / Segelstein 1981 / Hale & Querry 1973) and :func:`water_density_Kell1975`;
* :func:`load_shelf` → :class:`Shelf` of :class:`Stock`.
"""

from phantomlab.materials.dispersion_formulas import (
    alumina_index_MalitsonDodge1972,
    pmma_index_Sultanova2009,
    polystyrene_index_Ma2003,
    rutile_index_DeVore1951,
    silica_index_Malitson1965,
    water_index_IAPWS1997,
)
from phantomlab.materials.refractive_index import (
    INDEX_MODELS,
    IndexModel,
    agar_index_water_offset,
    epoxy_index_constant,
    gelatin_index_water_offset,
    index_model,
    refractive_index,
    silicone_index_constant,
)
from phantomlab.materials.sizes import SizeDistribution, histogram_sizes, lognormal_sizes, normal_sizes
from phantomlab.materials.spectra import (
    DilutionFit,
    fit_dilution_series,
    mua_from_molar_extinction,
    mua_from_specific_extinction,
)
from phantomlab.materials.stock import (
    HAZARD_KEYS,
    KINDS,
    AbsorberSpec,
    EmulsionSpec,
    MatrixSpec,
    PowderSpec,
    Shelf,
    SpheresSpec,
    Stock,
    load_shelf,
    parse_shelf,
)
from phantomlab.materials.water import (
    water_absorption_HaleQuerry1973,
    water_absorption_Kou1993,
    water_absorption_PopeFry1997,
    water_absorption_Segelstein1981,
    water_absorption_per_mm,
    water_temperature_coefficient_per_mm_per_c,
)
from phantomlab.materials.water_density import water_density_Kell1975
from phantomlab.materials.water_sources import DEFAULT_WATER_SOURCE, WATER_ABSORPTION_SOURCES

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
