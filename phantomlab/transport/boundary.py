"""Boundary terms of the diffusion approximation at an index-mismatched surface (layer 2).

The extrapolated-boundary condition puts the fluence to zero a distance z_b = 2 A D above
the surface, with D the diffusion coefficient and A the boundary coefficient

    A = (1 + R_eff) / (1 − R_eff),

where R_eff is the fraction of the diffuse flux reaching the surface from inside that is
reflected back.  Two published ways to get R_eff sit in :data:`BOUNDARY_METHODS`:

* ``"groenhuis1983"`` — the empirical polynomial of Groenhuis et al. 1983 in the relative
  index n_rel = n / n_outside;
* ``"haskell1994"`` — the exact angular integrals of the Fresnel reflectance
  (Haskell et al. 1994): R_eff = (R_φ + R_j) / (2 − R_φ + R_j) with
  R_φ = ∫₀¹ 2μ R_F(μ) dμ and R_j = ∫₀¹ 3μ² R_F(μ) dμ.

The same integrals give the coefficients of the fluence-plus-flux reflectance of Kienle &
Patterson 1997: C1 = (1 − R_φ)/4 and C2 = (1 − R_j)/2 (matched boundary: 1/4 and 1/2).

References
----------
Groenhuis RAJ, Ferwerda HA, Ten Bosch JJ 1983, Appl Opt 22:2456–2462,
doi:10.1364/AO.22.002456 (the polynomial for the internal diffuse reflectance r_d).
Haskell RC, Svaasand LO, Tsay TT, Feng TC, McAdams MS, Tromberg BJ 1994, J Opt Soc Am A
11:2727–2741, doi:10.1364/JOSAA.11.002727 (eqs. for R_φ, R_j and R_eff).
Kienle A, Patterson MS 1997, J Opt Soc Am A 14:246–254, doi:10.1364/JOSAA.14.000246
(R = C1 Φ + C2 j at the surface).

:func:`beam_entry_transmission` is the part of a normally incident beam that gets into the
medium, 1 − R_F(normal): the diffusion models multiply by it so that their reflectance is per
unit *incident* power, the project's convention (DEVELOPERS.md, "Reflectance conventions").
"""

from __future__ import annotations

import warnings
from functools import lru_cache
from typing import Callable

import numpy as np

from phantomlab.errors import PhantomlabWarning
from phantomlab.transport.arguments import as_index, choose
from phantomlab.transport.fresnel import critical_cosine, fresnel_reflectance

__all__ = [
    "BOUNDARY_METHODS",
    "boundary_coefficient",
    "effective_reflection_coefficient",
    "effective_reflection_Groenhuis1983",
    "effective_reflection_Haskell1994",
    "fresnel_angular_moments",
    "fluence_flux_coefficients_Kienle1997",
    "beam_entry_transmission",
]

_NODES = 96


@lru_cache(maxsize=1)
def _unit_nodes() -> tuple[np.ndarray, np.ndarray]:
    x, w = np.polynomial.legendre.leggauss(_NODES)
    return 0.5 * (x + 1.0), 0.5 * w


def _relative_index(n, n_outside) -> np.ndarray:
    n = as_index(n, "n")
    n_outside = as_index(n_outside, "n_outside")
    return np.asarray(n / n_outside, dtype=float)


@lru_cache(maxsize=256)
def _moments_of_pair(n_in: float, n_out: float) -> tuple[float, float]:
    """R_φ and R_j of one (n, n_outside) pair (cached: they depend on nothing else)."""
    mu_c = float(critical_cosine(n_from=n_in, n_to=n_out))
    s, w = _unit_nodes()
    span = 1.0 - mu_c
    mu = mu_c + span * s * s
    jac = span * 2.0 * s * w
    r = fresnel_reflectance(cos_incident=mu, n_from=n_in, n_to=n_out)
    r_phi = mu_c**2 + float(np.sum(2.0 * mu * r * jac))
    r_j = mu_c**3 + float(np.sum(3.0 * mu * mu * r * jac))
    return r_phi, r_j


def fresnel_angular_moments(*, n, n_outside=1.0):
    """The Fresnel moments R_φ = ∫₀¹ 2μ R_F dμ and R_j = ∫₀¹ 3μ² R_F dμ.

    μ is the direction cosine inside the medium of index ``n``, R_F the Fresnel reflectance
    of the surface towards ``n_outside``.  Below the critical cosine μc, R_F = 1 and that
    part is integrated exactly (μc², μc³); above it, Gauss–Legendre in s with
    μ = μc + (1 − μc) s², which removes the square-root kink of R_F at μc.

    The moments depend on (n, n_outside) only: each distinct pair is integrated once and
    kept (a per-wavelength fit passes the same pair for every wavelength, thousands of
    times per fit).

    Parameters
    ----------
    n : float or array [dimensionless]
        Refractive index of the medium (>= 1).
    n_outside : float or array [dimensionless]
        Refractive index outside (>= 1).

    Returns
    -------
    (ndarray, ndarray)
        R_φ and R_j, each of the broadcast shape of the inputs.

    References
    ----------
    Haskell et al. 1994, J Opt Soc Am A 11:2727 (definitions of R_φ and R_j).
    """
    _relative_index(n, n_outside)  # the checks of both indices
    n_in = np.asarray(as_index(n, "n"), dtype=float)
    n_out = np.asarray(as_index(n_outside, "n_outside"), dtype=float)
    n_in, n_out = np.broadcast_arrays(n_in, n_out)
    r_phi = np.full(n_in.shape, np.nan)
    r_j = np.full(n_in.shape, np.nan)
    finite = np.isfinite(n_in) & np.isfinite(n_out)
    if finite.any():
        first_in, first_out = n_in[finite].flat[0], n_out[finite].flat[0]
        if np.all(n_in[finite] == first_in) and np.all(n_out[finite] == first_out):
            pairs, inverse = [(float(first_in), float(first_out))], np.zeros(int(finite.sum()), int)
        else:
            unique, inverse = np.unique(np.stack([n_in[finite], n_out[finite]], axis=1), axis=0,
                                        return_inverse=True)
            pairs, inverse = [tuple(map(float, row)) for row in unique], inverse.ravel()
        values = np.array([_moments_of_pair(*pair) for pair in pairs])
        r_phi[finite] = values[inverse, 0]
        r_j[finite] = values[inverse, 1]
    return (r_phi[()] if r_phi.ndim == 0 else r_phi), (r_j[()] if r_j.ndim == 0 else r_j)


def effective_reflection_Groenhuis1983(*, n, n_outside=1.0):
    """Internal diffuse reflectance by the empirical polynomial of Groenhuis et al. 1983.

    r_d = −1.440 n_rel⁻² + 0.710 n_rel⁻¹ + 0.668 + 0.0636 n_rel, with n_rel = n / n_outside.
    The polynomial was fitted for a medium denser than its surroundings: for n_rel < 1 it
    is used but a :class:`PhantomlabWarning` says so.

    Parameters
    ----------
    n, n_outside : float or array [dimensionless]

    Returns
    -------
    ndarray [dimensionless]

    References
    ----------
    Groenhuis et al. 1983, Appl Opt 22:2456 (the r_d polynomial).
    """
    rel = _relative_index(n, n_outside)
    finite = rel[np.isfinite(rel)]
    if np.any(finite < 1.0):
        warnings.warn(
            f"groenhuis1983 polynomial used at relative index n/n_outside = {finite.min():.4g};"
            " it was fitted for n/n_outside >= 1 (use boundary 'haskell1994')",
            PhantomlabWarning,
            stacklevel=3,
        )
    r_d = -1.440 / rel**2 + 0.710 / rel + 0.668 + 0.0636 * rel  # Groenhuis 1983 polynomial
    return r_d[()] if np.ndim(r_d) == 0 else r_d


def effective_reflection_Haskell1994(*, n, n_outside=1.0):
    """Effective reflection coefficient from the exact Fresnel integrals (Haskell et al. 1994).

    R_eff = (R_φ + R_j) / (2 − R_φ + R_j), with R_φ, R_j from
    :func:`fresnel_angular_moments`.

    Parameters
    ----------
    n, n_outside : float or array [dimensionless]

    Returns
    -------
    ndarray [dimensionless]

    References
    ----------
    Haskell et al. 1994, J Opt Soc Am A 11:2727 (R_eff from the partial-current boundary
    condition).
    """
    r_phi, r_j = fresnel_angular_moments(n=n, n_outside=n_outside)
    value = (r_phi + r_j) / (2.0 - r_phi + r_j)
    return value[()] if np.ndim(value) == 0 else value


#: Registry of methods for the effective reflection coefficient (name → function).
BOUNDARY_METHODS: dict[str, Callable] = {
    "groenhuis1983": effective_reflection_Groenhuis1983,
    "haskell1994": effective_reflection_Haskell1994,
}


def effective_reflection_coefficient(*, n, n_outside=1.0, method="haskell1994"):
    """R_eff by a named method of :data:`BOUNDARY_METHODS` (unknown names are refused)."""
    function = choose(BOUNDARY_METHODS, method, "boundary method")
    return function(n=n, n_outside=n_outside)


def boundary_coefficient(*, n, n_outside=1.0, method="haskell1994"):
    """Boundary coefficient A = (1 + R_eff)/(1 − R_eff) of the extrapolated boundary.

    Parameters
    ----------
    n : float or array [dimensionless]
        Refractive index of the turbid medium (>= 1).
    n_outside : float or array [dimensionless]
        Refractive index of what is outside (>= 1; 1.0 for air).
    method : {'haskell1994', 'groenhuis1983'}
        How R_eff is obtained (see :data:`BOUNDARY_METHODS`).

    Returns
    -------
    ndarray [dimensionless]
        A, broadcast over ``n`` and ``n_outside``.  A = 1 for a matched boundary (exactly
        for ``haskell1994``; 1.003 for the polynomial).  n = 1.4 in air gives A ≈ 2.95
        (haskell1994) and ≈ 3.25 (groenhuis1983).

    References
    ----------
    Haskell et al. 1994, J Opt Soc Am A 11:2727; Groenhuis et al. 1983, Appl Opt 22:2456.
    """
    r_eff = effective_reflection_coefficient(n=n, n_outside=n_outside, method=method)
    value = (1.0 + r_eff) / (1.0 - r_eff)
    return value[()] if np.ndim(value) == 0 else value


def fluence_flux_coefficients_Kienle1997(*, n, n_outside=1.0):
    """Coefficients C1, C2 of R = C1 Φ + C2 j (Kienle & Patterson 1997).

    C1 = (1/2) ∫₀¹ (1 − R_F) μ dμ · 2 / 2 = (1 − R_φ)/4 and
    C2 = (3/2) ∫₀¹ (1 − R_F) μ² dμ = (1 − R_j)/2: the radiance of the P1 approximation,
    L = Φ/(4π) + 3 j μ/(4π), carried out through the surface over the exit hemisphere.

    Parameters
    ----------
    n, n_outside : float or array [dimensionless]

    Returns
    -------
    (ndarray, ndarray)
        C1, C2.  Matched: 0.25, 0.5.  n = 1.4 in air: ≈ 0.118, ≈ 0.306.

    References
    ----------
    Kienle & Patterson 1997, J Opt Soc Am A 14:246 (eqs. for C1 and C2 as Fresnel integrals).
    """
    r_phi, r_j = fresnel_angular_moments(n=n, n_outside=n_outside)
    c1 = 0.25 * (1.0 - r_phi)
    c2 = 0.5 * (1.0 - r_j)
    return c1, c2


def beam_entry_transmission(*, n, n_outside=1.0):
    """Fraction of a normally incident collimated beam that enters the medium.

    T = 1 − R_F(normal) = 1 − ((n − n_outside)/(n + n_outside))² (unpolarised, no slide).
    The diffusion models count their source from the light that entered; multiplied by T
    their reflectance is per unit power *incident* on the surface, like the Monte Carlo
    tallies and like a calibrated measurement (DEVELOPERS.md, "Reflectance conventions").

    Parameters
    ----------
    n : float or array [dimensionless]
        Refractive index of the medium (>= 1).
    n_outside : float or array [dimensionless]
        Refractive index of what the beam comes from (>= 1; 1.0 for air).

    Returns
    -------
    ndarray [dimensionless]
        T, broadcast over the inputs; 1 for a matched boundary, 0.97222 for n = 1.4 in air.

    References
    ----------
    Born & Wolf 1999, *Principles of Optics*, §1.5.2 (Fresnel formulae at normal incidence).
    """
    n_in = np.asarray(as_index(n, "n"), dtype=float)
    n_out = np.asarray(as_index(n_outside, "n_outside"), dtype=float)
    value = 1.0 - fresnel_reflectance(cos_incident=1.0, n_from=n_out, n_to=n_in)
    value = np.asarray(value, dtype=float)
    return value[()] if value.ndim == 0 else value
