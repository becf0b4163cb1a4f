"""The fields of a stock file (layer 1): what each kind accepts and how a refusal is worded.

:data:`_FIELDS` lists, per kind, every field a ``[stocks.KEY]`` table may hold with what it
expects; that one table drives the unknown-field check (:func:`_check_fields`, with the
nearest valid name suggested) and the "expected ..." part of every refusal of a field
reader (:mod:`phantomlab.materials.stock.readers`).  The names a field may choose from
(emulsion models, solvents, blood species, red-cell scattering models) sit here too, so the
descriptions list them.  Every refusal about a field is one line
``stock KEY, field NAME: ...`` (:func:`_fail`).
"""

from __future__ import annotations

import difflib

from phantomlab.errors import InputError
from phantomlab.materials.stock.hazards import HAZARD_KEYS
from phantomlab.materials.water_sources import WATER_ABSORPTION_SOURCES

__all__ = ["KINDS", "EMULSION_MODELS", "SOLVENTS", "BLOOD_SPECIES", "RED_CELL_SCATTERING"]

#: The stock kinds: the ``kind`` of a ``[stocks.KEY]`` table.
KINDS = ("matrix", "spheres", "powder", "emulsion", "absorber", "blood")

#: Species a blood stock may name (the shipped haemoglobin tables are of human haemoglobin).
BLOOD_SPECIES = ("human", "porcine", "bovine", "ovine", "equine", "other")

#: Red-cell scattering models of a blood stock: name → citation.
RED_CELL_SCATTERING = {
    "meinke2007": "Meinke, Mueller, Helfmann & Friebel 2007, Appl. Opt. 46:1742 (standard blood, linear Hct terms)",
    "none": "no scattering (a haemoglobin solution: lysed cells)",
}

#: Emulsion models: name → (lipid percent w/v it describes, citation).
EMULSION_MODELS: dict[str, tuple[float, str]] = {
    "michels2008": (20.0, "Michels, Foschum & Kienle 2008, Opt. Express 16:5907"),
}

#: Solvents an absorber stock may name (besides a ``solvent_spectrum_csv``): name → what.
SOLVENTS: dict[str, str] = {
    "none": "the spectrum is the stock's whole absorption (measured against air or an empty cell)",
    "water": "water (spectrum measured against a water blank)",
    "ethanol": "ethanol (spectrum measured against an ethanol blank; Kedenburg et al. 2012)",
}

#: Fields of every kind.
_COMMON = {
    "kind": "the stock kind",
    "name": "a description",
    "supplier": "who sold it",
    "notes": "free text",
    "lot": "the lot or bottle identifier",
    "expiry": "a date YYYY-MM-DD",
    "potency": "a number > 0",
    "potency_sd": "a number >= 0",
    "hazards": f"a list of hazard keys ({', '.join(HAZARD_KEYS)})",
}
_WATER_SOURCE_FIELD = {
    "water_source": f"a water absorption source ({', '.join(WATER_ABSORPTION_SOURCES)})",
}
_SIZE_FIELDS = {
    "material": "a refractive-index model name",
    "diameter_um": "the mean diameter, a number > 0 in µm",
    "size_distribution": "normal, lognormal or histogram",
    "size_cv": "the relative SD of the diameter, a number in [0, 1)",
    "size_histogram_csv": "a CSV file diameter_um,number_weight (or volume_weight)",
    "particle_density_g_per_ml": "the particle density, a number > 0 in g/mL",
}
#: Every field each kind accepts, with what it expects (the text of every refusal).
_FIELDS: dict[str, dict[str, str]] = {
    "blood": {
        **_COMMON,
        "haemoglobin": "the total haemoglobin with its unit, e.g. \"14.5 g/dL\" (g/dL, g/L, mg/mL, "
        "mmol/L per heme)",
        "haematocrit": "the red-cell volume fraction, a number in [0, 0.7] (0 for a haemoglobin solution)",
        "extinction_source": "a haemoglobin extinction table (gratzer-kollias, moaveni, takatani-graham)",
        "scattering": f"the red-cell scattering model ({', '.join(RED_CELL_SCATTERING)})",
        "scattering_csv": "a CSV file wavelength_nm,mus_per_mm,g: measured scattering per unit volume fraction",
        "species": f"the blood's species ({', '.join(BLOOD_SPECIES)})",
        "anticoagulant": "free text, e.g. heparin",
        "water_volume_fraction": "the blood's water by volume, a number in [0, 1]",
        "density_g_per_ml": "a number > 0 in g/mL",
        **_WATER_SOURCE_FIELD,
    },
    "matrix": {
        **_COMMON,
        "material": "a refractive-index model name",
        "density_g_per_ml": "a number > 0 in g/mL",
        "water_volume_fraction": "a number in [0, 1]",
        "background_mua_per_mm": "a number >= 0 in 1/mm",
        "spectrum_csv": "a CSV file wavelength_nm,mua_per_mm",
        **_WATER_SOURCE_FIELD,
    },
    "spheres": {
        **_COMMON,
        **_SIZE_FIELDS,
        "solids_percent_w_v": "g of particles per 100 mL of stock, a number in (0, 100)",
        "solids_percent_w_w": "g of particles per 100 g of stock, a number in (0, 100)",
        "carrier": "the liquid the spheres come in, a refractive-index model name",
        "carrier_density_g_per_ml": "a number > 0 in g/mL",
        "density_g_per_ml": "a number > 0 in g/mL",
        **_WATER_SOURCE_FIELD,
    },
    "powder": {**_COMMON, **_SIZE_FIELDS, "density_g_per_ml": "a number > 0 in g/mL"},
    "emulsion": {
        **_COMMON,
        "model": f"an emulsion model ({', '.join(EMULSION_MODELS)})",
        "lipid_percent_w_v": "the lipid content in % w/v",
        "solids_volume_fraction": "the oil-droplet volume fraction, a number in (0, 1)",
        "density_g_per_ml": "a number > 0 in g/mL",
        **_WATER_SOURCE_FIELD,
    },
    "absorber": {
        **_COMMON,
        "spectrum_csv": "a CSV file wavelength_nm,mua_per_mm (or mut_per_mm)",
        "extinction_csv": "a CSV file wavelength_nm,epsilon_per_molar_per_cm "
        "(or epsilon_per_mg_per_ml_per_cm)",
        "concentration_mol_per_l": "a number > 0 in mol/L",
        "concentration_mg_per_ml": "a number > 0 in mg/mL",
        "molar_mass_g_per_mol": "a number > 0 in g/mol",
        "cuvette_csv": "a CSV file wavelength_nm,stock_volume_fraction,absorbance",
        "cuvette_path_mm": "the cuvette path length, a number > 0 in mm",
        "albedo": "the single-scattering albedo, a number in [0, 1)",
        "g": "the scattering anisotropy, a number in (-1, 1)",
        "density_g_per_ml": "a number > 0 in g/mL",
        "solvent": f"the blank the spectrum was measured against ({', '.join(SOLVENTS)})",
        "solvent_spectrum_csv": "a CSV file wavelength_nm,mua_per_mm: the solvent's own absorption",
        **_WATER_SOURCE_FIELD,
    },
}



def _suggest(word: object, candidates) -> str:
    if not isinstance(word, str):
        return ""
    close = difflib.get_close_matches(word, list(candidates), n=1, cutoff=0.6)
    return f" (did you mean {close[0]!r}?)" if close else ""


def _fail(key: str, field_name: str, message: str) -> InputError:
    return InputError(f"stock {key}, field {field_name}: {message}")


def _check_fields(table, key: str) -> str:
    """The kind of the stock table ``[stocks.KEY]``, after checking that every field is one of its kind's.

    Raises
    ------
    InputError
        ``table`` is not a table, its kind is missing or unknown, or it holds a field its
        kind does not accept (the message names the nearest valid one and lists them all).
    """
    if not isinstance(table, dict):
        raise InputError(f"stock {key}: expected a table [stocks.{key}], got {table!r}")
    if "kind" not in table:
        raise _fail(key, "kind", f"missing; expected one of {', '.join(KINDS)}")
    kind = table["kind"]
    if kind not in KINDS:
        raise _fail(key, "kind", f"{kind!r} is not one of {', '.join(KINDS)}{_suggest(kind, KINDS)}")
    allowed = _FIELDS[kind]
    for name in table:
        if name not in allowed:
            raise InputError(
                f"stock {key}: unknown field {name!r}{_suggest(name, allowed)}; fields of a {kind} stock: "
                f"{', '.join(allowed)}"
            )
    return kind
