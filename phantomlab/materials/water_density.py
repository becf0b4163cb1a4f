"""Density of liquid water from its temperature (Kell 1975) (layer 1).

Feeds the refractive index of water (IAPWS R9-97, :mod:`phantomlab.materials.dispersion_formulas`).
"""

from __future__ import annotations

import warnings

import numpy as np

from phantomlab.errors import PhantomlabWarning
from phantomlab.inputs import float_array

__all__ = ["water_density_Kell1975", "KELL1975_BAND_C"]

#: Temperature range of Kell's 1975 density formula [°C].
KELL1975_BAND_C = (0.0, 150.0)


def water_density_Kell1975(*, temperature_c=20.0) -> np.ndarray:
    """Density of air-free liquid water at 1 atm from its temperature.

    Parameters
    ----------
    temperature_c : float or array [°C]
        Valid 0–150 °C; outside it a :class:`PhantomlabWarning` names the value.

    Returns
    -------
    ndarray [g/mL]

    Notes
    -----
    Kell's rational function (ref. 1, eq. 16, the IPTS-68 fit)::

        ρ = (999.83952 + 16.945176 t − 7.9870401e−3 t² − 46.170461e−6 t³
             + 105.56302e−9 t⁴ − 280.54253e−12 t⁵) / (1 + 16.879850e−3 t)   [kg/m³]

    The difference between the IPTS-68 and ITS-90 temperature scales (< 0.01 K here)
    is ignored; it moves the density by less than 2 ppm.

    References
    ----------
    1. Kell, G. S. (1975). Density, thermal expansivity, and compressibility of liquid water
       from 0° to 150 °C. J. Chem. Eng. Data 20(1), 97–105. doi:10.1021/je60064a005
    """
    t = float_array(temperature_c, name="temperature_c")
    lo, hi = KELL1975_BAND_C
    finite = t[np.isfinite(t)]
    if finite.size and (finite.min() < lo or finite.max() > hi):
        warnings.warn(
            f"water density: temperature {finite.min():g}–{finite.max():g} °C outside the "
            f"{lo:g}–{hi:g} °C of Kell 1975",
            PhantomlabWarning,
            stacklevel=2,
        )
    numerator = (
        999.83952
        + 16.945176 * t
        - 7.9870401e-3 * t**2
        - 46.170461e-6 * t**3
        + 105.56302e-9 * t**4
        - 280.54253e-12 * t**5
    )
    density_kg_m3 = numerator / (1.0 + 16.879850e-3 * t)  # Kell 1975, eq. 16
    return density_kg_m3 / 1000.0
