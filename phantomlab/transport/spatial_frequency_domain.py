"""Spatial-frequency-domain diffusion reflectance of a semi-infinite turbid medium (layer 2).

A sinusoidal pattern of spatial frequency fx falls normally on a homogeneous half-space of
absorption μa and reduced scattering μs′ with refractive index ``n`` under a medium of index
``n_outside``; the diffusion equation for the pattern's amplitude is solved with a source of
strength a′ = μs′/μt′ (μt′ = μa + μs′) and a partial-current boundary whose effective
reflection coefficient R_eff comes from :mod:`phantomlab.transport.boundary`.

* :func:`sfdi_reflectance` — diffuse reflectance R(fx) [dimensionless], models in
  :data:`SFDI_MODELS`: ``cuccia2009`` (Cuccia et al. 2009).

Vectorised as :mod:`phantomlab.transport.diffusion`: per-wavelength inputs (``mua_per_mm``,
``musp_per_mm``, ``n``, ``n_outside``) broadcast to one shape S (usually (W,)); a grid
``fx_per_mm`` of shape G gives a result of shape S + G, e.g. (W,) × (F,) → (W, F).

**Convention (the project's, DEVELOPERS.md "Reflectance conventions").**  Every
reflectance returned here is per unit power *incident* on the surface, the specular
reflection not counted: the paper's R_d (per unit power that entered) is multiplied by the
Fresnel transmission of the normally incident light,
T = 1 − ((n − n_outside)/(n + n_outside))²
(:func:`~phantomlab.transport.boundary.beam_entry_transmission`; 0.9722 at n = 1.4 in air,
1 when matched).  To compare with a paper's numbers, divide by T.

Diffusion is poor when μs′ is not much larger than μa
(:mod:`phantomlab.transport.diffusion_validity`) and when the pattern is finer than a
transport mean free path (2π fx > μt′); both raise a :class:`PhantomlabWarning` naming the
value and the range, and the numbers are still returned.

References
----------
Cuccia DJ, Bevilacqua F, Durkin AJ, Ayers FR, Tromberg BJ 2009, J Biomed Opt 14:024012,
doi:10.1117/1.3088140.
"""

from __future__ import annotations

import warnings
from functools import lru_cache
from typing import Callable

import numpy as np

from phantomlab.errors import PhantomlabWarning
from phantomlab.transport.arguments import (
    as_coefficient,
    as_index,
    as_length_grid,
    as_spectral,
    choose,
)
from phantomlab.transport.boundary import beam_entry_transmission, effective_reflection_coefficient
from phantomlab.transport.diffusion_validity import warn_scattering_dominance

__all__ = [
    "SFDI_MODELS",
    "sfdi_reflectance",
    "sfdi_diffusion_Cuccia2009",
]


@lru_cache(maxsize=256)
def _sfdi_surface_of_pair(n: float, n_outside: float, boundary: str) -> tuple[float, float]:
    """R_eff and the entry transmission T of one (n, n_outside) surface (computed once)."""
    r_eff = float(effective_reflection_coefficient(n=n, n_outside=n_outside, method=boundary))
    return r_eff, float(beam_entry_transmission(n=n, n_outside=n_outside))


def _sfdi_surface(n: np.ndarray, n_outside: np.ndarray, boundary: str) -> tuple[np.ndarray, np.ndarray]:
    """R_eff and T over arrays of indices of one shape.

    They depend only on the pair of indices (and the boundary method): a per-wavelength fit
    passes one pair thousands of times, so one pair is computed once and broadcast.
    Several pairs, NaN entries or a medium less dense than its surroundings take the direct
    route.
    """
    first_n, first_out = n.flat[0] if n.size else np.nan, n_outside.flat[0] if n_outside.size else np.nan
    single = (n.size > 0 and np.isfinite(first_n) and np.isfinite(first_out) and first_n >= first_out
              and bool(np.all(n == first_n)) and bool(np.all(n_outside == first_out)))
    if single:
        return tuple(np.full(n.shape, value)
                     for value in _sfdi_surface_of_pair(float(first_n), float(first_out), boundary))
    r_eff = np.asarray(effective_reflection_coefficient(n=n, n_outside=n_outside, method=boundary))
    return r_eff, np.asarray(beam_entry_transmission(n=n, n_outside=n_outside))


def sfdi_diffusion_Cuccia2009(
    *, mua_per_mm, musp_per_mm, fx_per_mm, n, n_outside=1.0, boundary="groenhuis1983"
):
    """Diffuse reflectance of a sinusoidal illumination pattern of spatial frequency fx.

    R(fx) = T · 3A a′ / ((μeff′/μtr + 1)(μeff′/μtr + 3A)), μeff′ = √(μeff² + (2π fx)²),
    μtr = μa + μs′, a′ = μs′/μtr, with the paper's own boundary convention
    A = (1 − R_eff) / (2 (1 + R_eff)) (not the A of the extrapolated boundary).  The fraction
    is the paper's R_d (per unit power that entered); T = 1 − R_sp, the Fresnel
    transmission of the normally incident light, makes it per unit incident power (the
    project's convention, as the Monte Carlo lookup of the sfdi fit).

    Parameters
    ----------
    mua_per_mm : float or array (S) [1/mm]
    musp_per_mm : float or array (S) [1/mm]
    fx_per_mm : float or array (G) [1/mm]
        Spatial frequencies of the pattern (>= 0).
    n, n_outside : float or array (S) [dimensionless]
    boundary : str
        Method for R_eff; the paper used the Groenhuis-type polynomial.

    Returns
    -------
    ndarray (S + G) [dimensionless]
        Per unit incident power: T = 1 − R_sp for μa = 0 at fx = 0 (1 per light that
        entered, Cuccia et al.'s limit; 1 when matched); → 0 as fx → ∞.

    References
    ----------
    Cuccia et al. 2009, J Biomed Opt 14:024012 (diffuse reflectance R_d(k), k = 2π fx).
    """
    mua = as_coefficient(mua_per_mm, "mua_per_mm")
    musp = as_coefficient(musp_per_mm, "musp_per_mm", strictly_positive=True)
    n_arr = as_index(n, "n")
    n_out = as_index(n_outside, "n_outside")
    mua, musp, n_arr, n_out = as_spectral(
        mua_per_mm=mua, musp_per_mm=musp, n=n_arr, n_outside=n_out
    )
    fx = as_length_grid(fx_per_mm, "fx_per_mm", "1/mm")
    warn_scattering_dominance(mua, musp)
    r_eff, entry = _sfdi_surface(n_arr, n_out, boundary)
    a_cuccia = (1.0 - r_eff) / (2.0 * (1.0 + r_eff))  # Cuccia et al. 2009, their A
    mutr = mua + musp
    high = fx[np.isfinite(fx)]
    limit = mutr[np.isfinite(mutr)]
    if high.size and limit.size and 2.0 * np.pi * high.max() > limit.min():
        warnings.warn(
            f"diffusion R(fx) is poor when the pattern is finer than a transport mean free path:"
            f" fx_per_mm = {high.max():.3g} > (mua+musp)/(2 pi) = {limit.min() / (2 * np.pi):.3g} /mm",
            PhantomlabWarning,
            stacklevel=3,
        )
    extra = (None,) * fx.ndim
    k = 2.0 * np.pi * fx[(None,) * mua.ndim + (Ellipsis,)]
    mutr_g = mutr[(Ellipsis,) + extra]
    a_g = a_cuccia[(Ellipsis,) + extra]
    albedo = (musp / mutr)[(Ellipsis,) + extra]
    mueff2 = (3.0 * mua * mutr)[(Ellipsis,) + extra]
    ratio = np.sqrt(mueff2 + k * k) / mutr_g
    entry = entry[(Ellipsis,) + extra]
    value = entry * 3.0 * a_g * albedo / ((ratio + 1.0) * (ratio + 3.0 * a_g))
    return value[()] if value.ndim == 0 else value


#: Registry of spatial-frequency-domain reflectance models (name → function).
SFDI_MODELS: dict[str, Callable] = {"cuccia2009": sfdi_diffusion_Cuccia2009}


def sfdi_reflectance(
    *,
    mua_per_mm,
    musp_per_mm,
    fx_per_mm,
    n,
    n_outside=1.0,
    boundary="groenhuis1983",
    model="cuccia2009",
):
    """Spatial-frequency-domain diffuse reflectance R(fx) by a named model.

    Parameters
    ----------
    mua_per_mm, musp_per_mm : float or array (S) [1/mm]
    fx_per_mm : float or array (G) [1/mm]
    n, n_outside : float or array (S) [dimensionless]
    boundary : {'groenhuis1983', 'haskell1994'}
        Method for the effective reflection coefficient R_eff.
    model : {'cuccia2009'}
        See :data:`SFDI_MODELS`; an unknown name is refused with the valid list.

    Returns
    -------
    ndarray (S + G) [dimensionless]
        Per unit incident power (the project's convention; see the module docstring).

    References
    ----------
    Cuccia et al. 2009, J Biomed Opt 14:024012.
    """
    function = choose(SFDI_MODELS, model, "sfdi model")
    return function(
        mua_per_mm=mua_per_mm,
        musp_per_mm=musp_per_mm,
        fx_per_mm=fx_per_mm,
        n=n,
        n_outside=n_outside,
        boundary=boundary,
    )
