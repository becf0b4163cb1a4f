"""Published water-absorption sources: which table answers which band (layer 1).

Water absorption sources (:data:`WATER_ABSORPTION_SOURCES`; a stock may name one in its
``water_source`` field):

``popefry1997_kou1993`` (default)
    Pope & Fry 1997 (integrating cavity, 380–727.5 nm, every 2.5 nm, all 140 rows), Kou,
    Labrie & Chylek 1993 from 730 to 1230 nm (every 5 nm as the IOCCG 2018 protocols tabulate
    it, with its uncertainty), and Segelstein 1981 below 380 nm, where neither reaches.  Both
    main tables are direct measurements on pure water at 22 °C; Kou resolves the 740, 840 and
    970 nm bands at 5 nm and agrees with Pope & Fry where they meet.
``popefry1997_segelstein1981``
    Pope & Fry 1997 over 380–727.5 nm and Segelstein 1981 (a compilation at 5–10 nm spacing
    in the NIR) below 380 nm and above 727.5 nm, to 1100 nm.
``segelstein1981``
    Segelstein 1981 alone, 200–1100 nm.
``halequerry1973``
    Hale & Querry 1973 alone, 200–1000 nm, every row of its table (25 nm spacing).

Every table is shipped at its full resolution in the band used, each file with its
provenance line (:mod:`phantomlab.materials.absorption_tables`), and interpolated by PCHIP
in log μa.

Each table holds water at its own temperature (:data:`TABLE_TEMPERATURE_C`); the
interpolation and the temperature correction are :mod:`phantomlab.materials.water`.
"""

from __future__ import annotations

from dataclasses import dataclass
from functools import lru_cache

import numpy as np

from phantomlab.errors import InputError
from phantomlab.materials.absorption_tables import absorption_table

__all__ = [
    "WaterSource",
    "WATER_ABSORPTION_SOURCES",
    "DEFAULT_WATER_SOURCE",
    "WATER_ABSORPTION_TABLE_BAND_NM",
    "TABLE_TEMPERATURE_C",
    "water_source",
    "water_absorption_rows",
    "water_absorption_rows_and_files",
]

POPE_FRY_1997_FILE = "water_absorption_pope_fry_1997.csv"
KOU_1993_FILE = "water_absorption_kou_1993.csv"
SEGELSTEIN_1981_FILE = "water_absorption_segelstein_1981.csv"
HALE_QUERRY_1973_FILE = "water_absorption_hale_querry_1973.csv"

#: Rows of Pope & Fry 1997, Table 3 [nm]: where the composites use it.
POPE_FRY_1997_BAND_NM = (380.0, 727.5)
#: Rows of Kou et al. 1993 as tabulated by IOCCG 2018 [nm].
KOU_1993_BAND_NM = (730.0, 1230.0)

#: Temperature of the water each table measured [°C]: Pope & Fry 1997 22 °C (from memory);
#: Kou, Labrie & Chylek 1993 22 °C (their abstract); Segelstein 1981 and Hale & Querry 1973
#: 25 °C (the provenance lines of their files).
TABLE_TEMPERATURE_C = {POPE_FRY_1997_FILE: 22.0, KOU_1993_FILE: 22.0, SEGELSTEIN_1981_FILE: 25.0,
                       HALE_QUERRY_1973_FILE: 25.0}


@dataclass(frozen=True)
class WaterSource:
    """A named water-absorption source.

    Attributes
    ----------
    name : str
        Key of :data:`WATER_ABSORPTION_SOURCES` (as in stock files).
    band_nm : (float, float)
        Wavelengths it answers [nm]; outside, refused.
    citation : str
        Author, year and journal of each table it uses, with the band of each.
    files : tuple of str
        The shipped tables it reads.
    """

    name: str
    band_nm: tuple[float, float]
    citation: str
    files: tuple[str, ...]


#: Water-absorption sources by name; the first is the default.
WATER_ABSORPTION_SOURCES: dict[str, WaterSource] = {
    "popefry1997_kou1993": WaterSource(
        "popefry1997_kou1993", (200.0, 1230.0),
        "Pope & Fry 1997, Appl. Opt. 36:8710 (380–727.5 nm); Kou, Labrie & Chylek 1993, Appl. Opt. 32:3531, "
        "as tabulated by the IOCCG 2018 protocols (730–1230 nm); Segelstein 1981, MSc thesis, "
        "Univ. Missouri-Kansas City (200–380 nm)",
        (POPE_FRY_1997_FILE, KOU_1993_FILE, SEGELSTEIN_1981_FILE),
    ),
    "popefry1997_segelstein1981": WaterSource(
        "popefry1997_segelstein1981", (200.0, 1100.0),
        "Pope & Fry 1997, Appl. Opt. 36:8710 (380–727.5 nm); Segelstein 1981, MSc thesis, "
        "Univ. Missouri-Kansas City (200–380 nm and 727.5–1100 nm)",
        (POPE_FRY_1997_FILE, SEGELSTEIN_1981_FILE),
    ),
    "segelstein1981": WaterSource(
        "segelstein1981", (200.0, 1100.0),
        "Segelstein 1981, MSc thesis, Univ. Missouri-Kansas City (200–1100 nm)", (SEGELSTEIN_1981_FILE,),
    ),
    "halequerry1973": WaterSource(
        "halequerry1973", (200.0, 1000.0),
        "Hale & Querry 1973, Appl. Opt. 12:555 (200–1000 nm)", (HALE_QUERRY_1973_FILE,),
    ),
}
DEFAULT_WATER_SOURCE = "popefry1997_kou1993"

#: Wavelength band of the default water source [nm].
WATER_ABSORPTION_TABLE_BAND_NM = WATER_ABSORPTION_SOURCES[DEFAULT_WATER_SOURCE].band_nm


def water_absorption_rows(source: str = DEFAULT_WATER_SOURCE) -> tuple[np.ndarray, np.ndarray]:
    """The published rows a water source interpolates between.

    Parameters
    ----------
    source : str
        Key of :data:`WATER_ABSORPTION_SOURCES`.

    Returns
    -------
    wavelength_nm : ndarray [nm]
    mua_per_mm : ndarray [1/mm]
        Each row exactly as its table gives it (μa = 4πk/λ for index tables).
    """
    wavelength, mua, _ = water_absorption_rows_and_files(source)
    return wavelength, mua


@lru_cache(maxsize=None)
def water_absorption_rows_and_files(source: str) -> tuple[np.ndarray, np.ndarray, tuple[str, ...]]:
    """The rows of a source (as :func:`water_absorption_rows`), and the file each row comes from."""
    spec = water_source(source)
    if spec.name in ("popefry1997_segelstein1981", "popefry1997_kou1993"):
        pope = absorption_table(POPE_FRY_1997_FILE)
        seg = absorption_table(SEGELSTEIN_1981_FILE)
        upper = absorption_table(KOU_1993_FILE) if spec.name == "popefry1997_kou1993" else seg
        below = seg.wavelength_nm < POPE_FRY_1997_BAND_NM[0]
        above = upper.wavelength_nm > POPE_FRY_1997_BAND_NM[1]
        parts = [(seg, below), (pope, np.ones(pope.wavelength_nm.shape, bool)), (upper, above)]
    else:
        table = absorption_table(spec.files[0])
        parts = [(table, np.ones(table.wavelength_nm.shape, bool))]
    wavelength = np.concatenate([t.wavelength_nm[keep] for t, keep in parts])
    mua = np.concatenate([t.mua_per_mm[keep] for t, keep in parts])
    files = tuple(t.file for t, keep in parts for _ in range(int(keep.sum())))
    return wavelength, mua, files


def water_source(name) -> WaterSource:
    """The :class:`WaterSource` called ``name``; refuses unknown names with the list."""
    if name not in WATER_ABSORPTION_SOURCES:
        raise InputError(
            f"unknown water absorption source {name!r}; known: {', '.join(WATER_ABSORPTION_SOURCES)}"
        )
    return WATER_ABSORPTION_SOURCES[name]
