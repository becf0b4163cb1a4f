"""The stock file (layer 1): what is on the shelf, read into a :class:`Shelf`.

A stock file is TOML with one table per bottle under ``[stocks.KEY]`` (docs/formats.md).  Kinds:

``matrix``
    the base the phantom is made of: ``material`` (a refractive-index model name),
    ``density_g_per_ml``; background absorption from ``water_volume_fraction`` (default 1
    for water-based materials, else 0) × water (``water_source``, default Pope & Fry 1997 /
    Segelstein 1981) + a constant ``background_mua_per_mm``, or a measured ``spectrum_csv``
    (wavelength_nm,mua_per_mm).
``spheres``
    a suspension of spheres: ``material``, ``diameter_um``, ``size_distribution`` (normal |
    lognormal | histogram), ``size_cv``, or ``size_histogram_csv`` (diameter_um and
    number_weight or volume_weight); strength ``solids_percent_w_v`` or
    ``solids_percent_w_w``; ``particle_density_g_per_ml``; ``carrier`` (default water, whose
    absorption comes from ``water_source``).
``powder``
    a dry powder (the stock *is* the particles): as spheres without strength or carrier.
    Mie for separate spheres is only a first guess: grains aggregate.
``emulsion``
    a lipid emulsion described by a published empirical model: ``model = "michels2008"``
    (20 % soybean-oil emulsion), ``lipid_percent_w_v``, ``water_source`` for its water phase.
``blood``
    whole blood, a red-cell suspension or a haemoglobin solution: ``haemoglobin`` typed with
    its unit (``"14.5 g/dL"``; g/dL, g/L, mg/mL or mmol/L per heme), ``haematocrit`` (red-cell
    volume fraction; 0 for a solution), ``extinction_source`` (haemoglobin table, default
    Gratzer & Kollias), ``scattering`` (``meinke2007`` red-cell model, or ``none``) or a
    measured ``scattering_csv`` (wavelength_nm,mus_per_mm,g per unit volume fraction of the
    stock), ``species``, ``water_volume_fraction`` (its water, default 0.8).  sO₂ is not a
    field: it belongs to a batch at a moment (a recipe's ``[oxygenation]``).
``absorber``
    exactly one of ``spectrum_csv`` (wavelength_nm,mua_per_mm or wavelength_nm,mut_per_mm),
    ``extinction_csv`` (+ ``concentration_mol_per_l`` or ``concentration_mg_per_ml``, +
    ``molar_mass_g_per_mol`` when needed) or ``cuvette_csv`` (+ ``cuvette_path_mm``); an
    optional ``albedo`` and ``g`` for absorbers that also scatter (inks); ``solvent``: the
    liquid the spectrum was blanked against, whose absorption the stock brings into the batch
    (``none``, the default: the spectrum is the stock's whole absorption; ``water``;
    ``ethanol``; or ``solvent_spectrum_csv`` wavelength_nm,mua_per_mm).

Every stock carries ``potency`` (a factor on the strength of its scattering or absorbing
ingredient; the carrier water or solvent is not scaled), ``potency_sd``, ``lot``,
an optional ``expiry`` date and ``hazards`` (keys of
:data:`~phantomlab.materials.stock.hazards.HAZARD_KEYS`).  A bad file is
refused with one line naming the stock, the field and what is expected.

Every field a kind accepts is listed, with what it expects, in ``_FIELDS`` of
:mod:`phantomlab.materials.stock.fields`; each kind's spec and parser are below,
registered by kind in :data:`_PARSERS`.
"""


from __future__ import annotations

import dataclasses
import datetime as _dt
import warnings
from dataclasses import dataclass
from pathlib import Path
from typing import Any, Iterator, Mapping

import numpy as np

from phantomlab.errors import InputError, PhantomlabWarning
from phantomlab.materials.refractive_index import index_model
from phantomlab.materials.sizes import (
    SizeDistribution,
    histogram_sizes,
    lognormal_sizes,
    normal_sizes,
)
from phantomlab.materials.spectra import (
    CsvTable,
    DilutionFit,
    fit_dilution_series,
    mua_from_molar_extinction,
    mua_from_specific_extinction,
)
from phantomlab.materials.stock.fields import (
    _COMMON,
    _FIELDS,
    BLOOD_SPECIES,
    EMULSION_MODELS,
    KINDS,
    RED_CELL_SCATTERING,
    SOLVENTS,
    _check_fields,
    _fail,
    _suggest,
)
from phantomlab.materials.stock.hazards import BLOOD_HAZARDS, HAZARD_KEYS
from phantomlab.materials.stock.readers import (
    _check_spectrum,
    _get_csv,
    _get_material,
    _get_number,
    _get_string,
    _get_water_source,
    _number,
    _parse_expiry,
    _parse_hazards,
)
from phantomlab.materials.water import DEFAULT_WATER_SOURCE

__all__ = [
    "MatrixSpec",
    "SpheresSpec",
    "PowderSpec",
    "EmulsionSpec",
    "AbsorberSpec",
    "BloodSpec",
    "Stock",
    "Shelf",
    "load_shelf",
    "parse_shelf",
]

#: Water content of whole blood by volume, its default water_volume_fraction.
#: From memory (plasma about 92 % water, red cells about 65-70 %): about 0.8.
BLOOD_WATER_VOLUME_FRACTION = 0.8

#: Density of whole blood [g/mL], the default density_g_per_ml of a blood stock.
#: From memory (1.05-1.06 g/mL).
BLOOD_DENSITY_G_PER_ML = 1.05

#: Density of soybean oil [g/mL] used to turn lipid % w/v into an oil volume fraction.
#: From memory (soybean oil 0.917–0.921 g/mL at 20–25 °C); a stock may give
#: ``solids_volume_fraction`` instead.
SOYBEAN_OIL_DENSITY_G_PER_ML = 0.92

#: Volume fraction of randomly close-packed equal spheres: no suspension holds more.
#: Scott & Kilgour 1969, J. Phys. D 2:863 (0.637) # from memory
RANDOM_CLOSE_PACKING = 0.64


# ---- kind-specific specs ----


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
        Key of :data:`~phantomlab.materials.water.WATER_ABSORPTION_SOURCES`.
    """

    material: str
    water_volume_fraction: float
    background_mua_per_mm: float = 0.0
    background_spectrum: CsvTable | None = None
    water_source: str = DEFAULT_WATER_SOURCE


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
        Key of :data:`~phantomlab.materials.water.WATER_ABSORPTION_SOURCES`.
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


@dataclass(frozen=True)
class EmulsionSpec:
    """A lipid emulsion described by a published empirical model.

    Attributes
    ----------
    model : str
        Key of :data:`EMULSION_MODELS`.
    lipid_percent_w_v : float [% w/v]
    water_source : str
        Key of :data:`~phantomlab.materials.water.WATER_ABSORPTION_SOURCES` (the water phase).
    """

    model: str
    lipid_percent_w_v: float
    water_source: str = DEFAULT_WATER_SOURCE


@dataclass(frozen=True)
class AbsorberSpec:
    """An absorber's intrinsic spectrum (undiluted stock) and how it was obtained.

    Attributes
    ----------
    method : str
        ``"spectrum"``, ``"extinction"`` or ``"cuvette"``.
    wavelength_nm : ndarray [nm]
    coefficient_per_mm : ndarray [1/mm]
        Intrinsic μa (``quantity == "absorption"``) or collimated attenuation μt
        (``quantity == "attenuation"``: cuvette readings, ``mut_per_mm`` spectra).
    coefficient_sd_per_mm : ndarray [1/mm]
        Its SD (zero when the source gives none).
    quantity : str
        ``"absorption"`` or ``"attenuation"``.
    albedo : float
        Single-scattering albedo a = μs/(μa + μs) of the stock's particles (0 for dyes).
    g : float
        Scattering anisotropy of the stock's particles.
    dilution_fit : DilutionFit or None
        The cuvette fit, with its curvature and non-linearity flags.
    source : str or None
        The provenance line of the CSV file.
    solvent : str
        Key of :data:`SOLVENTS`, or ``"spectrum"`` for a ``solvent_spectrum_csv``.
    solvent_spectrum : CsvTable or None
        The solvent's own absorption (wavelength_nm, mua_per_mm) when given as a file.
    water_source : str
        Water absorption source when the solvent is water.
    """

    method: str
    wavelength_nm: np.ndarray
    coefficient_per_mm: np.ndarray
    coefficient_sd_per_mm: np.ndarray
    quantity: str
    albedo: float = 0.0
    g: float = 0.0
    dilution_fit: DilutionFit | None = None
    source: str | None = None
    solvent: str = "none"
    solvent_spectrum: CsvTable | None = None
    water_source: str = DEFAULT_WATER_SOURCE


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


# ---- the stock and the shelf ----


@dataclass(frozen=True)
class Stock:
    """One bottle on the shelf.

    Attributes
    ----------
    key : str
        Short name of the bottle (its table name in the stock file).
    kind : str
        One of :data:`KINDS`.
    lot : str
        Lot or bottle identifier ("" when not given).
    expiry : datetime.date or None
    potency : float
        Factor on the strength of the stock's scattering or absorbing ingredient (its μs and
        the ingredient's μa scale together; carrier water and solvent do not).
    potency_sd : float
    hazards : tuple of str
        Keys of :data:`HAZARD_KEYS`.
    density_g_per_ml : float [g/mL]
        Density of the undiluted stock (for masses on the sheet).
    solids_volume_fraction : float
        Particle volume fraction inside the undiluted stock (1 for a powder, 0 for absorbers
        and matrices).
    definition : dict
        The TOML table as given (dates as ISO strings) plus ``"resolved"``: the contents of
        every CSV file it names, for database snapshots.
    spec : MatrixSpec | SpheresSpec | PowderSpec | EmulsionSpec | AbsorberSpec | BloodSpec
    name : str
        Free description.
    """

    key: str
    kind: str
    lot: str
    expiry: _dt.date | None
    potency: float
    potency_sd: float
    hazards: tuple[str, ...]
    density_g_per_ml: float
    solids_volume_fraction: float
    definition: dict
    spec: Any
    name: str = ""

    @property
    def cautions(self) -> tuple[str, ...]:
        """The caution text of each hazard key."""
        return tuple(HAZARD_KEYS[h] for h in self.hazards)


@dataclass(frozen=True)
class Shelf:
    """The stocks of one stock file, by key.

    Attributes
    ----------
    path : Path or None
    stocks : dict of str to Stock
    name : str
    """

    path: Path | None
    stocks: Mapping[str, Stock]
    name: str = ""

    def __getitem__(self, key: str) -> Stock:
        try:
            return self.stocks[key]
        except (KeyError, TypeError):
            hint = _suggest(key, self.stocks)
            raise InputError(
                f"unknown stock {key!r}{hint}; stocks on the shelf: {', '.join(self.stocks)}"
            ) from None

    def __contains__(self, key: object) -> bool:
        return key in self.stocks

    def __iter__(self) -> Iterator[str]:
        return iter(self.stocks)

    def __len__(self) -> int:
        return len(self.stocks)

    def keys(self):
        return self.stocks.keys()

    def values(self):
        return self.stocks.values()

    def items(self):
        return self.stocks.items()

    def of_kind(self, kind: str) -> tuple[str, ...]:
        """Keys of the stocks of one kind, in file order."""
        if kind not in KINDS:
            raise InputError(f"unknown stock kind {kind!r}; kinds: {', '.join(KINDS)}")
        return tuple(k for k, s in self.stocks.items() if s.kind == kind)

    def matrix(self, key: str | None = None) -> Stock:
        """The matrix stock named ``key``, or the only matrix on the shelf.

        Raises
        ------
        InputError
            ``key`` is not a matrix, or ``key`` is None and the shelf has no or several
            matrices (the message lists them).
        """
        matrices = self.of_kind("matrix")
        if key is not None:
            stock = self[key]
            if stock.kind != "matrix":
                raise InputError(
                    f"stock {key!r} is of kind {stock.kind}, not a matrix; matrices on the shelf: "
                    f"{', '.join(matrices) or 'none'}"
                )
            return stock
        if len(matrices) == 1:
            return self.stocks[matrices[0]]
        if not matrices:
            raise InputError("the shelf has no matrix stock (kind = \"matrix\"); add one, e.g. water")
        raise InputError(f"the shelf has several matrices ({', '.join(matrices)}); choose one")

    def with_potency(self, key: str, potency: float, potency_sd: float) -> "Shelf":
        """A copy of the shelf with one stock's potency and its SD replaced."""
        stock = self[key]
        _number(potency, key, "potency", _COMMON["potency"], lambda v: v > 0)
        _number(potency_sd, key, "potency_sd", _COMMON["potency_sd"], lambda v: v >= 0)
        stocks = dict(self.stocks)
        stocks[key] = dataclasses.replace(stock, potency=float(potency), potency_sd=float(potency_sd))
        return dataclasses.replace(self, stocks=stocks)


# ---- parsing ----


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


def _parse_absorber(table, key, base, resolved):
    """An absorber table → (AbsorberSpec, density [g/mL], solids volume fraction 0)."""
    sources = [f for f in ("spectrum_csv", "extinction_csv", "cuvette_csv") if f in table]
    if not sources:
        raise _fail(key, "spectrum_csv", "missing; an absorber needs one of spectrum_csv, extinction_csv, cuvette_csv")
    if len(sources) > 1:
        raise _fail(key, sources[1], f"give one of spectrum_csv, extinction_csv, cuvette_csv (found {', '.join(sources)})")
    albedo = _get_number(table, key, "albedo", lambda v: 0 <= v < 1, default=0.0)
    g = _get_number(table, key, "g", lambda v: -1 < v < 1, default=0.0)
    density = _get_number(table, key, "density_g_per_ml", lambda v: v > 0, default=1.0)
    source = sources[0]
    extinction_only = ("concentration_mol_per_l", "concentration_mg_per_ml", "molar_mass_g_per_mol")
    if source != "extinction_csv":
        for name in extinction_only:
            if name in table:
                raise _fail(key, name, "only used with extinction_csv; remove it")
    if source != "cuvette_csv" and "cuvette_path_mm" in table:
        raise _fail(key, "cuvette_path_mm", "only used with cuvette_csv; remove it")
    fit = None
    if source == "spectrum_csv":
        csv_table = _get_csv(
            table, key, source, base, required=("wavelength_nm",), optional=("mua_per_mm", "mut_per_mm", "sd_per_mm")
        )
        values = [c for c in ("mua_per_mm", "mut_per_mm") if c in csv_table.columns]
        if len(values) != 1:
            raise _fail(key, source, f"{csv_table.path!r} needs exactly one of the columns mua_per_mm, mut_per_mm")
        _check_spectrum(csv_table, key, source, values[0])
        wavelength = csv_table.columns["wavelength_nm"]
        coefficient = csv_table.columns[values[0]]
        sd = csv_table.columns.get("sd_per_mm", np.zeros_like(coefficient))
        quantity = "absorption" if values[0] == "mua_per_mm" else "attenuation"
        method = "spectrum"
    elif source == "extinction_csv":
        csv_table = _get_csv(
            table,
            key,
            source,
            base,
            required=("wavelength_nm",),
            optional=("epsilon_per_molar_per_cm", "epsilon_per_mg_per_ml_per_cm"),
        )
        cols = [c for c in ("epsilon_per_molar_per_cm", "epsilon_per_mg_per_ml_per_cm") if c in csv_table.columns]
        if len(cols) != 1:
            raise _fail(key, source, f"{csv_table.path!r} needs exactly one of the columns epsilon_per_molar_per_cm, epsilon_per_mg_per_ml_per_cm")
        _check_spectrum(csv_table, key, source, cols[0])
        wavelength = csv_table.columns["wavelength_nm"]
        epsilon = csv_table.columns[cols[0]]
        molar_c = _get_number(table, key, "concentration_mol_per_l", lambda v: v > 0)
        mass_c = _get_number(table, key, "concentration_mg_per_ml", lambda v: v > 0)
        molar_mass = _get_number(table, key, "molar_mass_g_per_mol", lambda v: v > 0)
        if (molar_c is None) == (mass_c is None):
            raise _fail(key, "concentration_mol_per_l", "give the stock's concentration once: concentration_mol_per_l or concentration_mg_per_ml")
        if cols[0] == "epsilon_per_molar_per_cm":
            if molar_c is None:
                if molar_mass is None:
                    raise _fail(key, "molar_mass_g_per_mol", "missing; a molar extinction table with concentration_mg_per_ml needs the molar mass in g/mol")
                molar_c = mass_c / molar_mass  # mg/mL = g/L; / (g/mol) = mol/L
            coefficient = mua_from_molar_extinction(epsilon_per_molar_per_cm=epsilon, concentration_mol_per_l=molar_c)
        else:
            if mass_c is None:
                if molar_mass is None:
                    raise _fail(key, "molar_mass_g_per_mol", "missing; a specific (per mg/mL) extinction table with concentration_mol_per_l needs the molar mass in g/mol")
                mass_c = molar_c * molar_mass
            coefficient = mua_from_specific_extinction(epsilon_per_mg_per_ml_per_cm=epsilon, concentration_mg_per_ml=mass_c)
        sd = np.zeros_like(coefficient)
        quantity = "absorption"
        method = "extinction"
    else:
        path_mm = _get_number(table, key, "cuvette_path_mm", lambda v: v > 0, required=True)
        csv_table = _get_csv(
            table, key, source, base, required=("wavelength_nm", "stock_volume_fraction", "absorbance")
        )
        cols = csv_table.columns
        fit = fit_dilution_series(
            wavelength_nm=cols["wavelength_nm"],
            stock_volume_fraction=cols["stock_volume_fraction"],
            absorbance=cols["absorbance"],
            path_length_mm=path_mm,
            context=f"stock {key}, field {source}",
        )
        wavelength = fit.wavelength_nm
        coefficient = fit.coefficient_per_mm
        sd = fit.coefficient_sd_per_mm
        quantity = "attenuation"
        method = "cuvette"
    resolved[source] = csv_table.to_definition()
    if wavelength.size < 2:
        raise _fail(key, source, "needs at least two wavelengths")
    solvent, solvent_spectrum = _solvent(table, key, base, resolved)
    spec = AbsorberSpec(
        method=method,
        wavelength_nm=np.array(wavelength, dtype=float),
        coefficient_per_mm=np.array(coefficient, dtype=float),
        coefficient_sd_per_mm=np.array(sd, dtype=float),
        quantity=quantity,
        albedo=albedo,
        g=g,
        dilution_fit=fit,
        source=csv_table.source,
        solvent=solvent,
        solvent_spectrum=solvent_spectrum,
        water_source=_get_water_source(table, key),
    )
    return spec, density, 0.0


def _solvent(table, key, base, resolved):
    """The absorber's solvent: a key of SOLVENTS, or "spectrum" with its CSV table."""
    if "solvent_spectrum_csv" in table:
        if "solvent" in table:
            raise _fail(key, "solvent", "give the solvent once: solvent or solvent_spectrum_csv")
        spectrum = _get_csv(table, key, "solvent_spectrum_csv", base, required=("wavelength_nm", "mua_per_mm"))
        _check_spectrum(spectrum, key, "solvent_spectrum_csv", "mua_per_mm")
        resolved["solvent_spectrum_csv"] = spectrum.to_definition()
        return "spectrum", spectrum
    solvent = _get_string(table, key, "solvent", default="none", choices=tuple(SOLVENTS))
    if "water_source" in table and solvent != "water":
        raise _fail(key, "water_source", "only used with solvent = \"water\"; remove it")
    return solvent, None


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


#: The parser of each kind: ``(table, key, base, resolved) -> (spec, density_g_per_ml, solids_volume_fraction)``.
_PARSERS = {
    "matrix": _parse_matrix,
    "spheres": _parse_spheres,
    "powder": _parse_powder,
    "emulsion": _parse_emulsion,
    "absorber": _parse_absorber,
    "blood": _parse_blood,
}


def _plain(value):
    """The TOML table with dates as ISO strings (for the database snapshot)."""
    if isinstance(value, dict):
        return {k: _plain(v) for k, v in value.items()}
    if isinstance(value, list):
        return [_plain(v) for v in value]
    if isinstance(value, (_dt.date, _dt.datetime, _dt.time)):
        return value.isoformat()
    return value


def _parse_stock(key: str, table, base: Path) -> Stock:
    """One ``[stocks.KEY]`` table → :class:`Stock` (kind and field names checked first)."""
    kind = _check_fields(table, key)
    resolved: dict = {}
    spec, density, solids = _PARSERS[kind](table, key, base, resolved)
    potency = _get_number(table, key, "potency", lambda v: v > 0, default=1.0)
    potency_sd = _get_number(table, key, "potency_sd", lambda v: v >= 0, default=0.0)
    lot = table.get("lot", "")
    if not isinstance(lot, (str, int)) or isinstance(lot, bool):
        raise _fail(key, "lot", f"expected {_COMMON['lot']} as text, got {lot!r}")
    name = table.get("name", "")
    if not isinstance(name, str):
        raise _fail(key, "name", f"expected {_COMMON['name']} as text, got {name!r}")
    expiry = _parse_expiry(table.get("expiry"), key)
    hazards = _parse_hazards(table.get("hazards"), key)
    if kind == "blood":
        hazards = tuple(dict.fromkeys((*BLOOD_HAZARDS, *hazards)))
    definition = _plain(dict(table))
    if resolved:
        definition["resolved"] = resolved
    return Stock(
        key=key,
        kind=kind,
        lot=str(lot),
        expiry=expiry,
        potency=potency,
        potency_sd=potency_sd,
        hazards=hazards,
        density_g_per_ml=float(density),
        solids_volume_fraction=float(solids),
        definition=definition,
        spec=spec,
        name=name,
    )


def parse_shelf(document: Mapping, *, base: Path, path: Path | None = None, today: _dt.date | None = None) -> Shelf:
    """Build a :class:`Shelf` from a parsed stock document (the TOML as a dict).

    Parameters
    ----------
    document : mapping
        ``{"stocks": {KEY: {...}}, "shelf": {"name": ...}}``.
    base : Path
        Folder that relative CSV paths are resolved against.
    path : Path, optional
        The file the document came from (kept on the shelf).
    today : datetime.date, optional
        Date for the expiry check (default: today); an expired stock raises a
        :class:`PhantomlabWarning`.

    Returns
    -------
    Shelf
    """
    where = str(path) if path is not None else "stock document"
    unknown = [k for k in document if k not in ("stocks", "shelf")]
    if unknown:
        raise InputError(f"{where}: unknown top-level entry {unknown[0]!r}{_suggest(unknown[0], ('stocks', 'shelf'))}; expected [stocks.KEY] tables and an optional [shelf]")
    stocks_table = document.get("stocks")
    if not isinstance(stocks_table, dict) or not stocks_table:
        raise InputError(f"{where}: no stocks; expected one table [stocks.KEY] per bottle")
    shelf_table = document.get("shelf", {})
    if not isinstance(shelf_table, dict) or any(k != "name" for k in shelf_table):
        raise InputError(f"{where}: [shelf] takes only name = \"...\"")
    stocks = {}
    for key, table in stocks_table.items():
        stocks[key] = _parse_stock(key, table, base)
    today = today or _dt.date.today()
    for stock in stocks.values():
        if stock.expiry is not None and stock.expiry < today:
            warnings.warn(
                f"stock {stock.key} (lot {stock.lot or '?'}) expired on {stock.expiry.isoformat()}",
                PhantomlabWarning,
                stacklevel=3,
            )
    return Shelf(path=path, stocks=stocks, name=str(shelf_table.get("name", "")))


def load_shelf(path) -> Shelf:
    """Load a stock file (TOML): every bottle on the shelf, checked.

    Parameters
    ----------
    path : str or Path
        The stock file; CSV paths inside it are relative to its folder.

    Returns
    -------
    Shelf

    Raises
    ------
    InputError
        One line naming the stock, the field and what is expected: missing or misspelt
        fields (with the nearest valid name), impossible values, missing CSV files, CSV
        files with bad columns, TOML syntax errors.
    """
    from phantomlab.inputs import parse_toml, read_text_file  # layer 0: size limit, BOM

    file = Path(path)
    document = parse_toml(read_text_file(file, what="stock file"), what=f"stock file {str(file)!r}")
    return parse_shelf(document, base=file.resolve().parent, path=file)
