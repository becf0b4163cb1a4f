"""Input checks shared by the Monte Carlo front ends: one-line InputError messages."""

from __future__ import annotations

import math
import numbers
import zipfile

import numba
import numpy as np

from phantomlab.errors import InputError
from phantomlab.limits import check_limit

__all__ = [
    "check_coefficient",
    "check_anisotropy",
    "check_index",
    "check_count",
    "check_threads",
    "check_choice",
    "check_rho_grid",
    "check_baseline_file",
]


def _as_float(name: str, value) -> float:
    if isinstance(value, bool) or not isinstance(value, (numbers.Real, np.floating, np.integer)):
        if isinstance(value, np.ndarray) and value.ndim == 0:
            value = value.item()
        else:
            raise InputError(f"{name} must be one real number, got {value!r}")
    number = float(value)
    if not math.isfinite(number):
        raise InputError(f"{name} must be a finite number, got {number!r}")
    return number


def check_coefficient(name: str, value) -> float:
    """A finite coefficient >= 0 [1/mm]."""
    number = _as_float(name, value)
    if number < 0.0:
        raise InputError(f"{name} must be >= 0 [1/mm], got {number:g}")
    return number


def check_anisotropy(value) -> float:
    """The Henyey-Greenstein anisotropy g, strictly inside (-1, 1)."""
    number = _as_float("g", value)
    if not -1.0 < number < 1.0:
        raise InputError(f"g must lie strictly inside (-1, 1), got {number:g}")
    return number


def check_index(name: str, value) -> float:
    """A refractive index >= 1."""
    number = _as_float(name, value)
    if number < 1.0:
        raise InputError(f"{name} must be a refractive index >= 1, got {number:g}")
    return number


def check_count(name: str, value, *, minimum: int = 1) -> int:
    """A whole number >= minimum."""
    if isinstance(value, bool) or not isinstance(value, (numbers.Integral, np.integer)):
        if isinstance(value, (float, np.floating)) and math.isfinite(value) and value == int(value):
            value = int(value)
        else:
            raise InputError(f"{name} must be a whole number >= {minimum}, got {value!r}")
    number = int(value)
    if number < minimum:
        raise InputError(f"{name} must be a whole number >= {minimum}, got {number}")
    return number


def check_threads(value) -> int:
    """None (all cores) or a whole number of threads 1..numba.config.NUMBA_NUM_THREADS."""
    available = int(numba.config.NUMBA_NUM_THREADS)
    if value is None:
        return available
    threads = check_count("threads", value)
    if threads > available:
        raise InputError(f"threads must be 1..{available} on this machine, got {threads}")
    return threads


def check_choice(name: str, value, choices: tuple[str, ...]) -> str:
    """One of a fixed set of names."""
    if value not in choices:
        raise InputError(f"{name} must be one of {', '.join(choices)}; got {value!r}")
    return value


def check_rho_grid(rho_mm) -> np.ndarray:
    """Radial bin centres [mm]: 1-D, finite, >= 0, strictly increasing, at least two."""
    try:
        grid = np.atleast_1d(np.asarray(rho_mm, dtype=float))
    except (TypeError, ValueError):
        raise InputError(f"rho_mm must be a list of distances [mm], got {rho_mm!r}") from None
    if grid.ndim != 1 or grid.size < 2:
        raise InputError("rho_mm must list at least two distances [mm] (they are bin centres)")
    if not np.all(np.isfinite(grid)) or np.any(grid < 0):
        raise InputError("rho_mm must hold finite distances >= 0 [mm]")
    if np.any(np.diff(grid) <= 0):
        raise InputError("rho_mm must be strictly increasing")
    return grid


def check_baseline_file(path) -> None:
    """A baseline file within the ``baseline_file_mb`` limit, on disk and unpacked.

    An ``.npz`` is a zip: the sizes its members declare bound what loading it would unpack,
    so a file that would unpack past the limit (a zip bomb) is refused before it is read.
    """
    size = path.stat().st_size
    check_limit("baseline_file_mb", size / 1e6, given=f"baseline file {path.name!r}")
    if zipfile.is_zipfile(path):
        try:
            with zipfile.ZipFile(path) as archive:
                unpacked = sum(info.file_size for info in archive.infolist())
        except (zipfile.BadZipFile, OSError, ValueError):
            raise InputError(f"{str(path)!r} is not a readable .npz baseline (damaged zip)") from None
        check_limit("baseline_file_mb", unpacked / 1e6, given=f"baseline file {path.name!r} unpacked")
