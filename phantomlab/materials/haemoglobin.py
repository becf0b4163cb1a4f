"""Haemoglobin: molar extinction spectra of its forms, and its concentration (layer 1).

Every table shipped here (``phantomlab/data/haemoglobin_extinction_*.csv``) is a published
tabulation typed row for row, with two provenance lines:

* ``# source: ...`` — the paper or compilation and where the digital copy was read;
* ``# basis: tetramer|heme; base 10; 1/(M cm); ...`` — per mole of WHAT the values are.

**One basis inside the project.** Molar extinction coefficients are base 10 (absorbance),
in 1/(M·cm), **per mole of haemoglobin tetramer** (four hemes, 64 500 g/mol, the molar mass
Prahl's compilations use).  Many tables are per mole of heme (the clinical "millimolar
absorptivity" of Zijlstra et al. is per monomer): such a table is declared ``# basis: heme``
and multiplied by 4 when it is read (:func:`read_extinction_table`), because one mole of
tetramer holds four moles of heme.  A table without a basis line is refused.

μa from a concentration: μa [1/mm] = ln(10) · ε [1/(M·cm)] · c [M] / 10.  The factor ln(10)
turns base-10 absorbance into the natural-log μa (as for every extinction stock,
:mod:`phantomlab.materials.spectra`).

Sources differ by several per cent (more near 600–700 nm and at the NIR isosbestic point),
so the source is chosen by name: :data:`HAEMOGLOBIN_SOURCES`.  Every table holds oxy- and
deoxyhaemoglobin; methaemoglobin (haemiglobin) and carboxyhaemoglobin come from the tables
that print them (Zijlstra, Buursma & van Assendelft 2000): :func:`sources_holding`,
:func:`source_for`.
"""

from __future__ import annotations

import re
from dataclasses import dataclass
from functools import lru_cache
from importlib import resources
from pathlib import Path

import numpy as np

from phantomlab.errors import InputError
from phantomlab.units import LN10

__all__ = [
    "HAEMOGLOBIN_TETRAMER_MOLAR_MASS_G_PER_MOL",
    "HEMES_PER_TETRAMER",
    "EXTINCTION_BASIS",
    "CHROMOPHORES",
    "ExtinctionSource",
    "ExtinctionTable",
    "HAEMOGLOBIN_SOURCES",
    "DEFAULT_HAEMOGLOBIN_SOURCE",
    "haemoglobin_source",
    "sources_holding",
    "source_for",
    "read_extinction_table",
    "extinction_table",
    "haemoglobin_extinction",
    "haemoglobin_mua_per_mm_per_um",
    "HAEMOGLOBIN_CONCENTRATION_UNITS",
    "parse_haemoglobin_concentration",
    "tetramer_um_from_g_per_l",
]

#: Molar mass of the haemoglobin tetramer [g/mol] used to turn g/L into mol/L: 64 500, the
#: value of Prahl's compilation of the Gratzer & Kollias table (the value the compilation
#: states beside the table).  Per heme: 64 500 / 4 = 16 125 g/mol.
HAEMOGLOBIN_TETRAMER_MOLAR_MASS_G_PER_MOL = 64500.0

#: Hemes (oxygen sites) per haemoglobin tetramer.
HEMES_PER_TETRAMER = 4

#: The basis of every ε this module returns, as printed in the command output.
EXTINCTION_BASIS = (
    "base 10, 1/(M cm), per mole of haemoglobin tetramer (4 hemes, 64500 g/mol)"
)

#: The haemoglobin forms, with their column in the CSV files.  Every table holds the first
#: two; ``methb`` and ``cohb`` only the tables that print them.
CHROMOPHORES: dict[str, str] = {
    "hbo2": "epsilon_hbo2_per_molar_per_cm",
    "hb": "epsilon_hb_per_molar_per_cm",
    "methb": "epsilon_methb_per_molar_per_cm",
    "cohb": "epsilon_cohb_per_molar_per_cm",
}

#: Columns every table must hold.
REQUIRED_CHROMOPHORES = ("hbo2", "hb")

_CHROMOPHORE_NAMES = {
    "hbo2": "oxyhaemoglobin",
    "hb": "deoxyhaemoglobin",
    "methb": "methaemoglobin (haemiglobin)",
    "cohb": "carboxyhaemoglobin",
}


@dataclass(frozen=True)
class ExtinctionSource:
    """One published haemoglobin extinction table shipped with phantomlab.

    Attributes
    ----------
    key : str
        The name used by ``--source`` and the ``extinction_source`` stock field.
    file : str
        File name in ``phantomlab/data/``.
    citation : str
        Short citation (the full one is the file's ``# source:`` line).
    """

    key: str
    file: str
    citation: str


#: The shipped tables, by name.  The first is the default.
HAEMOGLOBIN_SOURCES: dict[str, ExtinctionSource] = {
    "gratzer-kollias": ExtinctionSource(
        "gratzer-kollias",
        "haemoglobin_extinction_gratzer_kollias.csv",
        "Gratzer & Kollias, compiled by Prahl 1999 (250–1000 nm, 2 nm)",
    ),
    "moaveni": ExtinctionSource(
        "moaveni",
        "haemoglobin_extinction_moaveni_1970.csv",
        "Moaveni 1970, compiled by Prahl (630–950 nm, 10 nm)",
    ),
    "takatani-graham": ExtinctionSource(
        "takatani-graham",
        "haemoglobin_extinction_takatani_graham.csv",
        "Takatani & Graham, IEEE Trans Biomed Eng BME-26, compiled by Prahl (450–995 nm)",
    ),
    "zijlstra-2000": ExtinctionSource(
        "zijlstra-2000",
        "haemoglobin_extinction_zijlstra_2000.csv",
        "Zijlstra, Buursma & van Assendelft 2000, adult human HbO2, Hb, MetHb, COHb "
        "(450–800 nm every 2 nm, then 9 rows to 1000 nm; printed per heme)",
    ),
}

DEFAULT_HAEMOGLOBIN_SOURCE = "gratzer-kollias"


@dataclass(frozen=True)
class ExtinctionTable:
    """A haemoglobin extinction table as read, converted to the tetramer basis.

    Attributes
    ----------
    wavelength_nm : ndarray [nm]
        Rows, strictly increasing.
    epsilon_per_molar_per_cm : dict of str to ndarray [1/(M·cm)]
        Per chromophore the table holds (``hbo2``, ``hb``, and ``methb``, ``cohb`` where
        printed), base 10, per mole of tetramer.
    source : str
        The ``# source:`` line without its prefix.
    declared_basis : str
        ``tetramer`` or ``heme``: what the file declared (heme tables were multiplied by 4).
    """

    wavelength_nm: np.ndarray
    epsilon_per_molar_per_cm: dict
    source: str
    declared_basis: str

    @property
    def band_nm(self) -> tuple[float, float]:
        return float(self.wavelength_nm[0]), float(self.wavelength_nm[-1])

    @property
    def chromophores(self) -> tuple[str, ...]:
        """The forms the table holds, in column order."""
        return tuple(self.epsilon_per_molar_per_cm)


def haemoglobin_source(name) -> ExtinctionSource:
    """The :class:`ExtinctionSource` called ``name``; unknown names are refused with the list."""
    if name not in HAEMOGLOBIN_SOURCES:
        raise InputError(
            f"haemoglobin extinction source {name!r} unknown; known: {', '.join(HAEMOGLOBIN_SOURCES)}"
        )
    return HAEMOGLOBIN_SOURCES[name]


_BASIS_FACTORS = {"tetramer": 1.0, "heme": float(HEMES_PER_TETRAMER)}


def read_extinction_table(path_or_text, *, name: str = "extinction table") -> ExtinctionTable:
    """Read a haemoglobin extinction CSV and convert it to the tetramer basis.

    Parameters
    ----------
    path_or_text : str or Path
        A file, or the CSV text itself (a string holding a newline).  Layout: a
        ``# source: ...`` line, a ``# basis: tetramer|heme; ...`` line, the header
        ``wavelength_nm,epsilon_hbo2_per_molar_per_cm,epsilon_hb_per_molar_per_cm`` followed
        by any of ``epsilon_methb_per_molar_per_cm``, ``epsilon_cohb_per_molar_per_cm`` (each
        once), and rows.
    name : str
        What to call the table in error messages.

    Returns
    -------
    ExtinctionTable
        Values per mole of tetramer: a ``heme`` table is multiplied by
        :data:`HEMES_PER_TETRAMER` (one mole of tetramer holds four moles of heme).

    Raises
    ------
    InputError
        No source or basis line, an unknown basis, a missing column, a non-number, a negative
        value, or wavelengths that do not increase.
    """
    text = path_or_text if isinstance(path_or_text, str) and "\n" in path_or_text else Path(path_or_text).read_text(encoding="utf-8")
    source = None
    basis = None
    rows: list[list[str]] = []
    header = None
    for number, raw in enumerate(text.splitlines(), start=1):
        line = raw.strip()
        if not line:
            continue
        if line.startswith("#"):
            body = line.lstrip("#").strip()
            if body.lower().startswith("source:"):
                source = body.split(":", 1)[1].strip()
            elif body.lower().startswith("basis:"):
                basis = body.split(":", 1)[1].split(";", 1)[0].strip().lower()
            continue
        cells = [c.strip() for c in line.split(",")]
        if header is None:
            header = cells
            continue
        rows.append([number, *cells])
    if not source:
        raise InputError(f"{name}: no '# source:' line; every shipped table names its source")
    if basis not in _BASIS_FACTORS:
        raise InputError(
            f"{name}: '# basis:' must start with 'tetramer' or 'heme' (per mole of what), got {basis!r}"
        )
    required = ["wavelength_nm", *(CHROMOPHORES[k] for k in REQUIRED_CHROMOPHORES)]
    optional = {column: key for key, column in CHROMOPHORES.items() if key not in REQUIRED_CHROMOPHORES}
    extra = [] if header is None else header[len(required):]
    if header is None or header[: len(required)] != required or any(c not in optional for c in extra) \
            or len(set(extra)) != len(extra):
        raise InputError(
            f"{name}: header must be {','.join(required)}, then any of {', '.join(optional)} (each once)"
        )
    wanted = header
    values = []
    for number, *cells in rows:
        if len(cells) != len(wanted):
            raise InputError(f"{name}, line {number}: expected {len(wanted)} numbers")
        try:
            row = [float(c) for c in cells]
        except ValueError:
            raise InputError(f"{name}, line {number}: not a number") from None
        if not all(np.isfinite(row)) or min(row[1:]) < 0:
            raise InputError(f"{name}, line {number}: extinction must be finite and >= 0")
        values.append(row)
    if len(values) < 2:
        raise InputError(f"{name}: needs at least two rows")
    array = np.array(values)
    if np.any(np.diff(array[:, 0]) <= 0):
        raise InputError(f"{name}: wavelengths must increase")
    factor = _BASIS_FACTORS[basis]
    keys = [*REQUIRED_CHROMOPHORES, *(optional[c] for c in extra)]
    epsilon = {key: array[:, i + 1] * factor for i, key in enumerate(keys)}
    return ExtinctionTable(array[:, 0], epsilon, source, basis)


@lru_cache(maxsize=None)
def extinction_table(source: str = DEFAULT_HAEMOGLOBIN_SOURCE) -> ExtinctionTable:
    """The shipped table called ``source`` (read once, tetramer basis)."""
    spec = haemoglobin_source(source)
    text = resources.files("phantomlab").joinpath("data", spec.file).read_text(encoding="utf-8")
    return read_extinction_table(text, name=f"haemoglobin table {spec.key}")


@lru_cache(maxsize=None)
def _interpolant(source: str, chromophore: str):
    from scipy.interpolate import PchipInterpolator

    table = extinction_table(source)
    return PchipInterpolator(table.wavelength_nm, table.epsilon_per_molar_per_cm[chromophore], extrapolate=False)


def _chromophore(name) -> str:
    key = str(name).strip().lower()
    if key not in CHROMOPHORES:
        raise InputError(f"haemoglobin chromophore {name!r} unknown; known: {', '.join(CHROMOPHORES)}")
    return key


def sources_holding(chromophore) -> tuple[str, ...]:
    """Keys of the shipped tables that print ``chromophore`` (all of them for hbo2 and hb)."""
    key = _chromophore(chromophore)
    return tuple(s for s in HAEMOGLOBIN_SOURCES if key in extinction_table(s).epsilon_per_molar_per_cm)


def source_for(chromophores, source: str | None = None) -> str:
    """The table to read ``chromophores`` from: ``source`` if it holds them all, else refused.

    With ``source=None``: :data:`DEFAULT_HAEMOGLOBIN_SOURCE` when it holds them all, else the
    first shipped table that does (``zijlstra-2000`` for ``methb`` and ``cohb``), so one table
    gives every column of an unmixing (sources differ by several per cent; mixing them would
    bias the amounts).
    """
    keys = [_chromophore(c) for c in chromophores]
    if source is not None:
        spec = haemoglobin_source(source)
        held = extinction_table(spec.key).epsilon_per_molar_per_cm
        missing = [k for k in keys if k not in held]
        if missing:
            having = [s for s in HAEMOGLOBIN_SOURCES if all(k in extinction_table(s).epsilon_per_molar_per_cm for k in keys)]
            raise InputError(
                f"haemoglobin table {spec.key} holds {', '.join(held)}, not {', '.join(missing)}; "
                f"tables holding {', '.join(keys)}: {', '.join(having) or 'none'}"
            )
        return spec.key
    for key in (DEFAULT_HAEMOGLOBIN_SOURCE, *HAEMOGLOBIN_SOURCES):
        if all(k in extinction_table(key).epsilon_per_molar_per_cm for k in keys):
            return key
    raise InputError(f"no shipped haemoglobin table holds all of {', '.join(keys)}")  # pragma: no cover


def haemoglobin_extinction(chromophore, *, wavelength_nm, source: str = DEFAULT_HAEMOGLOBIN_SOURCE) -> np.ndarray:
    """Molar extinction coefficient of a haemoglobin form from a published table.

    Parameters
    ----------
    chromophore : {"hbo2", "hb", "methb", "cohb"}
        Oxy-, deoxy-, methaemoglobin (haemiglobin) or carboxyhaemoglobin; the last two from a
        table that prints them (:func:`sources_holding`), else refused.
    wavelength_nm : float or array [nm]
        Inside the table's band (refused outside it); NaN passes through.
    source : str
        A key of :data:`HAEMOGLOBIN_SOURCES` (default ``gratzer-kollias``).

    Returns
    -------
    ndarray [1/(M·cm)]
        Base 10, per mole of haemoglobin tetramer (:data:`EXTINCTION_BASIS`).  At a table row
        the printed value itself; between rows a shape-preserving cubic (PCHIP) through ε,
        which never overshoots the neighbouring rows and stays >= 0.

    Notes
    -----
    The tables are of haemoglobin in solution (haemolysed red cells).  Inside intact red
    cells the strongest bands are flattened (the "sieve" or pigment-packaging effect, Duysens
    1956): whole-blood μa in the Soret and Q bands is lower than the solution value at the
    same concentration.  Nothing here corrects for it; above 600 nm the effect is small.
    """
    key = _chromophore(chromophore)
    spec = haemoglobin_source(source_for([key], source))
    try:
        wavelength = np.asarray(wavelength_nm, dtype=float)
    except (TypeError, ValueError):
        raise InputError(f"wavelength_nm must be numbers in nm, got {wavelength_nm!r}") from None
    table = extinction_table(spec.key)
    lo, hi = table.band_nm
    finite = wavelength[np.isfinite(wavelength)]
    if finite.size and (finite.min() < lo or finite.max() > hi):
        bad = finite.min() if finite.min() < lo else finite.max()
        raise InputError(
            f"{key} extinction ({spec.key}): wavelength {bad:g} nm outside the table's {lo:g}–{hi:g} nm; "
            f"give wavelengths in {lo:g}–{hi:g} nm or choose another source ({', '.join(HAEMOGLOBIN_SOURCES)})"
        )
    values = _interpolant(spec.key, key)(np.where(np.isfinite(wavelength), wavelength, lo))
    return np.where(np.isfinite(wavelength), values, np.nan)


def haemoglobin_mua_per_mm_per_um(chromophore, *, wavelength_nm, source: str = DEFAULT_HAEMOGLOBIN_SOURCE) -> np.ndarray:
    """μa per µM of haemoglobin tetramer in the given form [1/mm per µM].

    μa = ln(10) · ε · c with ε in 1/(M·cm) and c in M; per µM and per mm:
    ln(10) · ε · 1e-6 / 10.

    Parameters
    ----------
    chromophore : {"hbo2", "hb", "methb", "cohb"}
    wavelength_nm : float or array [nm]
    source : str

    Returns
    -------
    ndarray [1/(mm·µM)]
    """
    epsilon = haemoglobin_extinction(chromophore, wavelength_nm=wavelength_nm, source=source)
    return LN10 * epsilon * 1e-6 / 10.0


#: Units a haemoglobin concentration may be typed in, with their factor to g/L.  ``mmol/L``
#: is the clinical SI unit, per mole of heme (monomer): 1 mmol/L = 16.125 g/L here
#: (64 500 / 4 g/mol; the ICSH monomer mass 16 114.5 g/mol differs by 0.07 %).
HAEMOGLOBIN_CONCENTRATION_UNITS: dict[str, float] = {
    "g/dl": 10.0,
    "g/l": 1.0,
    "mg/ml": 1.0,
    "mmol/l": HAEMOGLOBIN_TETRAMER_MOLAR_MASS_G_PER_MOL / HEMES_PER_TETRAMER / 1000.0,
}

_CONCENTRATION = re.compile(r"^\s*(?P<num>[-+0-9.eE]+)\s*(?P<unit>[A-Za-z/µ]+)\s*$")

#: Largest haemoglobin concentration accepted [g/L]: packed red cells hold about 330–360
#: g/L (mean corpuscular haemoglobin concentration; common practice, no source), so 400 g/L
#: bounds any real stock.
MAX_HAEMOGLOBIN_G_PER_L = 400.0


def parse_haemoglobin_concentration(text, *, name: str = "haemoglobin") -> float:
    """Read a typed haemoglobin concentration and return it in g/L.

    Parameters
    ----------
    text : str
        ``"14.5 g/dL"``, ``"145 g/L"``, ``"145 mg/mL"`` or ``"9.0 mmol/L"`` (clinical, per heme).
        A bare number, µM/mM/M (whose basis — heme or tetramer — would be a guess) and any
        other unit are refused.
    name : str
        Field name for the error message.

    Returns
    -------
    float [g/L]
    """
    accepted = "g/dL, g/L, mg/mL, mmol/L (clinical: per heme)"
    if isinstance(text, str) and len(text) > 100:
        raise InputError(f"{name}: longer than 100 characters; give a number and a unit: {accepted}")
    match = _CONCENTRATION.match(str(text)) if isinstance(text, str) else None
    if match is None:
        raise InputError(f"{name}: cannot read {text!r}; give a number and a unit: {accepted}")
    unit = match.group("unit").lower().replace("µ", "u")
    if unit not in HAEMOGLOBIN_CONCENTRATION_UNITS:
        raise InputError(f"{name}: unknown unit {match.group('unit')!r}; accepted units: {accepted}")
    try:
        value = float(match.group("num"))
    except ValueError:
        raise InputError(f"{name}: cannot read the number in {text!r}") from None
    g_per_l = value * HAEMOGLOBIN_CONCENTRATION_UNITS[unit]
    if not np.isfinite(g_per_l) or g_per_l <= 0 or g_per_l > MAX_HAEMOGLOBIN_G_PER_L:
        raise InputError(
            f"{name}: {text!r} is outside 0–{MAX_HAEMOGLOBIN_G_PER_L:g} g/L (packed red cells hold about 350 g/L)"
        )
    return g_per_l


def tetramer_um_from_g_per_l(g_per_l):
    """Haemoglobin tetramer concentration [µM] from a mass concentration [g/L] (64 500 g/mol)."""
    return np.asarray(g_per_l, dtype=float) / HAEMOGLOBIN_TETRAMER_MOLAR_MASS_G_PER_MOL * 1e6


def chromophore_title(chromophore) -> str:
    """Human name of a chromophore key (``hbo2`` → oxyhaemoglobin)."""
    return _CHROMOPHORE_NAMES[_chromophore(chromophore)]
