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
:mod:`phantomlab.materials.stock.fields`; each kind's spec and parser live in
:mod:`phantomlab.materials.stock.kinds`, registered by kind in :data:`_PARSERS` here.
"""

from __future__ import annotations

import datetime as _dt
import warnings
from pathlib import Path
from typing import Mapping

from phantomlab.errors import InputError, PhantomlabWarning
from phantomlab.materials.stock.fields import _COMMON, _check_fields, _fail, _suggest
from phantomlab.materials.stock.hazards import BLOOD_HAZARDS
from phantomlab.materials.stock.kinds.absorber import _parse_absorber
from phantomlab.materials.stock.kinds.blood import _parse_blood
from phantomlab.materials.stock.kinds.emulsion import _parse_emulsion
from phantomlab.materials.stock.kinds.matrix import _parse_matrix
from phantomlab.materials.stock.kinds.particles import _parse_powder, _parse_spheres
from phantomlab.materials.stock.model import Shelf, Stock
from phantomlab.materials.stock.readers import _get_number, _parse_expiry, _parse_hazards

__all__ = ["load_shelf", "parse_shelf"]

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
