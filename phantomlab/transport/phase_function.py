"""Azimuth-averaged Henyey–Greenstein redistribution with delta-M scaling (layer 2).

The Henyey–Greenstein phase function has Legendre moments χ_l = g^l.  With M moments kept,
delta-M scaling (Wiscombe 1977) moves the fraction f = g^M of the light into the forward
direction (treated as unscattered) and keeps the truncated series

    h(μ, μ′) = Σ_{l<M} (2l + 1) χ*_l P_l(μ) P_l(μ′),   χ*_l = (g^l − f)/(1 − f),

the phase function averaged over azimuth, normalised as (1/2) ∫₋₁¹ h(μ, μ′) dμ′ = 1.  The
scattering coefficient becomes μs* = μs (1 − f).  On a finite quadrature the normalisation
is restored by correcting the forward (diagonal) element of each column, which keeps h
symmetric.

References
----------
Henyey LG, Greenstein JL 1941, Astrophys J 93:70–83, doi:10.1086/144246.
Wiscombe WJ 1977, J Atmos Sci 34:1408–1422 (the delta-M method).
van de Hulst HC 1980, *Multiple Light Scattering*, vol. 1, Academic Press (azimuth
average of the phase function by the addition theorem of Legendre polynomials).
"""

from __future__ import annotations

import numpy as np

__all__ = ["delta_m_fraction", "hg_redistribution"]


def delta_m_fraction(g: np.ndarray, moments: int) -> np.ndarray:
    """Fraction f = g^M of the scattering put into the forward peak (Wiscombe 1977)."""
    return np.power(np.asarray(g, dtype=float), moments)


def _legendre_table(mu: np.ndarray, moments: int) -> np.ndarray:
    """P_l(μ) for l < moments; shape (W, moments, N)."""
    table = np.empty(mu.shape[:-1] + (moments,) + mu.shape[-1:])
    table[..., 0, :] = 1.0
    if moments > 1:
        table[..., 1, :] = mu
    for ell in range(2, moments):
        table[..., ell, :] = (
            (2 * ell - 1) * mu * table[..., ell - 1, :] - (ell - 1) * table[..., ell - 2, :]
        ) / ell
    return table


def hg_redistribution(mu: np.ndarray, weights: np.ndarray, g: np.ndarray, moments):
    """Redistribution matrices between quadrature directions, for each wavelength.

    Parameters
    ----------
    mu, weights : ndarray (W, N)
        Direction cosines in (0, 1] and their weights (sum 1) for each wavelength.
    g : ndarray (W,)
        Henyey–Greenstein anisotropy.
    moments : int or ndarray (W,) of int
        Legendre moments kept (M, per wavelength if an array); f = g^M goes into the
        forward peak.

    Returns
    -------
    (h_same, h_opposite, f)
        h_same[w, i, j] = h(μ_i, μ_j) (same hemisphere), h_opposite[w, i, j] = h(μ_i, −μ_j),
        each (W, N, N) and normalised on the quadrature; f (W,) the delta-M fraction.

    References
    ----------
    Wiscombe 1977, J Atmos Sci 34:1408 (delta-M); Henyey & Greenstein 1941.
    """
    g = np.asarray(g, dtype=float)
    kept = np.broadcast_to(np.asarray(moments, dtype=int), g.shape)
    f = delta_m_fraction(g, kept)
    ell = np.arange(int(kept.max()))
    with np.errstate(invalid="ignore", divide="ignore"):
        chi = (np.power(g[:, None], ell[None, :]) - f[:, None]) / (1.0 - f[:, None])
    chi = np.where(ell[None, :] < kept[:, None], chi, 0.0)
    chi[:, 0] = 1.0
    coefficient = (2 * ell + 1)[None, :] * chi  # (W, M)
    table = _legendre_table(mu, ell.size)  # (W, M, N)
    parity = np.where(ell % 2 == 0, 1.0, -1.0)
    weighted = coefficient[:, :, None] * table
    h_same = np.swapaxes(weighted, 1, 2) @ table
    h_opposite = np.swapaxes(weighted * parity[None, :, None], 1, 2) @ table
    # Energy: (1/2) Σ_i w_i [h(μ_i, μ_j) + h(−μ_i, μ_j)] = 1 for every incident j.
    column = 0.5 * np.einsum("wi,wij->wj", weights, h_same + h_opposite)
    index = np.arange(mu.shape[-1])
    h_same[:, index, index] += 2.0 * (1.0 - column) / weights
    return h_same, h_opposite, f
