"""Checks of the physics arguments shared by the transport models (layer 2).

Each function takes what a caller passed, turns it into a float array and refuses what no
model can accept with one line naming the value and the accepted range
(:class:`~phantomlab.errors.InputError`).  NaN is let through: a NaN input gives a NaN
result in the matching entries, so one bad wavelength does not sink a spectrum.
"""

from __future__ import annotations

import numpy as np

from phantomlab.errors import InputError

__all__ = [
    "as_coefficient",
    "as_anisotropy",
    "as_index",
    "as_length_grid",
    "as_spectral",
    "choose",
]


def _show(values: np.ndarray) -> str:
    flat = np.atleast_1d(values).ravel()
    return f"{flat[0]:g}" if flat.size == 1 else f"{flat.min():g}..{flat.max():g}"


def as_coefficient(value, name: str, *, strictly_positive: bool = False) -> np.ndarray:
    """An attenuation coefficient [1/mm]: >= 0 (or > 0 when ``strictly_positive``)."""
    try:
        values = np.asarray(value, dtype=float)
    except (TypeError, ValueError):
        raise InputError(f"{name}: expected numbers in 1/mm, got {value!r}") from None
    finite = values[np.isfinite(values)]
    bad = finite <= 0 if strictly_positive else finite < 0
    if np.any(bad) or np.any(np.isinf(values)):
        rule = "> 0" if strictly_positive else ">= 0"
        raise InputError(f"{name} must be finite and {rule} [1/mm], got {_show(values)}")
    return values


def as_anisotropy(value, name: str = "g") -> np.ndarray:
    """A scattering anisotropy (mean cosine), strictly inside (-1, 1)."""
    try:
        values = np.asarray(value, dtype=float)
    except (TypeError, ValueError):
        raise InputError(f"{name}: expected numbers in (-1, 1), got {value!r}") from None
    finite = values[np.isfinite(values)]
    if np.any(np.abs(finite) >= 1) or np.any(np.isinf(values)):
        raise InputError(f"{name} must lie in (-1, 1), got {_show(values)}")
    return values


def as_index(value, name: str = "n") -> np.ndarray:
    """A refractive index, >= 1."""
    try:
        values = np.asarray(value, dtype=float)
    except (TypeError, ValueError):
        raise InputError(f"{name}: expected a refractive index >= 1, got {value!r}") from None
    finite = values[np.isfinite(values)]
    if np.any(finite < 1.0) or np.any(np.isinf(values)):
        raise InputError(f"{name} (refractive index) must be >= 1, got {_show(values)}")
    return values


def as_length_grid(value, name: str, unit: str = "mm", *, strictly_positive: bool = False):
    """A grid of distances or spatial frequencies: finite, >= 0 (or > 0), any shape."""
    try:
        values = np.asarray(value, dtype=float)
    except (TypeError, ValueError):
        raise InputError(f"{name}: expected numbers in {unit}, got {value!r}") from None
    finite = values[np.isfinite(values)]
    bad = finite <= 0 if strictly_positive else finite < 0
    if np.any(bad) or np.any(np.isinf(values)):
        rule = "> 0" if strictly_positive else ">= 0"
        raise InputError(f"{name} must be finite and {rule} [{unit}], got {_show(values)}")
    return values


def as_spectral(**arrays: np.ndarray) -> list[np.ndarray]:
    """Broadcast per-wavelength arrays to one shape; refuse shapes that do not match."""
    try:
        return [np.asarray(a, dtype=float) for a in np.broadcast_arrays(*arrays.values())]
    except ValueError:
        shapes = ", ".join(f"{k} {np.shape(v)}" for k, v in arrays.items())
        raise InputError(
            f"per-wavelength inputs must share one shape (or be scalars), got {shapes}"
        ) from None


def choose(registry: dict, name, what: str):
    """Look ``name`` up in a registry; refuse an unknown name with the list of valid ones."""
    try:
        return registry[name]
    except (KeyError, TypeError):
        valid = ", ".join(sorted(registry))
        raise InputError(f"unknown {what} {name!r}; valid: {valid}") from None
