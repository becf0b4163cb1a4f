"""Published absorption tables shipped with phantomlab, read once (layer 1).

Each table is a CSV file in ``phantomlab/data/`` whose first line is its provenance (author,
year, table, and where the digital copy came from) and whose second line names the columns.
Two layouts are read:

* ``wavelength_nm,mua_per_m`` (or ``mua_per_cm``): the absorption coefficient as published;
* ``wavelength_um,k``: the imaginary part of the refractive index, turned into
  μa = 4πk/λ (Bohren & Huffman 1983, eq. 2.52).

Between rows the tables are interpolated by a shape-preserving cubic (PCHIP, Fritsch &
Carlson 1980) through log μa, so the interpolant never overshoots between two rows and stays
positive across the orders of magnitude of an absorption band.
"""

from __future__ import annotations

from dataclasses import dataclass
from functools import lru_cache
from importlib import resources

import numpy as np

from phantomlab.errors import InputError

__all__ = ["AbsorptionTable", "absorption_table", "CoefficientTable", "coefficient_table", "LogPchip"]

_TO_PER_MM = {"mua_per_m": 1e-3, "mua_per_cm": 0.1, "mua_per_mm": 1.0}


@dataclass(frozen=True)
class AbsorptionTable:
    """One published absorption table.

    Attributes
    ----------
    file : str
        File name in ``phantomlab/data/``.
    source : str
        Its provenance line (without the leading ``# source:``).
    wavelength_nm : ndarray [nm]
        The table's own wavelengths, increasing.
    mua_per_mm : ndarray [1/mm]
        μa at those wavelengths.
    """

    file: str
    source: str
    wavelength_nm: np.ndarray
    mua_per_mm: np.ndarray

    @property
    def band_nm(self) -> tuple[float, float]:
        """First and last wavelength of the table [nm]."""
        return float(self.wavelength_nm[0]), float(self.wavelength_nm[-1])


@lru_cache(maxsize=None)
def absorption_table(file: str) -> AbsorptionTable:
    """Read one shipped table (cached: each file is parsed once per process).

    Parameters
    ----------
    file : str
        File name in ``phantomlab/data/``.

    Returns
    -------
    AbsorptionTable
    """
    text = resources.files("phantomlab").joinpath("data", file).read_text(encoding="utf-8")
    lines = [line.strip() for line in text.splitlines() if line.strip()]
    if not lines[0].startswith("# source:"):
        raise InputError(f"shipped table {file} lacks its provenance line")
    source = lines[0][len("# source:"):].strip()
    columns = lines[1].split(",")
    rows = np.array([[float(v) for v in line.split(",")] for line in lines[2:]])
    if columns[0] == "wavelength_um" and columns[1] == "k":
        wavelength_nm = rows[:, 0] * 1000.0
        mua = 4.0 * np.pi * rows[:, 1] / (rows[:, 0] * 1e-3)  # 4πk/λ, λ in mm
    elif columns[0] == "wavelength_nm" and columns[1] in _TO_PER_MM:
        wavelength_nm = rows[:, 0]
        mua = rows[:, 1] * _TO_PER_MM[columns[1]]
    else:
        raise InputError(f"shipped table {file}: unknown columns {lines[1]!r}")
    if np.any(np.diff(wavelength_nm) <= 0) or np.any(mua <= 0):
        raise InputError(f"shipped table {file}: wavelengths must increase and μa be > 0")
    wavelength_nm.setflags(write=False)
    mua.setflags(write=False)
    return AbsorptionTable(file, source, wavelength_nm, mua)


@dataclass(frozen=True)
class CoefficientTable:
    """A shipped table of numbers by column (e.g. temperature coefficients, any sign).

    Attributes
    ----------
    file : str
    source : str
        Its provenance line.
    columns : dict of str to ndarray
        Each column by its header name, as published.
    """

    file: str
    source: str
    columns: dict


@lru_cache(maxsize=None)
def coefficient_table(file: str) -> CoefficientTable:
    """Read a shipped table of coefficients (cached); the first column must increase."""
    text = resources.files("phantomlab").joinpath("data", file).read_text(encoding="utf-8")
    lines = [line.strip() for line in text.splitlines() if line.strip()]
    if not lines[0].startswith("# source:"):
        raise InputError(f"shipped table {file} lacks its provenance line")
    names = lines[1].split(",")
    rows = np.array([[float(v) for v in line.split(",")] for line in lines[2:]])
    if rows.shape[1] != len(names) or np.any(np.diff(rows[:, 0]) <= 0):
        raise InputError(f"shipped table {file}: each row needs {len(names)} numbers, the first increasing")
    columns = {name: rows[:, i].copy() for i, name in enumerate(names)}
    for values in columns.values():
        values.setflags(write=False)
    return CoefficientTable(file, lines[0][len("# source:"):].strip(), columns)


class LogPchip:
    """PCHIP through log μa of tabulated rows, built once and evaluated many times.

    Parameters
    ----------
    table_nm, table_mua : ndarray [nm], [1/mm]
        Increasing wavelengths and μa > 0.
    """

    def __init__(self, table_nm, table_mua) -> None:
        from scipy.interpolate import PchipInterpolator

        self.table_nm = np.asarray(table_nm, dtype=float)
        self.table_mua = np.asarray(table_mua, dtype=float)
        self._interpolant = PchipInterpolator(self.table_nm, np.log(self.table_mua), extrapolate=False)

    def __call__(self, wavelength_nm) -> np.ndarray:
        """μa [1/mm] at ``wavelength_nm``; NaN outside the rows (the caller checks the band)."""
        with np.errstate(invalid="ignore"):
            return np.exp(self._interpolant(np.asarray(wavelength_nm, dtype=float)))
