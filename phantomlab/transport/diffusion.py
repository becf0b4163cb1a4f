"""Steady-state diffusion reflectance of a semi-infinite turbid medium under a pencil beam (layer 2).

A pencil beam falls normally on a homogeneous half-space of absorption μa and reduced
scattering μs′ with refractive index ``n`` under a medium of index ``n_outside``; the first
reduced interaction at depth z0 = 1/μt′ (μt′ = μa + μs′) is an isotropic source of strength
a′ = μs′/μt′; the index mismatch enters through the extrapolated boundary z_b = 2 A D
(D = 1/(3 μt′)), with A from :mod:`phantomlab.transport.boundary`.

* :func:`srdr_reflectance` — spatially resolved reflectance R(ρ) [1/mm²], models in
  :data:`SRDR_MODELS`: ``farrell1992`` (the flux, Farrell, Patterson & Wilson 1992) and
  ``kienle1997`` (fluence plus flux, Kienle & Patterson 1997);
* :func:`total_diffuse_reflectance` — R(ρ) integrated over the surface, in closed form.

The same half-space under a sinusoidal pattern is
:mod:`phantomlab.transport.spatial_frequency_domain`; the μs′ ≫ μa condition every diffusion
model shares is :mod:`phantomlab.transport.diffusion_validity`.

All are vectorised: per-wavelength inputs (``mua_per_mm``, ``musp_per_mm``, ``n``,
``n_outside``) broadcast to one shape S (usually (W,)); a grid ``rho_mm`` of shape G gives a
result of shape S + G, e.g. (W,) × (R,) → (W, R).

**Convention (the project's, DEVELOPERS.md "Reflectance conventions").**  Every
reflectance returned here is per unit power *incident* on the surface, the specular
reflection not counted: the diffusion source is built from the light that entered, and the
result is multiplied by the Fresnel transmission of the normally incident beam,
T = 1 − ((n − n_outside)/(n + n_outside))²
(:func:`~phantomlab.transport.boundary.beam_entry_transmission`; 0.9722 at n = 1.4 in air,
1 when matched).  That is what the Monte Carlo engine tallies and what a measurement
calibrated on a reference means (detected power over the power sent in).  To compare with a
paper's numbers, which count from the light that entered, divide by T.

Diffusion is poor within about one transport mean free path 1/μt′ of the source and when
μs′ is not much larger than μa; both cases raise a :class:`PhantomlabWarning` naming the
value and the range, and the numbers are still returned.  How far the R(ρ) models are from
Monte Carlo where diffusion should be good is measured in
``tests/transport/test_montecarlo_models.py`` and written in each model's docstring.

References
----------
Farrell TJ, Patterson MS, Wilson B 1992, Med Phys 19:879–888, doi:10.1118/1.596777.
Kienle A, Patterson MS 1997, J Opt Soc Am A 14:246–254, doi:10.1364/JOSAA.14.000246.
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass
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
from phantomlab.transport.boundary import (
    beam_entry_transmission,
    boundary_coefficient,
    fluence_flux_coefficients_Kienle1997,
)
from phantomlab.transport.diffusion_validity import warn_scattering_dominance

__all__ = [
    "SRDR_MODELS",
    "DEFAULT_BOUNDARY",
    "srdr_reflectance",
    "srdr_model",
    "srdr_diffusion_Farrell1992",
    "srdr_diffusion_Kienle1997",
    "total_diffuse_reflectance",
    "FLUX_ONLY_MAX_INDEX_MISMATCH",
]

#: ``farrell1992`` (flux only) is poor for R(ρ) when the relative index n/n_outside is further
#: than this from 1: at 1.1 it already reads 8 % below ``kienle1997`` at 3 transport lengths,
#: and at n = 1.33 and 1.4 in air it is 13–21 % below Monte Carlo at 3–8 (measured,
#: tests/transport/test_montecarlo_models.py).  Used by the fit and the forward command to warn.
FLUX_ONLY_MAX_INDEX_MISMATCH = 0.1

#: The boundary method each model was published with (used when ``boundary=None``).
DEFAULT_BOUNDARY = {"farrell1992": "groenhuis1983", "kienle1997": "haskell1994"}


@dataclass(frozen=True)
class _Medium:
    """Per-wavelength diffusion quantities, all of one broadcast shape S."""

    mua: np.ndarray  # [1/mm]
    musp: np.ndarray  # [1/mm]
    mutp: np.ndarray  # μt′ = μa + μs′ [1/mm]
    albedo: np.ndarray  # a′ = μs′/μt′
    d: np.ndarray  # D = 1/(3 μt′) [mm]
    mueff: np.ndarray  # √(3 μa μt′) [1/mm]
    z0: np.ndarray  # 1/μt′ [mm]
    zb: np.ndarray  # 2 A D [mm]
    n: np.ndarray  # index of the medium
    n_outside: np.ndarray  # index outside
    entry: np.ndarray  # Fresnel transmission of the normally incident beam, 1 − R_sp
    c1: np.ndarray  # Kienle & Patterson's C1 = (1 − R_φ)/4
    c2: np.ndarray  # Kienle & Patterson's C2 = (1 − R_j)/2


@lru_cache(maxsize=256)
def _surface_of_pair(n: float, n_outside: float, boundary: str) -> tuple[float, float, float, float]:
    """A, C1, C2 and the entry transmission T of one (n, n_outside) surface (computed once)."""
    a_coef = float(boundary_coefficient(n=n, n_outside=n_outside, method=boundary))
    c1, c2 = fluence_flux_coefficients_Kienle1997(n=n, n_outside=n_outside)
    entry = float(beam_entry_transmission(n=n, n_outside=n_outside))
    return a_coef, float(c1), float(c2), entry


def _surface(n: np.ndarray, n_outside: np.ndarray, boundary: str) -> tuple[np.ndarray, ...]:
    """A, C1, C2, T over arrays of indices of one shape.

    They depend only on the pair of indices (and the boundary method): a per-wavelength fit
    passes one pair thousands of times, so one pair is computed once and broadcast.
    Several pairs, NaN entries or a medium less dense than its surroundings (where the
    polynomial boundary method warns) take the direct route.
    """
    first_n, first_out = n.flat[0] if n.size else np.nan, n_outside.flat[0] if n_outside.size else np.nan
    single = (n.size > 0 and np.isfinite(first_n) and np.isfinite(first_out) and first_n >= first_out
              and bool(np.all(n == first_n)) and bool(np.all(n_outside == first_out)))
    if single:
        return tuple(np.full(n.shape, value) for value in _surface_of_pair(float(first_n), float(first_out), boundary))
    a_coef = np.asarray(boundary_coefficient(n=n, n_outside=n_outside, method=boundary))
    c1, c2 = fluence_flux_coefficients_Kienle1997(n=n, n_outside=n_outside)
    entry = np.asarray(beam_entry_transmission(n=n, n_outside=n_outside))
    return a_coef, np.asarray(c1), np.asarray(c2), entry


def _medium(mua_per_mm, musp_per_mm, n, n_outside, boundary: str) -> _Medium:
    mua = as_coefficient(mua_per_mm, "mua_per_mm")
    musp = as_coefficient(musp_per_mm, "musp_per_mm", strictly_positive=True)
    n = as_index(n, "n")
    n_outside = as_index(n_outside, "n_outside")
    mua, musp, n, n_outside = as_spectral(
        mua_per_mm=mua, musp_per_mm=musp, n=n, n_outside=n_outside
    )
    return _derived(mua, musp, n, n_outside, _surface(n, n_outside, boundary), stacklevel=5)


def _derived(mua, musp, n, n_outside, surface, *, stacklevel: int) -> _Medium:
    """The medium's diffusion quantities from checked arrays of one shape and its surface (A, C1, C2, T)."""
    a_coef, c1, c2, entry = surface
    warn_scattering_dominance(mua, musp, stacklevel=stacklevel)
    mutp = mua + musp
    d = 1.0 / (3.0 * mutp)
    return _Medium(
        mua=mua,
        musp=musp,
        mutp=mutp,
        albedo=musp / mutp,
        d=d,
        mueff=np.sqrt(3.0 * mua * mutp),
        z0=1.0 / mutp,
        zb=2.0 * a_coef * d,
        n=n,
        n_outside=n_outside,
        entry=entry,
        c1=c1,
        c2=c2,
    )


def _warn_close_to_source(rho: np.ndarray, medium: _Medium, *, stacklevel: int = 4) -> None:
    mfp = medium.z0[np.isfinite(medium.z0)]
    near = rho[np.isfinite(rho)]
    if mfp.size and near.size and near.min() < mfp.max():
        warnings.warn(
            f"diffusion R(rho) is poor within one transport mean free path of the source:"
            f" rho_mm = {near.min():.3g} < 1/(mua+musp) = {mfp.max():.3g} mm",
            PhantomlabWarning,
            stacklevel=stacklevel,
        )


def _expand(medium: _Medium, grid: np.ndarray):
    """Broadcast S-shaped medium arrays against a G-shaped grid → S + G."""
    extra = (None,) * grid.ndim

    def spread(values):
        return values[(Ellipsis,) + extra]

    return spread, grid[(None,) * medium.mua.ndim + (Ellipsis,)]


def _dipole_terms(medium: _Medium, rho: np.ndarray):
    """Fluence Φ(ρ, 0) and outward flux j(ρ, 0) of the extrapolated-boundary dipole.

    Per unit power that *entered* the medium (a source of strength a′ at z0 and its image);
    the callers multiply by ``medium.entry`` for the project's per-incident convention.
    """
    spread, r = _expand(medium, rho)
    z0, zb, mueff, d, albedo = (
        spread(v) for v in (medium.z0, medium.zb, medium.mueff, medium.d, medium.albedo)
    )
    zp = z0 + 2.0 * zb  # depth of the image source above the extrapolated boundary
    r1 = np.sqrt(z0 * z0 + r * r)
    r2 = np.sqrt(zp * zp + r * r)
    e1 = np.exp(-mueff * r1)
    e2 = np.exp(-mueff * r2)
    # Farrell et al. 1992: the outward flux D ∂Φ/∂z through the surface z = 0 (z into the medium).
    flux = albedo / (4.0 * np.pi) * (
        z0 * (mueff + 1.0 / r1) * e1 / (r1 * r1) + zp * (mueff + 1.0 / r2) * e2 / (r2 * r2)
    )
    # Fluence of the same source and its image at z = 0 (Kienle & Patterson 1997).
    fluence = albedo / (4.0 * np.pi * d) * (e1 / r1 - e2 / r2)
    return fluence, flux


def srdr_diffusion_Farrell1992(
    *, mua_per_mm, musp_per_mm, rho_mm, n, n_outside=1.0, boundary="groenhuis1983"
):
    """Spatially resolved reflectance R(ρ) as the diffuse flux through the surface.

    R(ρ) = T · a′/(4π) [ z0 (μeff + 1/r1) e^(−μeff r1)/r1² + (z0 + 2z_b)(μeff + 1/r2) e^(−μeff r2)/r2² ],
    r1² = z0² + ρ², r2² = (z0 + 2z_b)² + ρ², z0 = 1/μt′, z_b = 2AD, D = 1/(3μt′),
    μeff = √(3 μa μt′); the bracket times a′/(4π) is Farrell et al.'s R(ρ) (per unit power
    that entered), T = 1 − R_sp the beam's Fresnel transmission (project convention: per unit
    incident power).  The bracket is the outward flux D ∂Φ/∂z at z = 0 (z into the medium) of
    the dipole fluence of :func:`srdr_diffusion_Kienle1997` (checked by a numerical
    derivative in the tests).

    Measured against Monte Carlo (``tests/transport/test_montecarlo_models.py``; μs′/μa = 100,
    g = 0.8, 1 mm annuli, both per incident power): matched boundary, within 4.4 % beyond
    4 transport lengths and 6–11 % high at 1–3; n = 1.4 in air, 8.5–20.5 % *low* at 3–8
    transport lengths with the published Groenhuis A = 3.25 (7.7–16.4 % with the exact
    A = 2.95); n = 1.33 in air (a water phantom), 13.4–16.2 % low at 3–5.  That is the
    model, not the code (the equation is checked above): at a mismatched surface the light
    leaving is not the net flux alone (Kienle & Patterson 1997); use ``kienle1997`` there.

    Parameters
    ----------
    mua_per_mm : float or array (S) [1/mm]
        Absorption coefficient (>= 0).
    musp_per_mm : float or array (S) [1/mm]
        Reduced scattering coefficient (> 0).
    rho_mm : float or array (G) [mm]
        Source–detector distances (>= 0).
    n, n_outside : float or array (S) [dimensionless]
        Refractive index of the medium and of what is outside.
    boundary : str
        Method for A (:data:`phantomlab.transport.boundary.BOUNDARY_METHODS`).  The paper
        used the Groenhuis polynomial.

    Returns
    -------
    ndarray (S + G) [1/mm²]
        Diffusely reflected power per unit area at ρ per unit power *incident* on the
        surface (the beam's entry loss 1 − R_sp inside, the specular reflection not counted).

    References
    ----------
    Farrell, Patterson & Wilson 1992, Med Phys 19:879 (the dipole reflectance).
    """
    medium = _medium(mua_per_mm, musp_per_mm, n, n_outside, boundary)
    rho = as_length_grid(rho_mm, "rho_mm")
    _warn_close_to_source(rho, medium)
    return _flux_reflectance(medium, rho)


def srdr_diffusion_Kienle1997(
    *, mua_per_mm, musp_per_mm, rho_mm, n, n_outside=1.0, boundary="haskell1994"
):
    """Spatially resolved reflectance R(ρ) = T [C1 Φ(ρ, 0) + C2 j(ρ, 0)].

    Φ = a′/(4πD) [e^(−μeff r1)/r1 − e^(−μeff r2)/r2] and j the flux of
    :func:`srdr_diffusion_Farrell1992` (the same dipole, z0 = 1/μt′, z_b = 2AD);
    C1 = (1 − R_φ)/4, C2 = (1 − R_j)/2 from the Fresnel integrals
    (:func:`~phantomlab.transport.boundary.fluence_flux_coefficients_Kienle1997`; 0.118 and
    0.306 at n = 1.4): the P1 radiance Φ/(4π) + 3 j μ/(4π) carried out through the surface.
    T = 1 − R_sp is the beam's Fresnel transmission (project convention: per unit incident
    power; the bracket alone is per unit power that entered, as in the paper).

    Choices written down (the paper's own choices are recalled, not read: # from memory):

    * D = 1/(3 μt′) and μeff = √(3 μa μt′), as in Farrell et al.; Kienle & Patterson discuss
      D = 1/(3 μs′) (independent of absorption).  Measured: with D = 1/(3 μs′) R(ρ) moves by
      at most 1.4 % at μs′/μa = 100 out to 15 transport lengths (the change grows with
      μa/μs′).  One D for both models keeps them differing only in how light crosses the
      surface.
    * Source strength a′ = μs′/μt′ (the scattered part of the light that entered, as in
      Farrell et al.) rather than 1: a unit source is higher by exactly μa/μs′ (1 % at
      μs′/μa = 100).  With a′ the total-reflectance identity C1·2A + C2 = 1 at μa = 0 (energy
      conservation with the exact Fresnel integrals) returns all the light that entered.

    Measured against Monte Carlo (``tests/transport/test_montecarlo_models.py``; μs′/μa = 100,
    g = 0.8, 1 mm annuli, both per incident power): n = 1.4 in air, 1.3–4.5 % high from 1 to
    15 transport lengths (4.2–7.4 % at 2–15 before the entry loss was applied); n = 1.33 in
    air, 1.0–5.0 % high; matched boundary, 7.6–13.4 % high at 2–4 transport lengths, within
    5.4 % from 5 on.  On the fit
    fixtures (n = 1.4, ρ ≤ 8 mm) it is 0.8–5.7 % high beyond 2 transport lengths for
    μs′/μa = 30–1000.  Expected from the literature: within a few per cent beyond about two
    transport lengths at high albedo (# from memory).

    Parameters
    ----------
    mua_per_mm, musp_per_mm, rho_mm, n, n_outside, boundary
        As :func:`srdr_diffusion_Farrell1992` (A by ``haskell1994`` by default, as in the paper).

    Returns
    -------
    ndarray (S + G) [1/mm²]
        Per unit area at ρ per unit incident power (entry loss inside, specular excluded).

    References
    ----------
    Kienle & Patterson 1997, J Opt Soc Am A 14:246 (R = C1 Φ + C2 j).
    """
    medium = _medium(mua_per_mm, musp_per_mm, n, n_outside, boundary)
    rho = as_length_grid(rho_mm, "rho_mm")
    _warn_close_to_source(rho, medium)
    return _fluence_flux_reflectance(medium, rho)


def _flux_reflectance(medium: _Medium, rho: np.ndarray):
    """T j(ρ, 0): Farrell et al.'s R(ρ) per unit incident power (shape S + G)."""
    _, flux = _dipole_terms(medium, rho)
    spread, _ = _expand(medium, rho)
    value = spread(medium.entry) * flux
    return value[()] if value.ndim == 0 else value


def _fluence_flux_reflectance(medium: _Medium, rho: np.ndarray):
    """T [C1 Φ(ρ, 0) + C2 j(ρ, 0)]: Kienle & Patterson's R(ρ) per unit incident power (shape S + G)."""
    fluence, flux = _dipole_terms(medium, rho)
    spread, _ = _expand(medium, rho)
    value = spread(medium.entry) * (spread(medium.c1) * fluence + spread(medium.c2) * flux)
    return value[()] if value.ndim == 0 else value


#: Registry of spatially resolved reflectance models (name → function).
SRDR_MODELS: dict[str, Callable] = {
    "farrell1992": srdr_diffusion_Farrell1992,
    "kienle1997": srdr_diffusion_Kienle1997,
}

#: The arithmetic of each model once its inputs are checked (name → function of medium, grid),
#: for :func:`srdr_model`; a model missing here is evaluated there through :data:`SRDR_MODELS`.
_SRDR_VALUES: dict[str, Callable] = {
    "farrell1992": _flux_reflectance,
    "kienle1997": _fluence_flux_reflectance,
}


def srdr_reflectance(
    *, mua_per_mm, musp_per_mm, rho_mm, n, n_outside=1.0, model="kienle1997", boundary=None
):
    """Spatially resolved diffuse reflectance R(ρ) by a named diffusion model.

    Parameters
    ----------
    mua_per_mm : float or array (S) [1/mm]
    musp_per_mm : float or array (S) [1/mm]
    rho_mm : float or array (G) [mm]
    n, n_outside : float or array (S) [dimensionless]
    model : {'kienle1997', 'farrell1992'}, default 'kienle1997'
        See :data:`SRDR_MODELS`; an unknown name is refused with the valid list.
    boundary : {'groenhuis1983', 'haskell1994'} or None
        Method for the boundary coefficient A; None takes the model's published choice
        (:data:`DEFAULT_BOUNDARY`).

    Returns
    -------
    ndarray (S + G) [1/mm²]
        Diffusely reflected power per unit area at ρ per unit power *incident* on the
        surface: the project's convention for ``reflectance_per_mm2`` (the beam's entry loss
        1 − R_sp inside, the specular reflection not counted), the same as the Monte Carlo
        engine's ``reflectance_per_mm2``.

    References
    ----------
    Farrell et al. 1992, Med Phys 19:879; Kienle & Patterson 1997, J Opt Soc Am A 14:246.
    """
    function = choose(SRDR_MODELS, model, "srdr model")
    method = DEFAULT_BOUNDARY[model] if boundary is None else boundary
    return function(
        mua_per_mm=mua_per_mm,
        musp_per_mm=musp_per_mm,
        rho_mm=rho_mm,
        n=n,
        n_outside=n_outside,
        boundary=method,
    )


def srdr_model(*, rho_mm, n, n_outside=1.0, model="kienle1997", boundary=None) -> Callable:
    """:func:`srdr_reflectance` on one grid and one surface, as ``R(mua_per_mm, musp_per_mm)``.

    For a fit, which evaluates the model hundreds of times with only μa and μs′ changing:
    the model name, the grid ``rho_mm``, the indices and the boundary method are checked
    once here and the surface's A, C1, C2 and T computed once; each call then broadcasts μa
    and μs′ and runs the same arithmetic as :func:`srdr_reflectance` (the same numbers to the
    last bit, the same warnings).  μa and μs′ are *not* checked on each call: the caller
    hands over μa >= 0 and μs′ > 0 (a fit's exponentials of its bounded parameters; NaN
    gives NaN as in :func:`srdr_reflectance`).  Indices per wavelength (arrays), a NaN index
    or a medium less dense than its surroundings take :func:`srdr_reflectance` on every call.

    Parameters
    ----------
    rho_mm : float or array (G) [mm]
        Source–detector distances (>= 0).
    n, n_outside : float [dimensionless]
        Refractive index of the medium and of what is outside.
    model, boundary
        As :func:`srdr_reflectance`.

    Returns
    -------
    callable
        ``R(mua_per_mm, musp_per_mm)`` with μa, μs′ [1/mm] of one broadcast shape S, giving
        R(ρ) [1/mm²] of shape S + G per unit incident power.
    """
    function = choose(SRDR_MODELS, model, "srdr model")
    method = DEFAULT_BOUNDARY[model] if boundary is None else boundary
    rho = as_length_grid(rho_mm, "rho_mm")
    n_value, outside_value = as_index(n, "n"), as_index(n_outside, "n_outside")
    values = _SRDR_VALUES.get(model)
    single = (n_value.ndim == 0 and outside_value.ndim == 0 and bool(np.isfinite(n_value))
              and bool(np.isfinite(outside_value)) and n_value >= outside_value)
    if not single or values is None:  # the general route, checks and all, on every call
        def reflectance(mua_per_mm, musp_per_mm):
            return function(mua_per_mm=mua_per_mm, musp_per_mm=musp_per_mm, rho_mm=rho, n=n_value,
                            n_outside=outside_value, boundary=method)

        return reflectance
    # n, n_outside, A, C1, C2, T: spread to each call's shape in one block
    constants = np.array([float(n_value), float(outside_value),
                          *_surface_of_pair(float(n_value), float(outside_value), method)])

    def reflectance(mua_per_mm, musp_per_mm):
        mua, musp = np.broadcast_arrays(np.asarray(mua_per_mm, dtype=float), np.asarray(musp_per_mm, dtype=float))
        block = np.empty(constants.shape + mua.shape)
        block[...] = constants.reshape(constants.shape + (1,) * mua.ndim)
        medium = _derived(mua, musp, block[0], block[1], tuple(block[2:]), stacklevel=4)
        _warn_close_to_source(rho, medium, stacklevel=3)
        return values(medium, rho)

    return reflectance


def total_diffuse_reflectance(
    *, mua_per_mm, musp_per_mm, n, n_outside=1.0, boundary=None, model="kienle1997"
):
    """Diffuse reflectance of the half-space, R(ρ) integrated over the surface.

    For ``farrell1992`` (the flux):
    Rd = T (a′/2) e^(−√(3(1 − a′))) [1 + e^(−(4/3) A √(3(1 − a′)))]  (CHECKS.md without T;
    the closed-form integral 2π ∫ R ρ dρ of the Farrell dipole).  For ``kienle1997``:
    Rd = T {C1 a′/(2 D μeff) [e^(−μeff z0) − e^(−μeff (z0 + 2z_b))] + C2 (a′/2) [e^(−μeff z0) +
    e^(−μeff (z0 + 2z_b))]}, the same integral of C1 Φ + C2 j (its μa → 0 limit is
    T (C1 · 2A a′ + C2 a′)).  T = 1 − R_sp is the beam's Fresnel transmission: a
    non-absorbing half-space returns T, all the light that entered.

    Parameters
    ----------
    mua_per_mm, musp_per_mm, n, n_outside : float or array (S)
    boundary : str or None
        Method for A; None takes the model's published choice.
    model : {'farrell1992', 'kienle1997'}

    Returns
    -------
    ndarray (S) [dimensionless]
        Fraction of the *incident* power reflected diffusely (entry loss inside, no specular
        part), as the Monte Carlo ``diffuse_reflectance``.

    References
    ----------
    Farrell et al. 1992, Med Phys 19:879; Kienle & Patterson 1997, J Opt Soc Am A 14:246.
    """
    choose(SRDR_MODELS, model, "srdr model")
    method = DEFAULT_BOUNDARY[model] if boundary is None else boundary
    medium = _medium(mua_per_mm, musp_per_mm, n, n_outside, method)
    near = np.exp(-medium.mueff * medium.z0)
    far = np.exp(-medium.mueff * (medium.z0 + 2.0 * medium.zb))
    flux_total = 0.5 * medium.albedo * (near + far)
    if model == "farrell1992":
        value = flux_total
    else:
        # ∫ Φ dA = a′/(2 D μeff) (near − far); its μeff → 0 limit is a′ 2 z_b / (2D) = 2 A a′.
        gap = 2.0 * medium.zb
        with np.errstate(divide="ignore", invalid="ignore"):
            ratio = np.where(
                medium.mueff > 0,
                -near * np.expm1(-medium.mueff * gap) / medium.mueff,
                gap,
            )
        fluence_total = medium.albedo / (2.0 * medium.d) * ratio
        value = medium.c1 * fluence_total + medium.c2 * flux_total
    value = np.asarray(medium.entry * value)
    return value[()] if value.ndim == 0 else value
