"""Target optics of a recipe: points, a power law for μs′, a spectrum file, an optional g.

The ``[target]`` table of a recipe file (docs/formats.md) takes one of three shapes:

* points: ``wavelength_nm``, ``mua_per_mm`` and/or ``musp_per_mm`` lists of equal length;
* a power law for μs′ with μa points: ``musp_power_law = {a_per_mm, b, reference_nm}``,
  μs′(λ) = a (λ/λ0)^−b evaluated at ``wavelength_nm`` (Jacques 2013, Phys Med Biol 58:R37,
  eq. 1);
* a spectrum file: ``spectrum_csv = "file.csv"`` with columns
  ``wavelength_nm,mua_per_mm,musp_per_mm[,g]`` (an empty cell = not targeted there);

plus, in any shape, an optional anisotropy target ``g_wavelength_nm`` / ``g``, tolerances
(``mua_tolerance_percent``, ``musp_tolerance_percent`` relative; ``g_tolerance`` absolute) and
weights (``mua_weight``, ``musp_weight``, ``g_weight``).  Numbers are in the unit the field
name says; a list entry may instead be a typed quantity such as ``"0.1 /cm"``.
"""

from __future__ import annotations

import csv
import io
import math
import warnings
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np

from phantomlab.errors import InputError, PhantomlabWarning
from phantomlab.inputs import contained_path, read_text_file
from phantomlab.limits import check_limit
from phantomlab.units import parse_quantity

__all__ = ["Target", "parse_target", "read_target_csv"]

#: Default tolerances when a recipe gives none.  # common practice, no source: ±5 % is what a
#: liquid batch from characterised stocks can be expected to hold (FIELD.md: 1–3 %, solid 10+ %).
DEFAULT_MUA_TOLERANCE = 0.05
DEFAULT_MUSP_TOLERANCE = 0.05
DEFAULT_G_TOLERANCE = 0.01  # absolute; common practice, no source

#: Above these a target is far outside tissue-like values and more likely a unit slip (1/cm
#: typed as 1/mm).  FIELD.md: NIR μa typically 0.001–0.05 /mm; Jacques 2013 (Phys Med Biol
#: 58:R37, Table 2) μs′ at 500 nm from 1.9 /mm (soft tissue) to 4.6 /mm (skin).
PLAUSIBLE_MUA_PER_MM = 1.0
PLAUSIBLE_MUSP_PER_MM = 10.0

_KNOWN_KEYS = {
    "wavelength_nm",
    "mua_per_mm",
    "musp_per_mm",
    "musp_power_law",
    "spectrum_csv",
    "g_wavelength_nm",
    "g",
    "mua_tolerance_percent",
    "musp_tolerance_percent",
    "g_tolerance",
    "mua_weight",
    "musp_weight",
    "g_weight",
}


@dataclass(frozen=True)
class Target:
    """What the batch should measure, on one wavelength grid.

    Attributes
    ----------
    wavelength_nm : ndarray (W,) [nm], sorted, unique
    mua_per_mm, musp_per_mm : ndarray (W,) [1/mm]; NaN where that quantity is not targeted
    g : ndarray (W,) [dimensionless]; NaN where not targeted
    g_reference_musp_per_mm : ndarray (W,) [1/mm]
        The μs′ used to scale the g rows of the solver (the target μs′ there, interpolated
        where μs′ is not targeted at a g wavelength); NaN where g is not targeted.
    mua_tolerance, musp_tolerance : float [fraction, relative]
    g_tolerance : float [absolute]
    mua_weight, musp_weight, g_weight : float [dimensionless]
    shape : str
        ``"points"``, ``"power_law"`` or ``"spectrum_csv"``.
    """

    wavelength_nm: np.ndarray
    mua_per_mm: np.ndarray
    musp_per_mm: np.ndarray
    g: np.ndarray
    g_reference_musp_per_mm: np.ndarray
    mua_tolerance: float = DEFAULT_MUA_TOLERANCE
    musp_tolerance: float = DEFAULT_MUSP_TOLERANCE
    g_tolerance: float = DEFAULT_G_TOLERANCE
    mua_weight: float = 1.0
    musp_weight: float = 1.0
    g_weight: float = 1.0
    shape: str = "points"

    @property
    def has_g(self) -> bool:
        return bool(np.any(np.isfinite(self.g)))

    def to_json(self) -> dict[str, Any]:
        def nullable(values):
            return [None if not math.isfinite(v) else float(v) for v in values]

        return {
            "wavelength_nm": [float(v) for v in self.wavelength_nm],
            "mua_per_mm": nullable(self.mua_per_mm),
            "musp_per_mm": nullable(self.musp_per_mm),
            "g": nullable(self.g),
            "mua_tolerance_percent": 100.0 * self.mua_tolerance,
            "musp_tolerance_percent": 100.0 * self.musp_tolerance,
            "g_tolerance": self.g_tolerance,
            "shape": self.shape,
        }


def _refuse_unknown(key: str) -> InputError:
    base = key.split("_per_")[0] if "_per_" in key else key
    if base in ("mua", "musp", "mus", "mu_a", "mu_s", "musp_power", "wavelength"):
        canonical = {"wavelength": "wavelength_nm [nm]"}.get(base, f"{base}_per_mm [1/mm]")
        return InputError(
            f"target: field {key!r} is not accepted; give {canonical} as numbers, "
            'or list entries with their unit such as "0.1 /cm"'
        )
    return InputError(f"target: unknown field {key!r}; accepted: {', '.join(sorted(_KNOWN_KEYS))}")


def _number_list(values: Any, *, field: str, kind: str) -> np.ndarray:
    if isinstance(values, (int, float, str)):
        values = [values]
    if not isinstance(values, list):
        raise InputError(f"target: {field} must be a list of numbers, got {values!r}")
    check_limit("list_values", len(values), given=f"target: {field}")
    out = []
    for item in values:
        if isinstance(item, bool):
            raise InputError(f"target: {field} holds {item!r}; give numbers")
        if isinstance(item, (int, float)):
            out.append(float(item))
        elif isinstance(item, str):
            out.append(parse_quantity(item, kind))
        else:
            raise InputError(f"target: {field} holds {item!r}; give numbers")
    array = np.asarray(out, dtype=float)
    if not np.all(np.isfinite(array)):
        raise InputError(f"target: {field} holds a value that is not a finite number")
    return array


def _positive_scalar(table: dict, key: str, default: float, *, percent: bool = False) -> float:
    if key not in table:
        return default
    value = table[key]
    if isinstance(value, bool) or not isinstance(value, (int, float)) or not 0 < value < math.inf:
        raise InputError(f"target: {key} must be a finite number > 0, got {value!r}")
    return float(value) / 100.0 if percent else float(value)


def read_target_csv(path: Path) -> dict[str, np.ndarray]:
    """Read a target spectrum file: ``wavelength_nm,mua_per_mm,musp_per_mm[,g]``.

    Lines starting with ``#`` are comments (``# source: ...``); an empty cell is NaN (not
    targeted at that wavelength).  The file is read within the ``file_mb`` limit, with or
    without a byte-order mark; a refusal names rows and expected columns, never the file's
    content.
    """
    path = Path(path)
    text = read_text_file(path, what="target: spectrum file")
    rows = [row for row in csv.reader(io.StringIO(text, newline=""))
            if row and not row[0].lstrip().startswith("#")]
    if not rows:
        raise InputError(f"target: spectrum file {path.name!r} is empty")
    header = [h.strip() for h in rows[0]]
    if "wavelength_nm" not in header or not ({"mua_per_mm", "musp_per_mm"} & set(header)):
        raise InputError(
            f"target: {path.name!r} header needs wavelength_nm and "
            "mua_per_mm and/or musp_per_mm (optional g)"
        )
    allowed = {"wavelength_nm", "mua_per_mm", "musp_per_mm", "g"}
    extra = [h for h in header if h not in allowed]
    if extra or len(set(header)) != len(header):
        raise InputError(
            f"target: {path.name!r} header column {header.index(extra[0]) + 1 if extra else len(header)} "
            "is unknown or repeated; accepted: wavelength_nm, mua_per_mm, musp_per_mm, g"
        )
    check_limit("list_values", len(rows) - 1, given=f"target: {path.name!r} rows")
    columns: dict[str, list[float]] = {h: [] for h in header}
    for number, row in enumerate(rows[1:], start=2):
        if len(row) != len(header):
            raise InputError(f"target: {path.name!r} row {number} has {len(row)} cells, header {len(header)}")
        for name, cell in zip(header, row):
            cell = cell.strip()
            try:
                columns[name].append(float(cell) if cell else math.nan)
            except ValueError:
                raise InputError(f"target: {path.name!r} row {number}, column {name}: not a number") from None
    return {name: np.asarray(values, dtype=float) for name, values in columns.items()}


def _check_values(name: str, values: np.ndarray, *, allow_nan: bool = True) -> None:
    finite = values[np.isfinite(values)]
    if np.any(finite < 0):
        raise InputError(f"target: {name} has a negative value ({finite.min():g}); targets must be > 0")
    if np.any(finite == 0):
        raise InputError(
            f"target: {name} has a zero value; a relative-error target must be > 0 "
            "(leave the quantity out where it is not targeted)"
        )
    if not allow_nan and np.any(~np.isfinite(values)):
        raise InputError(f"target: {name} holds a value that is not a number")


def parse_target(table: Any, *, base_dir: Path) -> Target:
    """Build a :class:`Target` from the ``[target]`` table of a recipe file.

    Parameters
    ----------
    table : dict
        The parsed ``[target]`` table.
    base_dir : Path
        Folder of the recipe file; ``spectrum_csv`` is relative to it.

    Returns
    -------
    Target

    Raises
    ------
    InputError
        Unknown field (a unit other than the field name's, e.g. ``mua_per_cm``), empty target,
        negative or zero values, lists of unequal length, g outside (−1, 1).
    """
    if not isinstance(table, dict) or not table:
        raise InputError(
            "target: empty; give wavelength_nm with mua_per_mm and/or musp_per_mm, "
            "or musp_power_law, or spectrum_csv"
        )
    for key in table:
        if key not in _KNOWN_KEYS:
            raise _refuse_unknown(key)

    if "spectrum_csv" in table:
        clash = {"wavelength_nm", "mua_per_mm", "musp_per_mm", "musp_power_law"} & set(table)
        if clash:
            raise InputError(f"target: give spectrum_csv or {sorted(clash)[0]}, not both")
        columns = read_target_csv(contained_path(table["spectrum_csv"], base_dir=base_dir,
                                                 what="target: spectrum_csv"))
        wavelength = columns["wavelength_nm"]
        nan = np.full(wavelength.shape, np.nan)
        mua = columns.get("mua_per_mm", nan)
        musp = columns.get("musp_per_mm", nan)
        g_values = columns.get("g", nan)
        shape = "spectrum_csv"
    else:
        if "wavelength_nm" not in table:
            raise InputError("target: wavelength_nm is missing (a list of wavelengths in nm)")
        wavelength = _number_list(table["wavelength_nm"], field="wavelength_nm", kind="wavelength")
        if wavelength.size == 0:
            raise InputError("target: wavelength_nm is empty; give at least one wavelength [nm]")
        nan = np.full(wavelength.shape, np.nan)
        mua = nan.copy()
        musp = nan.copy()
        shape = "points"
        if "mua_per_mm" in table:
            mua = _number_list(table["mua_per_mm"], field="mua_per_mm", kind="attenuation")
            if mua.size != wavelength.size:
                raise InputError(
                    f"target: mua_per_mm has {mua.size} values, wavelength_nm {wavelength.size}"
                )
        if "musp_per_mm" in table and "musp_power_law" in table:
            raise InputError("target: give musp_per_mm or musp_power_law, not both")
        if "musp_per_mm" in table:
            musp = _number_list(table["musp_per_mm"], field="musp_per_mm", kind="attenuation")
            if musp.size != wavelength.size:
                raise InputError(
                    f"target: musp_per_mm has {musp.size} values, wavelength_nm {wavelength.size}"
                )
        if "musp_power_law" in table:
            musp = _power_law(table["musp_power_law"], wavelength)
            shape = "power_law"
        g_values = nan.copy()

    if wavelength.size == 0:
        raise InputError("target: no wavelengths given")
    if np.any(wavelength <= 0) or np.any(~np.isfinite(wavelength)):
        raise InputError("target: wavelength_nm values must be finite and > 0 nm")
    _check_values("mua_per_mm", mua)
    _check_values("musp_per_mm", musp)
    if not np.any(np.isfinite(mua)) and not np.any(np.isfinite(musp)):
        raise InputError("target: empty; no mua_per_mm or musp_per_mm value is given")
    for name, values, limit in (("mua_per_mm", mua, PLAUSIBLE_MUA_PER_MM),
                                ("musp_per_mm", musp, PLAUSIBLE_MUSP_PER_MM)):
        finite = values[np.isfinite(values)]
        if finite.size and finite.max() > limit:
            warnings.warn(
                f"target: {name} up to {finite.max():g} /mm is above {limit:g} /mm, far from "
                "tissue-like values; check the unit is 1/mm, not 1/cm", PhantomlabWarning, stacklevel=3)

    if "g" in table or "g_wavelength_nm" in table:
        if "g" not in table or "g_wavelength_nm" not in table:
            raise InputError("target: a g target needs both g_wavelength_nm [nm] and g")
        g_wavelength = _number_list(table["g_wavelength_nm"], field="g_wavelength_nm", kind="wavelength")
        g_points = np.atleast_1d(np.asarray(table["g"], dtype=float)) if _all_numbers(table["g"]) else None
        if g_points is None or g_points.size != g_wavelength.size or g_points.size == 0:
            raise InputError("target: g must be a list of numbers as long as g_wavelength_nm")
        wavelength, mua, musp, g_values = _merge_g(wavelength, mua, musp, g_values, g_wavelength, g_points)

    order = np.argsort(wavelength)
    wavelength, mua, musp, g_values = (a[order] for a in (wavelength, mua, musp, g_values))
    if np.any(np.diff(wavelength) == 0):
        raise InputError("target: a wavelength is listed twice")
    finite_g = g_values[np.isfinite(g_values)]
    if np.any(np.abs(finite_g) >= 1):
        raise InputError(f"target: g must lie in (-1, 1), got {finite_g[np.abs(finite_g) >= 1][0]:g}")

    reference = np.full(wavelength.shape, np.nan)
    if finite_g.size:
        known = np.isfinite(musp)
        if not np.any(known):
            raise InputError("target: a g target needs a musp target (musp_per_mm or musp_power_law)")
        has_g = np.isfinite(g_values)
        reference[has_g] = np.exp(
            np.interp(np.log(wavelength[has_g]), np.log(wavelength[known]), np.log(musp[known]))
        )

    return Target(
        wavelength_nm=wavelength,
        mua_per_mm=mua,
        musp_per_mm=musp,
        g=g_values,
        g_reference_musp_per_mm=reference,
        mua_tolerance=_positive_scalar(table, "mua_tolerance_percent", DEFAULT_MUA_TOLERANCE, percent=True),
        musp_tolerance=_positive_scalar(table, "musp_tolerance_percent", DEFAULT_MUSP_TOLERANCE, percent=True),
        g_tolerance=_positive_scalar(table, "g_tolerance", DEFAULT_G_TOLERANCE),
        mua_weight=_positive_scalar(table, "mua_weight", 1.0),
        musp_weight=_positive_scalar(table, "musp_weight", 1.0),
        g_weight=_positive_scalar(table, "g_weight", 1.0),
        shape=shape,
    )


def _all_numbers(values: Any) -> bool:
    values = values if isinstance(values, list) else [values]
    return all(isinstance(v, (int, float)) and not isinstance(v, bool) for v in values)


def _power_law(spec: Any, wavelength: np.ndarray) -> np.ndarray:
    """μs′ = a (λ/λ0)^−b (Jacques 2013, Phys Med Biol 58:R37, eq. 1), a in 1/mm."""
    if not isinstance(spec, dict):
        raise InputError("target: musp_power_law must be a table {a_per_mm, b, reference_nm}")
    unknown = set(spec) - {"a_per_mm", "b", "reference_nm"}
    if unknown:
        key = sorted(unknown)[0]
        hint = " (a is in 1/mm: divide a value in 1/cm by 10)" if key.startswith("a") else ""
        raise InputError(
            f"target: musp_power_law field {key!r} is not accepted; give a_per_mm, b, reference_nm{hint}"
        )
    try:
        a = float(spec["a_per_mm"])
        b = float(spec["b"])
        reference = float(spec.get("reference_nm", 500.0))
    except KeyError as missing:
        raise InputError(f"target: musp_power_law needs {missing.args[0]}") from None
    except (TypeError, ValueError):
        raise InputError("target: musp_power_law values must be numbers") from None
    if not 0 < a < math.inf or not 0 < reference < math.inf or not math.isfinite(b):
        raise InputError("target: musp_power_law needs finite a_per_mm > 0, reference_nm > 0 and b")
    with np.errstate(over="ignore"):
        musp = a * (wavelength / reference) ** (-b)  # Jacques 2013, eq. 1
    if not np.all(np.isfinite(musp)):
        raise InputError(f"target: musp_power_law with b = {b:g} overflows at these wavelengths; "
                         "give a smaller |b|")
    return musp


def _merge_g(wavelength, mua, musp, g_values, g_wavelength, g_points):
    wavelength = list(wavelength)
    mua, musp, g_values = list(mua), list(musp), list(g_values)
    for lam, value in zip(g_wavelength, g_points):
        matches = [i for i, w in enumerate(wavelength) if abs(w - lam) < 1e-9]
        if matches:
            g_values[matches[0]] = value
        else:
            wavelength.append(lam)
            mua.append(np.nan)
            musp.append(np.nan)
            g_values.append(value)
    return (np.asarray(x, dtype=float) for x in (wavelength, mua, musp, g_values))
