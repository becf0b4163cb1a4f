"""Exact solution of the slab's discrete-ordinate equations by eigen-decomposition (layer 2).

The adding-doubling code (:mod:`phantomlab.transport.adding_doubling`) discretises the
azimuth-averaged transport equation of a homogeneous layer on N streams per hemisphere,

    dI⁺/dτ = −α I⁺ + β I⁻,     dI⁻/dτ = α I⁻ − β I⁺,
    α = M⁻¹ (1 − (a/2) H_same W),   β = M⁻¹ (a/2) H_opposite W,

(M = diag μ, W = diag w, a the delta-M albedo, H the redistribution matrices) and builds the
layer by doubling a thin diamond-scheme layer.  This module solves the *same* equations
exactly: with S = I⁺ + I⁻ and D = I⁺ − I⁻ they become d²D/dτ² = (α − β)(α + β) D, whose
eigenvalues k² are real and positive (Stamnes & Swanson 1981); the general solution is

    I⁺(τ) = G₁ e^{−Kτ} c − G₂ e^{−K(τ* − τ)} d,
    I⁻(τ) = G₂ e^{−Kτ} c − G₁ e^{−K(τ* − τ)} d,
    G₁ = (Y + X)/2,  G₂ = (Y − X)/2,  Y = (α + β) X K⁻¹,

with only decaying exponentials (numerically stable at any optical thickness), and the two
faces enter as boundary conditions — I⁺(0) = I_in + ρ_top I⁻(0), I⁻(τ*) = ρ_bottom I⁺(τ*),
ρ diagonal in the streams — so one 2N × 2N linear system per wavelength gives the light
leaving both faces.  The eigenproblem is made symmetric: α − β = M⁻¹ A W and α + β = M⁻¹ B W
with A = W⁻¹ − (a/2)(H_same + H_opposite) and B = W⁻¹ − (a/2)(H_same − H_opposite) symmetric;
with Ê = (W M⁻¹)^{1/2}, Â = Ê A Ê, B̂ = Ê B Ê = L Lᵀ (Cholesky), the eigenvectors are
X = W⁻¹ Ê L⁻ᵀ V where Lᵀ Â L = V K² Vᵀ.

The cost no longer grows with the optical thickness (no doublings), and it is about three
times lower than doubling at 24 streams; the two agree to ≈1e-8, the doubling's own
thin-layer error (``tests/transport/test_adding_doubling.py``).

References
----------
Chandrasekhar S 1950, *Radiative Transfer*, Oxford, ch. III (discrete ordinates).
Stamnes K, Swanson RA 1981, J Atmos Sci 38:387–399, doi:10.1175/1520-0469(1981)038<0387:ANLATD>2.0.CO;2
(the symmetric reduction of the eigenproblem, solutions with decaying exponentials only).
Stamnes K, Tsay SC, Wiscombe W, Jayaweera K 1988, Appl Opt 27:2502–2509,
doi:10.1364/AO.27.002502 (boundary conditions as one linear system; scaled exponentials).
"""

from __future__ import annotations

import numpy as np

__all__ = ["RESOLVED_EIGENVALUE_LIMIT", "faces_and_layer_response"]

#: Albedo ceiling: at a = 1 one eigenvalue is 0 and the two modes of that eigenvalue
#: coincide; 1 − 1e-12 keeps them apart and changes R and T by ≈1e-12 × path lengths.
_ALBEDO_CEILING = 1.0 - 1e-12
#: Largest eigenvalue k² [1/optical depth²] at which the decomposition is trusted.  k² grows
#: as 1/μ² of the most grazing stream (many streams, or a critical cosine near 0), and eigh's
#: absolute error, ≈ 1e-16 k²_max, then swamps the slowest mode (k² ≈ 3(1 − a)(1 − g), 1e-13
#: at the albedo ceiling): over 4752 cases (4–256 streams, n 1.0013–1.6, g 0–0.97, τ 0.1–300,
#: 1 − a from 0 to 0.5) the eigen and doubling solutions agreed within 2.5e-9 up to this
#: limit, while beyond it k² came out negative (R, T wrong by units) or off by up to 1e-4.
RESOLVED_EIGENVALUE_LIMIT = 3e8
#: Same leak as the adding code gives totally reflected streams (a stream trapped between two
#: totally reflecting faces of a clear layer would make the system singular).
_TRAPPED_LEAK = 1e-12


def faces_and_layer_response(mu, weights, albedo, tau, h_same, h_opposite, top_in, top_t,
                             bottom_in, bottom_t, entering):
    """Power leaving the top face and the bottom face for light entering the layer.

    Parameters
    ----------
    mu, weights : ndarray (W, N)
        Stream cosines and quadrature weights.
    albedo, tau : ndarray (W,)
        Delta-M scaled single-scattering albedo and optical thickness of the layer.
    h_same, h_opposite : ndarray (W, N, N)
        Redistribution matrices (:func:`phantomlab.transport.phase_function.hg_redistribution`).
    top_in, top_t, bottom_in, bottom_t : ndarray (W, N)
        Reflectance seen from inside and transmittance of the top and bottom faces.
    entering : ndarray (W, N)
        Power entering along each stream just below the top face (flux form).

    Returns
    -------
    (escaped_top, transmitted, resolved) : ndarrays (W,)
        Power leaving through the top face (from inside) and through the bottom face, and
        where the eigen-decomposition resolves every mode (all k² > 0 and at most
        :data:`RESOLVED_EIGENVALUE_LIMIT`); elsewhere the caller must solve another way.
    """
    count = mu.shape[-1]
    a = np.minimum(albedo, _ALBEDO_CEILING)[:, None, None]
    inverse_w = 1.0 / weights
    diagonal = inverse_w[:, :, None] * np.eye(count)[None]
    sum_h = h_same + h_opposite
    diff_h = h_same - h_opposite
    matrix_a = diagonal - 0.5 * a * sum_h
    matrix_b = diagonal - 0.5 * a * diff_h
    e = np.sqrt(weights / mu)
    a_hat = e[:, :, None] * matrix_a * e[:, None, :]
    b_hat = e[:, :, None] * matrix_b * e[:, None, :]
    lower = np.linalg.cholesky(b_hat)
    upper = np.ascontiguousarray(np.swapaxes(lower, 1, 2))
    k2, v = np.linalg.eigh(upper @ a_hat @ lower)
    resolved = (np.min(k2, axis=1) > 0.0) & (np.max(k2, axis=1) <= RESOLVED_EIGENVALUE_LIMIT)
    k = np.sqrt(np.maximum(k2, 1e-300))
    x = (e * inverse_w)[:, :, None] * np.linalg.solve(upper, v)  # W⁻¹ Ê L⁻ᵀ V
    # Y = (α + β) X K⁻¹, α + β = M⁻¹ B W
    y = (1.0 / mu)[:, :, None] * (matrix_b @ (weights[:, :, None] * x)) / k[:, None, :]
    g1 = 0.5 * (y + x)
    g2 = 0.5 * (y - x)
    scale = 1.0 / np.max(np.abs(g1), axis=1, keepdims=True)  # one scale per mode
    g1 = g1 * scale
    g2 = g2 * scale
    decay = np.exp(-k * tau[:, None])[:, None, :]  # e^{−K τ*}, applied to columns
    rho_top = np.minimum(top_in, 1.0 - _TRAPPED_LEAK)[:, :, None]
    rho_bottom = np.minimum(bottom_in, 1.0 - _TRAPPED_LEAK)[:, :, None]
    g1_decay = g1 * decay
    g2_decay = g2 * decay
    system = np.empty((mu.shape[0], 2 * count, 2 * count))
    system[:, :count, :count] = g1 - rho_top * g2
    system[:, :count, count:] = rho_top * g1_decay - g2_decay
    system[:, count:, :count] = g2_decay - rho_bottom * g1_decay
    system[:, count:, count:] = rho_bottom * g2 - g1
    rhs = np.zeros((mu.shape[0], 2 * count, 1))
    rhs[:, :count, 0] = entering / (mu * weights)  # flux → radiance
    # Rows whose modes are not resolved may give a singular system: solve a stand-in there.
    system[~resolved] = np.eye(2 * count)
    rhs[~resolved] = 0.0
    solution = np.linalg.solve(system, rhs)[:, :, 0]
    c, d = solution[:, :count], solution[:, count:]
    up_at_top = np.einsum("wij,wj->wi", g2, c) - np.einsum("wij,wj->wi", g1_decay, d)
    down_at_bottom = np.einsum("wij,wj->wi", g1_decay, c) - np.einsum("wij,wj->wi", g2, d)
    flux = mu * weights
    escaped_top = np.where(resolved, np.sum(top_t * flux * up_at_top, axis=1), np.nan)
    transmitted = np.where(resolved, np.sum(bottom_t * flux * down_at_bottom, axis=1), np.nan)
    return escaped_top, transmitted, resolved
