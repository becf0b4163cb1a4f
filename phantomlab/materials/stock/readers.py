"""Field readers of a stock table (layer 1): each reads one field and refuses it in one line.

A kind's parser reads its fields only through these, so every refusal reads
``stock KEY, field NAME: what is expected`` with the text of
:data:`~phantomlab.materials.stock.fields._FIELDS` (``_get_number``, ``_get_string``,
``_get_material``, ``_get_csv``, ``_get_water_source``); ``_check_spectrum`` checks a
spectrum's wavelengths and values, ``_parse_expiry`` and ``_parse_hazards`` read the common
fields ``expiry`` and ``hazards``.
"""

from __future__ import annotations

import datetime as _dt
import math
from pathlib import Path

import numpy as np

from phantomlab.materials.refractive_index import INDEX_MODELS
from phantomlab.materials.spectra import CsvTable, read_csv_table
from phantomlab.materials.stock.fields import _FIELDS, _fail, _suggest
from phantomlab.materials.stock.hazards import HAZARD_KEYS
from phantomlab.materials.water_sources import DEFAULT_WATER_SOURCE, WATER_ABSORPTION_SOURCES


def _number(value, key: str, field_name: str, expected: str, ok=lambda v: True) -> float:
    if isinstance(value, bool) or not isinstance(value, (int, float)):
        raise _fail(key, field_name, f"expected {expected}, got {value!r}")
    number = float(value)
    if not math.isfinite(number) or not ok(number):
        raise _fail(key, field_name, f"expected {expected}, got {value!r}")
    return number


def _get_number(table, key, name, ok, *, default=None, required=False):
    expected = _FIELDS[table["kind"]][name]
    if name not in table:
        if required:
            raise _fail(key, name, f"missing; expected {expected}")
        return default
    return _number(table[name], key, name, expected, ok)


def _get_string(table, key, name, *, default=None, required=False, choices=None):
    expected = _FIELDS[table["kind"]][name]
    if name not in table:
        if required:
            raise _fail(key, name, f"missing; expected {expected}")
        return default
    value = table[name]
    if not isinstance(value, str) or not value.strip():
        raise _fail(key, name, f"expected {expected}, got {value!r}")
    if choices is not None and value not in choices:
        raise _fail(key, name, f"{value!r} is not one of {', '.join(choices)}{_suggest(value, choices)}")
    return value


def _get_material(table, key, name="material", *, default=None, required=True):
    value = _get_string(table, key, name, default=default, required=required)
    if value is None:
        return None
    if value not in INDEX_MODELS:
        raise _fail(
            key,
            name,
            f"unknown material {value!r}{_suggest(value, INDEX_MODELS)}; known: {', '.join(sorted(INDEX_MODELS))}",
        )
    return value


def _get_csv(table, key, name, base: Path, *, required, optional=()):
    from phantomlab.inputs import contained_path  # layer 0

    path_text = _get_string(table, key, name, required=True)
    # only inside the stock file's folder tree (or PHANTOMLAB_DATA_DIRS): a stock file
    # cannot make phantomlab read any file on the machine
    path = contained_path(path_text, base_dir=base, what=f"stock {key}, field {name}")
    return read_csv_table(path, required=required, optional=optional, context=f"stock {key}, field {name}")


def _parse_expiry(value, key):
    if value is None:
        return None
    if isinstance(value, _dt.datetime):
        return value.date()
    if isinstance(value, _dt.date):
        return value
    if isinstance(value, str):
        try:
            return _dt.date.fromisoformat(value.strip())
        except ValueError:
            pass
    raise _fail(key, "expiry", f"expected a date YYYY-MM-DD, got {value!r}")


def _parse_hazards(value, key):
    if value is None:
        return ()
    if isinstance(value, str) or not isinstance(value, list):
        raise _fail(key, "hazards", f"expected a list of hazard keys ({', '.join(HAZARD_KEYS)}), got {value!r}")
    out = []
    for item in value:
        if item not in HAZARD_KEYS:
            raise _fail(
                key,
                "hazards",
                f"unknown hazard key {item!r}{_suggest(item, HAZARD_KEYS)}; known: {', '.join(HAZARD_KEYS)}",
            )
        if item not in out:
            out.append(item)
    return tuple(out)


def _get_water_source(table, key) -> str:
    return _get_string(table, key, "water_source", default=DEFAULT_WATER_SOURCE,
                       choices=tuple(WATER_ABSORPTION_SOURCES))


def _check_spectrum(csv_table: CsvTable, key, name, column):
    wavelength = csv_table.columns["wavelength_nm"]
    if np.any(np.diff(wavelength) <= 0):
        raise _fail(key, name, f"{csv_table.path!r}: wavelength_nm must increase strictly from row to row")
    if np.any(wavelength <= 0):
        raise _fail(key, name, f"{csv_table.path!r}: wavelength_nm must be > 0")
    if np.any(csv_table.columns[column] < 0):
        raise _fail(key, name, f"{csv_table.path!r}: {column} must be >= 0")

