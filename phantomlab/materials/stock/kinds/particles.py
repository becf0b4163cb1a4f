"""The particle stock kinds (layer 1): spheres in a liquid carrier, and dry powders.

Both carry a size distribution (normal or log-normal from a mean diameter and CV, or a
tabulated histogram); a spheres stock also has a strength (solids % w/v or w/w) and a
carrier, while a powder *is* its particles.
"""

from __future__ import annotations

from dataclasses import dataclass

from phantomlab.errors import InputError
from phantomlab.materials.refractive_index import index_model
from phantomlab.materials.sizes import (
    SizeDistribution,
    histogram_sizes,
    lognormal_sizes,
    normal_sizes,
)
from phantomlab.materials.stock.fields import _fail
from phantomlab.materials.stock.readers import (
    _get_csv,
    _get_material,
    _get_number,
    _get_string,
    _get_water_source,
)
from phantomlab.materials.water_sources import DEFAULT_WATER_SOURCE

__all__ = ["SpheresSpec", "PowderSpec", "RANDOM_CLOSE_PACKING"]

#: Volume fraction of randomly close-packed equal spheres: no suspension holds more.
#: Scott & Kilgour 1969, J. Phys. D 2:863 (0.637) # from memory
RANDOM_CLOSE_PACKING = 0.64


@dataclass(frozen=True)
class SpheresSpec:
    """Spheres in a liquid carrier.

    Attributes
    ----------
    material : str
    sizes : SizeDistribution
    particle_density_g_per_ml : float [g/mL]
    carrier : str
        Index model name of the carrier liquid.
    carrier_water_volume_fraction : float
        Water content of the carrier (1 for water, 0 otherwise): its absorption.
    water_source : str
        Key of :data:`~phantomlab.materials.water_sources.WATER_ABSORPTION_SOURCES`.
    """

    material: str
    sizes: SizeDistribution
    particle_density_g_per_ml: float
    carrier: str = "water"
    carrier_water_volume_fraction: float = 1.0
    water_source: str = DEFAULT_WATER_SOURCE


@dataclass(frozen=True)
class PowderSpec:
    """A dry powder treated as separate spheres (a first guess; grains aggregate).

    Attributes
    ----------
    material : str
    sizes : SizeDistribution
    particle_density_g_per_ml : float [g/mL]
    """

    material: str
    sizes: SizeDistribution
    particle_density_g_per_ml: float


def _sizes(table, key, base, resolved) -> SizeDistribution:
    """The size distribution of a spheres or powder table (histogram contents go into ``resolved``)."""
    shape = _get_string(
        table, key, "size_distribution", default=None, choices=("normal", "lognormal", "histogram")
    )
    if shape is None:
        shape = "histogram" if "size_histogram_csv" in table else "normal"
    if shape == "histogram":
        if "size_histogram_csv" not in table:
            raise _fail(key, "size_histogram_csv", "missing; expected a CSV file diameter_um,number_weight (or volume_weight) for size_distribution = \"histogram\"")
        for extra in ("size_cv",):
            if extra in table:
                raise _fail(key, extra, "not used with a tabulated histogram; remove it")
        csv_table = _get_csv(
            table, key, "size_histogram_csv", base, required=("diameter_um",), optional=("number_weight", "volume_weight")
        )
        cols = csv_table.columns
        have = [c for c in ("number_weight", "volume_weight") if c in cols]
        if len(have) != 1:
            raise _fail(key, "size_histogram_csv", f"{csv_table.path!r} needs exactly one of the columns number_weight, volume_weight")
        resolved["size_histogram_csv"] = csv_table.to_definition()
        try:
            sizes = histogram_sizes(
                diameters_um=cols["diameter_um"], weights=cols[have[0]], weighting=have[0].split("_")[0]
            )
        except InputError as exc:
            raise _fail(key, "size_histogram_csv", str(exc)) from None
        if "diameter_um" in table:
            stated = _get_number(table, key, "diameter_um", lambda v: v > 0)
            if abs(stated - sizes.mean_diameter_um) > 0.05 * stated:
                raise _fail(
                    key,
                    "diameter_um",
                    f"{stated:g} µm disagrees with the histogram's number-mean {sizes.mean_diameter_um:.4g} µm; remove one",
                )
        return sizes
    if "size_histogram_csv" in table:
        raise _fail(key, "size_histogram_csv", f"given with size_distribution = {shape!r}; use \"histogram\" or remove the file")
    diameter = _get_number(table, key, "diameter_um", lambda v: v > 0, required=True)
    cv = _get_number(table, key, "size_cv", lambda v: 0 <= v < 1, default=0.0)
    try:
        if shape == "normal":
            return normal_sizes(diameter_um=diameter, cv=cv)
        return lognormal_sizes(diameter_um=diameter, cv=cv)
    except InputError as exc:
        raise _fail(key, "size_cv", str(exc)) from None


def _parse_spheres(table, key, base, resolved):
    """A spheres table → (SpheresSpec, density [g/mL], particle volume fraction)."""
    material = _get_material(table, key)
    sizes = _sizes(table, key, base, resolved)
    particle_density = _get_number(table, key, "particle_density_g_per_ml", lambda v: v > 0, required=True)
    carrier = _get_material(table, key, "carrier", default="water", required=False)
    carrier_water = 1.0 if index_model(carrier).water_based else 0.0
    carrier_density = _get_number(table, key, "carrier_density_g_per_ml", lambda v: v > 0, default=1.0)
    have = [f for f in ("solids_percent_w_v", "solids_percent_w_w") if f in table]
    if not have:
        raise _fail(key, "solids_percent_w_v", "missing; expected the strength as solids_percent_w_v or solids_percent_w_w")
    if len(have) == 2:
        raise _fail(key, "solids_percent_w_w", "give the strength once: solids_percent_w_v or solids_percent_w_w")
    percent = _get_number(table, key, have[0], lambda v: 0 < v < 100, required=True)
    if have[0] == "solids_percent_w_v":
        fraction = percent / 100.0 / particle_density  # g/mL of particles / (g/mL) = v/v
    else:
        w = percent / 100.0
        # volume of 1 g of stock: w/ρp + (1 − w)/ρc; particle volume w/ρp
        fraction = (w / particle_density) / (w / particle_density + (1.0 - w) / carrier_density)
    if not 0 < fraction <= RANDOM_CLOSE_PACKING:
        raise _fail(
            key,
            have[0],
            f"{percent:g} % with particle density {particle_density:g} g/mL gives a particle volume fraction "
            f"{fraction:.3g}, above the {RANDOM_CLOSE_PACKING:g} of randomly packed spheres: not a suspension",
        )
    density_default = fraction * particle_density + (1.0 - fraction) * carrier_density
    density = _get_number(table, key, "density_g_per_ml", lambda v: v > 0, default=density_default)
    water_source = _get_water_source(table, key)
    spec = SpheresSpec(material, sizes, particle_density, carrier, carrier_water, water_source)
    return spec, density, fraction


def _parse_powder(table, key, base, resolved):
    """A powder table → (PowderSpec, particle density [g/mL], solids volume fraction 1)."""
    material = _get_material(table, key)
    sizes = _sizes(table, key, base, resolved)
    particle_density = _get_number(table, key, "particle_density_g_per_ml", lambda v: v > 0, required=True)
    if "density_g_per_ml" in table:
        stated = _get_number(table, key, "density_g_per_ml", lambda v: v > 0)
        if abs(stated - particle_density) > 1e-9 * particle_density:
            raise _fail(key, "density_g_per_ml", "a powder's density is its particle_density_g_per_ml; give that one only")
    return PowderSpec(material, sizes, particle_density), particle_density, 1.0
