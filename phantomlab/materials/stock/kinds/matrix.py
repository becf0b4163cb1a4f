"""The matrix stock kind (layer 1): the base the phantom is made of.

Background absorption is its water (``water_volume_fraction`` × the ``water_source`` table)
plus a constant ``background_mua_per_mm``, or a measured ``spectrum_csv``.
"""

from __future__ import annotations

from dataclasses import dataclass

from phantomlab.materials.refractive_index import index_model
from phantomlab.materials.spectra import CsvTable
from phantomlab.materials.stock.fields import _fail
from phantomlab.materials.stock.readers import (
    _check_spectrum,
    _get_csv,
    _get_material,
    _get_number,
    _get_water_source,
)
from phantomlab.materials.water_sources import DEFAULT_WATER_SOURCE

__all__ = ["MatrixSpec"]


@dataclass(frozen=True)
class MatrixSpec:
    """A matrix: index model, water content and background absorption.

    Attributes
    ----------
    material : str
    water_volume_fraction : float
    background_mua_per_mm : float [1/mm]
        Added to the water part.
    background_spectrum : CsvTable or None
        A measured background (wavelength_nm, mua_per_mm) that replaces water + constant.
    water_source : str
        Key of :data:`~phantomlab.materials.water_sources.WATER_ABSORPTION_SOURCES`.
    """

    material: str
    water_volume_fraction: float
    background_mua_per_mm: float = 0.0
    background_spectrum: CsvTable | None = None
    water_source: str = DEFAULT_WATER_SOURCE


def _parse_matrix(table, key, base, resolved):
    """A matrix table → (MatrixSpec, density [g/mL], solids volume fraction 0)."""
    material = _get_material(table, key)
    density = _get_number(table, key, "density_g_per_ml", lambda v: v > 0, required=True)
    water_default = 1.0 if index_model(material).water_based else 0.0
    water = _get_number(table, key, "water_volume_fraction", lambda v: 0 <= v <= 1, default=water_default)
    background = _get_number(table, key, "background_mua_per_mm", lambda v: v >= 0, default=0.0)
    spectrum = None
    if "spectrum_csv" in table:
        for clash in ("water_volume_fraction", "background_mua_per_mm"):
            if clash in table:
                raise _fail(key, clash, "not used with a measured spectrum_csv; give one or the other")
        spectrum = _get_csv(table, key, "spectrum_csv", base, required=("wavelength_nm", "mua_per_mm"))
        _check_spectrum(spectrum, key, "spectrum_csv", "mua_per_mm")
        resolved["spectrum_csv"] = spectrum.to_definition()
    water_source = _get_water_source(table, key)
    if spectrum is not None and "water_source" in table:
        raise _fail(key, "water_source", "not used with a measured spectrum_csv; give one or the other")
    spec = MatrixSpec(material, water, background, spectrum, water_source)
    return spec, density, 0.0
