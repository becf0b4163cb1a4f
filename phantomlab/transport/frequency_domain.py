"""Frequency-domain diffusion reflectance of a half-space (layer 2).

A source whose power is modulated at frequency f (ω = 2πf) gives, at distance ρ on the
surface, a modulated reflectance R̃(ρ, ω) = ∫₀^∞ R(ρ, t) e^(−iωt) dt: the Fourier transform
of the time-resolved reflectance of :mod:`phantomlab.transport.time_domain`.  Its modulus is
the AC amplitude per unit AC power incident [1/mm²]; the phase lag is φ = −arg R̃ (positive,
growing with ρ).  Transforming the image sources term by term replaces μa by μa + iω/v in
the steady-state solutions, with the complex wave number

    k = √((μa + iω/v)/D),   Re k > 0,   D = 1/(3μs′),  v = c/n,

(Fishkin & Gratton 1993 for the infinite medium; Haskell et al. 1994 for the half-space with
the extrapolated boundary and the fluence-plus-flux reflectance), giving at the surface

    Φ̃(ρ) = (1/(4πD)) [e^(−k r₁)/r₁ − e^(−k r₂)/r₂]
    J̃(ρ) = (1/(4π)) [z0 (k + 1/r₁) e^(−k r₁)/r₁² + (z0 + 2z_b)(k + 1/r₂) e^(−k r₂)/r₂²]

with r₁² = ρ² + z0², r₂² = ρ² + (z0 + 2z_b)², z0 = 1/μs′, z_b = 2AD.  Models
(:data:`FD_MODELS`, the transforms of the time-domain models of the same name):

* ``kienle1997`` (default) — R̃ = T (C1 Φ̃ + C2 J̃), C1 = (1 − R_φ)/4, C2 = (1 − R_j)/2 (the
  partial-current combination of Haskell et al. 1994, Kienle & Patterson 1997);
* ``contini1997`` — R̃ = T J̃ (the flux alone).

``boundary`` chooses A as for ``srdr`` (``haskell1994`` or ``groenhuis1983``).  T is the
Fresnel transmission of the normally incident beam (per unit *incident* power, the project's
convention).  At f = 0 the amplitude is the time integral of the time-resolved model and the
phase is 0.  D = 1/(3μs′) (not 1/(3μt′) as in the steady-state ``srdr`` models) so that the
frequency-domain values are exactly the transform of the time-domain ones (tested).

References
----------
Fishkin JB, Gratton E 1993, J Opt Soc Am A 10:127–140, doi:10.1364/JOSAA.10.000127.
Haskell RC et al. 1994, J Opt Soc Am A 11:2727–2741, doi:10.1364/JOSAA.11.002727.
Kienle A, Patterson MS 1997, J Opt Soc Am A 14:246–254, doi:10.1364/JOSAA.14.000246.
"""

from __future__ import annotations

import math
from typing import Callable

import numpy as np

from phantomlab.errors import InputError
from phantomlab.transport.arguments import as_coefficient, as_index, as_length_grid, as_spectral, choose
from phantomlab.transport.boundary import (
    beam_entry_transmission,
    boundary_coefficient,
    fluence_flux_coefficients_Kienle1997,
)
from phantomlab.transport.diffusion_validity import warn_scattering_dominance
from phantomlab.transport.time_domain_images import SPEED_OF_LIGHT_MM_PER_PS

__all__ = [
    "FD_MODELS",
    "FD_DEFAULT_BOUNDARY",
    "frequency_domain_reflectance",
    "fd_diffusion_Kienle1997",
    "fd_diffusion_Contini1997",
    "amplitude_and_phase",
    "angular_frequency_per_ps",
]

#: The boundary method each model is used with by default.
FD_DEFAULT_BOUNDARY = {"kienle1997": "haskell1994", "contini1997": "haskell1994"}


def angular_frequency_per_ps(frequency_mhz) -> np.ndarray:
    """ω [rad/ps] of a modulation frequency f [MHz]: 2π f · 10⁻⁶."""
    return 2.0 * math.pi * np.asarray(frequency_mhz, dtype=float) * 1.0e-6


def _terms(mua_per_mm, musp_per_mm, rho_mm, frequency_mhz, n, n_outside, boundary):
    mua = as_coefficient(mua_per_mm, "mua_per_mm")
    musp = as_coefficient(musp_per_mm, "musp_per_mm", strictly_positive=True)
    n_arr = as_index(n, "n")
    n_out = as_index(n_outside, "n_outside")
    mua, musp, n_arr, n_out = as_spectral(mua_per_mm=mua, musp_per_mm=musp, n=n_arr, n_outside=n_out)
    warn_scattering_dominance(mua, musp, stacklevel=3)
    rho = as_length_grid(rho_mm, "rho_mm")
    freq = as_length_grid(frequency_mhz, "frequency_mhz", "MHz")
    try:
        grid_rho, grid_f = np.broadcast_arrays(rho, freq)
    except ValueError:
        raise InputError(f"rho_mm {rho.shape} and frequency_mhz {freq.shape} must broadcast to one grid") from None
    extra = (None,) * grid_rho.ndim

    def spread(values):
        return np.asarray(values)[(Ellipsis,) + extra]

    lead = (None,) * mua.ndim
    r = grid_rho[lead + (Ellipsis,)]
    omega = angular_frequency_per_ps(grid_f)[lead + (Ellipsis,)]
    d = spread(1.0 / (3.0 * musp))
    z0 = spread(1.0 / musp)
    a_coef = spread(boundary_coefficient(n=n_arr, n_outside=n_out, method=boundary))
    zp = z0 + 4.0 * a_coef * d
    v = spread(SPEED_OF_LIGHT_MM_PER_PS / n_arr)
    k = np.sqrt((spread(mua) + 1j * omega / v) / d)  # principal root: Re k >= 0
    r1 = np.sqrt(r * r + z0 * z0)
    r2 = np.sqrt(r * r + zp * zp)
    e1 = np.exp(-k * r1)
    e2 = np.exp(-k * r2)
    fluence = (e1 / r1 - e2 / r2) / (4.0 * math.pi * d)
    flux = (z0 * (k + 1.0 / r1) * e1 / (r1 * r1) + zp * (k + 1.0 / r2) * e2 / (r2 * r2)) / (4.0 * math.pi)
    entry = spread(beam_entry_transmission(n=n_arr, n_outside=n_out))
    return fluence, flux, entry, spread, n_arr, n_out


def fd_diffusion_Contini1997(*, mua_per_mm, musp_per_mm, rho_mm, frequency_mhz, n, n_outside=1.0,
                             boundary="haskell1994"):
    """Complex frequency-domain reflectance T·J̃(ρ, ω): the transform of ``contini1997`` (half-space).

    Parameters
    ----------
    mua_per_mm, musp_per_mm : float or array (S) [1/mm]
    rho_mm : float or array [mm]
        Source–detector distances; broadcast with ``frequency_mhz`` into the grid G.
    frequency_mhz : float or array [MHz]
        Modulation frequencies (>= 0).
    n, n_outside : float or array (S)
    boundary : {'haskell1994', 'groenhuis1983'}

    Returns
    -------
    ndarray of complex (S + G) [1/mm²]
        ∫ R(ρ, t) e^(−iωt) dt per unit incident power (entry loss inside, specular excluded).

    References
    ----------
    Contini et al. 1997, Appl Opt 36:4587 (the time-domain flux); Haskell et al. 1994, J Opt
    Soc Am A 11:2727 (its frequency-domain form).
    """
    _, flux, entry, _, _, _ = _terms(mua_per_mm, musp_per_mm, rho_mm, frequency_mhz, n, n_outside, boundary)
    value = entry * flux
    return value[()] if value.ndim == 0 else value


def fd_diffusion_Kienle1997(*, mua_per_mm, musp_per_mm, rho_mm, frequency_mhz, n, n_outside=1.0,
                            boundary="haskell1994"):
    """Complex frequency-domain reflectance T (C1 Φ̃ + C2 J̃): the transform of ``kienle1997``.

    Parameters
    ----------
    As :func:`fd_diffusion_Contini1997`.

    Returns
    -------
    ndarray of complex (S + G) [1/mm²]

    References
    ----------
    Haskell et al. 1994, J Opt Soc Am A 11:2727; Kienle & Patterson 1997, J Opt Soc Am A 14:246.
    """
    fluence, flux, entry, spread, n_arr, n_out = _terms(mua_per_mm, musp_per_mm, rho_mm, frequency_mhz, n,
                                                       n_outside, boundary)
    c1, c2 = fluence_flux_coefficients_Kienle1997(n=n_arr, n_outside=n_out)
    value = entry * (spread(c1) * fluence + spread(c2) * flux)
    return value[()] if value.ndim == 0 else value


#: Registry of frequency-domain diffusion models (name → function returning complex R̃).
FD_MODELS: dict[str, Callable] = {
    "kienle1997": fd_diffusion_Kienle1997,
    "contini1997": fd_diffusion_Contini1997,
}


def frequency_domain_reflectance(*, mua_per_mm, musp_per_mm, rho_mm, frequency_mhz, n, n_outside=1.0,
                                 model="kienle1997", boundary=None):
    """Complex frequency-domain reflectance of a half-space by a named model.

    Parameters
    ----------
    mua_per_mm, musp_per_mm : float or array (S) [1/mm]
    rho_mm : float or array [mm]
    frequency_mhz : float or array [MHz]
    n, n_outside : float or array (S)
    model : {'kienle1997', 'contini1997'}
        See :data:`FD_MODELS`; an unknown name is refused with the valid list.
    boundary : {'haskell1994', 'groenhuis1983'} or None
        Method for A (None: :data:`FD_DEFAULT_BOUNDARY`).

    Returns
    -------
    ndarray of complex (S + G) [1/mm²]
        Use :func:`amplitude_and_phase` for ``amplitude_per_mm2`` and ``phase_deg``.
    """
    function = choose(FD_MODELS, model, "frequency-domain model")
    method = FD_DEFAULT_BOUNDARY[model] if boundary is None else boundary
    return function(mua_per_mm=mua_per_mm, musp_per_mm=musp_per_mm, rho_mm=rho_mm,
                    frequency_mhz=frequency_mhz, n=n, n_outside=n_outside, boundary=method)


def amplitude_and_phase(*, mua_per_mm, musp_per_mm, rho_mm, frequency_mhz, n, n_outside=1.0,
                        model="kienle1997", boundary=None) -> tuple[np.ndarray, np.ndarray]:
    """AC amplitude [1/mm²] and phase lag [degrees] of :func:`frequency_domain_reflectance`.

    The phase lag is −arg R̃ (the transform uses e^(−iωt)), positive for a delayed signal and
    not wrapped into ±180°: it is taken as Im(k) r₁ − arg(R̃ e^(i Im(k) r₁)), the propagation
    phase of the direct source plus the small remainder, so it grows continuously with ρ and f.

    Returns
    -------
    (ndarray, ndarray)
        ``amplitude_per_mm2`` and ``phase_deg``, each of shape S + G.
    """
    value = np.asarray(frequency_domain_reflectance(
        mua_per_mm=mua_per_mm, musp_per_mm=musp_per_mm, rho_mm=rho_mm, frequency_mhz=frequency_mhz, n=n,
        n_outside=n_outside, model=model, boundary=boundary))
    mua, musp, n_arr = (np.asarray(x, float) for x in np.broadcast_arrays(
        np.asarray(mua_per_mm, float), np.asarray(musp_per_mm, float), np.asarray(n, float)))
    grid_rho, grid_f = np.broadcast_arrays(np.asarray(rho_mm, float), np.asarray(frequency_mhz, float))
    extra = (None,) * grid_rho.ndim
    lead = (None,) * mua.ndim
    d = (1.0 / (3.0 * musp))[(Ellipsis,) + extra]
    v = (SPEED_OF_LIGHT_MM_PER_PS / n_arr)[(Ellipsis,) + extra]
    omega = angular_frequency_per_ps(grid_f)[lead + (Ellipsis,)]
    k = np.sqrt((mua[(Ellipsis,) + extra] + 1j * omega / v) / d)
    r1 = np.sqrt(grid_rho[lead + (Ellipsis,)] ** 2 + (3.0 * d) ** 2)
    reference = np.imag(k) * r1
    lag = reference - np.angle(value * np.exp(1j * reference))
    return np.abs(value), np.degrees(lag)
