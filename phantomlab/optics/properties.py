"""The optical-properties spectrum of a mixed phantom (layer 2).

All arrays share the wavelength grid; units are canonical (docs/design.md): wavelength nm,
coefficients 1/mm.  ``musp_per_mm`` is derived, μs′ = μs (1 − g), so it can never disagree
with ``mus_per_mm`` and ``g``.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from phantomlab.errors import InputError

__all__ = ["OpticalProperties"]


@dataclass(frozen=True)
class OpticalProperties:
    """μa, μs, g and refractive index of a medium over a wavelength grid.

    Attributes
    ----------
    wavelength_nm : ndarray [nm]
    mua_per_mm : ndarray [1/mm]
        Absorption coefficient (natural log).
    mus_per_mm : ndarray [1/mm]
        Scattering coefficient.
    g : ndarray [dimensionless]
        Scattering anisotropy (mean cosine); 0 where there is no scattering.
    n : ndarray [dimensionless]
        Refractive index of the medium.
    """

    wavelength_nm: np.ndarray
    mua_per_mm: np.ndarray
    mus_per_mm: np.ndarray
    g: np.ndarray
    n: np.ndarray

    def __post_init__(self) -> None:
        wavelength = np.atleast_1d(np.asarray(self.wavelength_nm, dtype=float))
        shape = wavelength.shape
        object.__setattr__(self, "wavelength_nm", wavelength)
        for name in ("mua_per_mm", "mus_per_mm", "g", "n"):
            values = np.broadcast_to(np.asarray(getattr(self, name), dtype=float), shape).copy()
            values.setflags(write=False)
            object.__setattr__(self, name, values)
        wavelength.setflags(write=False)
        if np.any(self.mua_per_mm < 0) or np.any(self.mus_per_mm < 0):
            raise InputError("optical properties: mua_per_mm and mus_per_mm must be >= 0")
        if np.any(np.abs(self.g) >= 1):
            raise InputError("optical properties: g must lie in (-1, 1)")

    @property
    def musp_per_mm(self) -> np.ndarray:
        """Reduced scattering coefficient μs′ = μs (1 − g) [1/mm]."""
        return self.mus_per_mm * (1.0 - self.g)

    def at(self, wavelength_nm) -> "OpticalProperties":
        """Linear interpolation onto another wavelength grid inside this one."""
        grid = np.atleast_1d(np.asarray(wavelength_nm, dtype=float))
        lo, hi = self.wavelength_nm.min(), self.wavelength_nm.max()
        if np.any(grid < lo - 1e-9) or np.any(grid > hi + 1e-9):
            raise InputError(
                f"wavelength {grid.min():g}-{grid.max():g} nm outside the spectrum's {lo:g}-{hi:g} nm"
            )

        def interp(values):
            return np.interp(grid, self.wavelength_nm, values)

        mus = interp(self.mus_per_mm)
        gmus = interp(self.mus_per_mm * self.g)
        g = np.divide(gmus, mus, out=np.zeros_like(mus), where=mus > 0)
        return OpticalProperties(grid, interp(self.mua_per_mm), mus, g, interp(self.n))
