"""Dependent scattering of densely packed particles: the packing factor (layer 2).

When particles fill more than a few % of the volume their positions are correlated (they
cannot overlap), the waves they scatter interfere, and the bulk scattering grows less than in
proportion to their number.  For hard spheres the correction to independent scattering at
small scattering vector q is the structure factor S(q → 0), which for the Percus–Yevick
solution has a closed form in the volume fraction f (Wertheim 1963; Thiele 1963):

    W(f) = S(0) = (1 − f)⁴ / (1 + 2f)²

This is Twersky's packing factor for spheres (Twersky 1975), the one Aernouts et al. 2014
found to describe the bulk μs of Intralipid dilutions from 1 to 100 % v/v.  Applied to all
scattering angles it is the small-particle limit (size ≪ wavelength); for particles of the
order of the wavelength the true reduction is smaller (S(q) → 1 at large q), so the factor
is an upper estimate of the correction there.
"""

from __future__ import annotations

import numpy as np

from phantomlab.errors import InputError

__all__ = ["packing_factor_PercusYevick", "PACKING_MODELS"]


def packing_factor_PercusYevick(*, volume_fraction) -> np.ndarray:
    """Percus–Yevick packing factor W(f) = (1 − f)⁴/(1 + 2f)² of hard spheres.

    Parameters
    ----------
    volume_fraction : float or array [fraction]
        Particle volume fraction f, 0 <= f < 0.64 (random close packing).

    Returns
    -------
    ndarray [dimensionless]
        Factor on μs and μs′ of independent scattering; 1 at f = 0, decreasing.

    Notes
    -----
    W is the isothermal compressibility of the hard-sphere fluid in units of the ideal gas,
    S(0) = ∂(βp)/∂ρ⁻¹, from the Percus–Yevick compressibility equation of state
    βp/ρ = (1 + f + f²)/(1 − f)³ (Thiele 1963, eq. 23; Wertheim 1963).

    References
    ----------
    1. Wertheim, M. S. (1963). Exact solution of the Percus-Yevick integral equation for hard
       spheres. Phys. Rev. Lett. 10(8), 321–323.
    2. Thiele, E. (1963). Equation of state for hard spheres. J. Chem. Phys. 39(2), 474–479.
    3. Twersky, V. (1975). Transparency of pair-correlated, random distributions of small
       scatterers, with applications to the cornea. J. Opt. Soc. Am. 65(5), 524–530.
    4. Aernouts, B. et al. (2014). Dependent scattering in Intralipid phantoms in the
       600–1850 nm range. Opt. Express 22(5), 6086–6098.
    """
    f = np.asarray(volume_fraction, dtype=float)
    if np.any(~np.isfinite(f)) or np.any(f < 0) or np.any(f >= 0.64):
        raise InputError(f"packing factor: volume fraction must lie in [0, 0.64), got {volume_fraction!r}")
    return (1.0 - f) ** 4 / (1.0 + 2.0 * f) ** 2


#: Dependent-scattering models by name (as in recipe files); "none" is independent scattering.
PACKING_MODELS = {
    "none": None,
    "percus_yevick": packing_factor_PercusYevick,
}
