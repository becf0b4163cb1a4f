"""The emulsion stock kind (layer 1): a lipid emulsion described by a published empirical model.

The models (:data:`~phantomlab.materials.stock.fields.EMULSION_MODELS`) each describe one
product strength; a different lipid content is refused rather than scaled.
"""

from __future__ import annotations

from dataclasses import dataclass

from phantomlab.materials.stock.fields import EMULSION_MODELS, _fail
from phantomlab.materials.stock.readers import _get_number, _get_string, _get_water_source
from phantomlab.materials.water_sources import DEFAULT_WATER_SOURCE

__all__ = ["EmulsionSpec", "SOYBEAN_OIL_DENSITY_G_PER_ML"]

#: Density of soybean oil [g/mL] used to turn lipid % w/v into an oil volume fraction.
#: From memory (soybean oil 0.917–0.921 g/mL at 20–25 °C); a stock may give
#: ``solids_volume_fraction`` instead.
SOYBEAN_OIL_DENSITY_G_PER_ML = 0.92


@dataclass(frozen=True)
class EmulsionSpec:
    """A lipid emulsion described by a published empirical model.

    Attributes
    ----------
    model : str
        Key of :data:`EMULSION_MODELS`.
    lipid_percent_w_v : float [% w/v]
    water_source : str
        Key of :data:`~phantomlab.materials.water_sources.WATER_ABSORPTION_SOURCES` (the water phase).
    """

    model: str
    lipid_percent_w_v: float
    water_source: str = DEFAULT_WATER_SOURCE


def _parse_emulsion(table, key, base, resolved):
    """An emulsion table → (EmulsionSpec, density [g/mL], oil volume fraction)."""
    model = _get_string(table, key, "model", required=True, choices=tuple(EMULSION_MODELS))
    described, citation = EMULSION_MODELS[model]
    lipid = _get_number(table, key, "lipid_percent_w_v", lambda v: 0 < v < 100, default=described)
    if abs(lipid - described) > 1e-9:
        raise _fail(
            key,
            "lipid_percent_w_v",
            f"{lipid:g} % is not what model {model!r} describes ({described:g} % soybean-oil emulsion, "
            f"{citation}); no cited model for {lipid:g} % is built in (a diluted 20 % stock is not a "
            "10 % product: droplet sizes differ); measure the stock and give it as spheres or a calibrated stock",
        )
    fraction_default = lipid / 100.0 / SOYBEAN_OIL_DENSITY_G_PER_ML
    fraction = _get_number(table, key, "solids_volume_fraction", lambda v: 0 < v < 1, default=fraction_default)
    density = _get_number(table, key, "density_g_per_ml", lambda v: v > 0, default=1.0)
    return EmulsionSpec(model, lipid, _get_water_source(table, key)), density, fraction
