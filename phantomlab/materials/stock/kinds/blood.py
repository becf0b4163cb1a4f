"""The blood stock kind (layer 1): whole blood, a red-cell suspension or a haemoglobin solution.

What the bottle holds (haemoglobin, haematocrit, extinction table, red-cell scattering);
its sO₂ is not a stock field but belongs to a batch at a moment (a recipe's
``[oxygenation]``).  Every blood stock carries the hazards of
:data:`~phantomlab.materials.stock.hazards.BLOOD_HAZARDS`.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from phantomlab.errors import InputError
from phantomlab.materials.spectra import CsvTable
from phantomlab.materials.stock.fields import _FIELDS, BLOOD_SPECIES, RED_CELL_SCATTERING, _fail
from phantomlab.materials.stock.readers import (
    _check_spectrum,
    _get_csv,
    _get_number,
    _get_string,
    _get_water_source,
)
from phantomlab.materials.water_sources import DEFAULT_WATER_SOURCE

__all__ = ["BloodSpec", "BLOOD_WATER_VOLUME_FRACTION", "BLOOD_DENSITY_G_PER_ML"]

#: Water content of whole blood by volume, its default water_volume_fraction.
#: From memory (plasma about 92 % water, red cells about 65-70 %): about 0.8.
BLOOD_WATER_VOLUME_FRACTION = 0.8

#: Density of whole blood [g/mL], the default density_g_per_ml of a blood stock.
#: From memory (1.05-1.06 g/mL).
BLOOD_DENSITY_G_PER_ML = 1.05


@dataclass(frozen=True)
class BloodSpec:
    """Blood (or red cells, or haemoglobin solution): what it holds; its sO₂ is not here.

    Attributes
    ----------
    haemoglobin_g_per_l : float [g/L]
        Total haemoglobin of the stock.
    haematocrit : float [fraction]
        Red-cell volume fraction (0 for a haemoglobin solution).
    extinction_source : str
        Key of :data:`phantomlab.materials.haemoglobin.HAEMOGLOBIN_SOURCES`.
    scattering : str
        Key of :data:`RED_CELL_SCATTERING`, or ``"measured"`` with ``scattering_table``.
    scattering_table : CsvTable or None
        Measured scattering (wavelength_nm, mus_per_mm, g) per unit volume fraction.
    species : str
    water_volume_fraction : float
        The stock's water by volume (its unscaled carrier absorption).
    water_source : str
    """

    haemoglobin_g_per_l: float
    haematocrit: float
    extinction_source: str
    scattering: str
    scattering_table: CsvTable | None
    species: str
    water_volume_fraction: float
    water_source: str = DEFAULT_WATER_SOURCE


def _parse_blood(table, key, base, resolved):
    """A blood table → (BloodSpec, density [g/mL], haematocrit as the solids volume fraction)."""
    from phantomlab.materials.haemoglobin import HAEMOGLOBIN_SOURCES, parse_haemoglobin_concentration

    if "haemoglobin" not in table:
        raise _fail(key, "haemoglobin", f"missing; expected {_FIELDS['blood']['haemoglobin']}")
    try:
        g_per_l = parse_haemoglobin_concentration(table["haemoglobin"], name="haemoglobin")
    except InputError as exc:
        raise _fail(key, "haemoglobin", str(exc).removeprefix("haemoglobin: ")) from None
    haematocrit = _get_number(table, key, "haematocrit", lambda v: 0 <= v <= 0.7, required=True)
    source = _get_string(table, key, "extinction_source", default="gratzer-kollias",
                         choices=tuple(HAEMOGLOBIN_SOURCES))
    species = _get_string(table, key, "species", default="other", choices=BLOOD_SPECIES)
    _get_string(table, key, "anticoagulant", default=None)
    scattering_table = None
    if "scattering_csv" in table:
        if "scattering" in table:
            raise _fail(key, "scattering", "give the scattering once: scattering or scattering_csv")
        scattering_table = _get_csv(table, key, "scattering_csv", base, required=("wavelength_nm", "mus_per_mm", "g"))
        _check_spectrum(scattering_table, key, "scattering_csv", "mus_per_mm")
        if np.any(np.abs(scattering_table.columns["g"]) >= 1):
            raise _fail(key, "scattering_csv", "g must lie in (-1, 1)")
        resolved["scattering_csv"] = scattering_table.to_definition()
        scattering = "measured"
    else:
        default = "meinke2007" if haematocrit > 0 else "none"
        scattering = _get_string(table, key, "scattering", default=default, choices=tuple(RED_CELL_SCATTERING))
        if scattering == "meinke2007" and haematocrit == 0:
            raise _fail(key, "scattering", "meinke2007 is a red-cell model; a haematocrit of 0 has no cells (use none)")
    water = _get_number(table, key, "water_volume_fraction", lambda v: 0 <= v <= 1,
                        default=BLOOD_WATER_VOLUME_FRACTION)
    density = _get_number(table, key, "density_g_per_ml", lambda v: v > 0, default=BLOOD_DENSITY_G_PER_ML)
    spec = BloodSpec(g_per_l, haematocrit, source, scattering, scattering_table, species, water,
                     _get_water_source(table, key))
    return spec, density, haematocrit
