"""The mixing rule (layer 2): doses of stocks + matrix → an optical-properties spectrum.

Independent scattering: each dose adds its intrinsic coefficients times its volume
fraction; the matrix fills the rest.
"""

from __future__ import annotations

import math
import warnings
from typing import Sequence

import numpy as np

from phantomlab.errors import InputError, PhantomlabWarning
from phantomlab.optics.intrinsic import IntrinsicOptics
from phantomlab.optics.properties import OpticalProperties

__all__ = ["mix_optics", "particle_volume_fraction", "INDEPENDENT_SCATTERING_LIMIT", "EMULSION_LINEAR_LIMIT"]

#: Particle volume fraction above which scattering no longer adds linearly (dependent
#: scattering).  FIELD notes quote Aernouts et al. 2014 (Opt. Express 22:6086) for lipid
#: emulsions at ≈10 % v/v; applying the same limit to every scatterer is common practice,
#: no source.
INDEPENDENT_SCATTERING_LIMIT = 0.10
#: Volume fraction of a lipid-emulsion stock in the mix above which its scattering grows
#: less than linearly: ≈10 % v/v (FIELD notes, after Aernouts et al. 2014).
EMULSION_LINEAR_LIMIT = 0.10


def particle_volume_fraction(components: Sequence[tuple[IntrinsicOptics, float]]) -> float:
    """Σ f_i · (particle volume fraction inside stock i): the particles in the final mix."""
    return float(sum(f * optics.solids_volume_fraction for optics, f in components))


def mix_optics(*, matrix_optics: IntrinsicOptics, components: Sequence[tuple[IntrinsicOptics, float]], n) -> OpticalProperties:
    """Optical properties of a mix of stocks in a matrix.

    Parameters
    ----------
    matrix_optics : IntrinsicOptics
        The matrix stock's own optics (``intrinsic_optics(matrix, matrix=matrix)``).
    components : sequence of (IntrinsicOptics, float)
        Each stock's intrinsic optics with its volume fraction f_i [dimensionless] of the
        undiluted stock in the final mix; Σ f_i <= 1.
    n : float or array [dimensionless]
        Refractive index of the mix (normally the matrix index).

    Returns
    -------
    OpticalProperties

    Notes
    -----
    μa = (1 − Σf) μa,m + Σ f_i μa,i;  μs = Σ f_i μs,i;  g = Σ f_i μs,i g_i / μs (0 where
    μs = 0).  Above :data:`INDEPENDENT_SCATTERING_LIMIT` of particle volume fraction, and
    for an emulsion stock above :data:`EMULSION_LINEAR_LIMIT` v/v of the stock, a
    :class:`PhantomlabWarning` names the value: scattering then grows less than linearly and
    no packing correction is applied.

    References
    ----------
    1. Aernouts, B. et al. (2014). Dependent scattering in Intralipid phantoms in the
       600–1850 nm range. Opt. Express 22(5), 6086–6098 (onset of dependent scattering).
    """
    if not isinstance(matrix_optics, IntrinsicOptics):
        raise InputError("mix_optics: matrix_optics must be an IntrinsicOptics")
    grid = matrix_optics.wavelength_nm
    total = 0.0
    mua = np.zeros_like(grid)
    mus = np.zeros_like(grid)
    gmus = np.zeros_like(grid)
    checked = []
    for item in components:
        try:
            optics, fraction = item
        except (TypeError, ValueError):
            raise InputError("mix_optics: components must be (IntrinsicOptics, volume_fraction) pairs") from None
        if not isinstance(optics, IntrinsicOptics):
            raise InputError("mix_optics: each component must be an IntrinsicOptics")
        if isinstance(fraction, bool) or not isinstance(fraction, (int, float, np.floating)) or not math.isfinite(fraction):
            raise InputError(f"mix_optics: volume fraction of {optics.stock_key} must be a finite number, got {fraction!r}")
        if not 0 <= fraction <= 1:
            raise InputError(f"mix_optics: volume fraction of {optics.stock_key} must lie in [0, 1], got {fraction:g}")
        if optics.wavelength_nm.shape != grid.shape or not np.allclose(optics.wavelength_nm, grid, rtol=0, atol=1e-9):
            raise InputError(f"mix_optics: {optics.stock_key} is on another wavelength grid than the matrix")
        total += float(fraction)
        mua += fraction * optics.mua_per_mm
        mus += fraction * optics.mus_per_mm
        gmus += fraction * optics.mus_per_mm * optics.g
        checked.append((optics, float(fraction)))
    if total > 1 + 1e-12:
        raise InputError(f"mix_optics: the stock volume fractions add up to {total:.4g} > 1")
    mua += (1.0 - total) * matrix_optics.mua_per_mm
    g = np.divide(gmus, mus, out=np.zeros_like(mus), where=mus > 0)
    for optics, fraction in checked:
        if getattr(optics.stock, "kind", None) == "emulsion" and fraction > EMULSION_LINEAR_LIMIT:
            warnings.warn(
                f"emulsion {optics.stock_key} at {fraction:.3g} v/v, above the ≈{EMULSION_LINEAR_LIMIT:g} v/v where "
                "its scattering grows less than linearly (Aernouts et al. 2014); predicted μs is too high",
                PhantomlabWarning,
                stacklevel=2,
            )
    particles = particle_volume_fraction(checked)
    if particles > INDEPENDENT_SCATTERING_LIMIT:
        warnings.warn(
            f"particle volume fraction {particles:.3g} above {INDEPENDENT_SCATTERING_LIMIT:g}: scattering "
            "no longer adds linearly (dependent scattering); predicted μs is too high",
            PhantomlabWarning,
            stacklevel=2,
        )
    n_array = np.broadcast_to(np.asarray(n, dtype=float), grid.shape)
    if not np.all(np.isfinite(n_array)) or np.any(n_array < 1):
        raise InputError("mix_optics: n must be finite and >= 1")
    return OpticalProperties(grid, mua, mus, g, n_array)
