"""Angular Mie scattering of spheres and of size distributions, vectorised with numpy (layer 2).

The efficiencies of :mod:`phantomlab.optics.mie_series` integrate the scattered light over
all directions; the dependent-scattering model (:mod:`phantomlab.optics.dependent`) needs it
direction by direction, because the interference between neighbouring particles depends on
the scattering angle.  This module gives the scattering coefficients a_n, b_n of many
spheres at once, the amplitude functions S1, S2 on a grid of cos θ, and the differential
scattering cross-section of a size distribution.

Algorithm (Bohren & Huffman 1983): a_n, b_n by the same recurrences as
:mod:`~phantomlab.optics.mie_series` (logarithmic derivative downward, Riccati–Bessel
functions upward, BH eq. 4.88); the angular functions π_n, τ_n by upward recurrence (BH
eq. 4.47); S1, S2 as sums over n (BH eq. 4.74).  The π_n and τ_n do not depend on the
sphere, so each sum is one matrix product over all spheres.  Checked in the tests against
miepython's ``S1_S2`` (an independent registry package) and against the integrated
efficiencies (BH eq. 4.61).
"""

from __future__ import annotations

import numpy as np

from phantomlab.errors import InputError
from phantomlab.optics.mie_series import coefficient_orders, paired_arguments, series_length

__all__ = ["mie_coefficients", "angular_functions", "scattered_intensity", "ensemble_differential_cross_section",
           "angle_grid"]

#: Spheres per block of the angular sums (bounds the (spheres × angles) work arrays).
BLOCK = 2048


def mie_coefficients(m, x) -> tuple[np.ndarray, np.ndarray]:
    """Mie coefficients a_n, b_n of homogeneous spheres, n = 1 … n_max, for many (m, x).

    Parameters
    ----------
    m : complex or array (N,) [dimensionless]
        Relative refractive index, m = n − i k (absorbing: k > 0).
    x : float or array (N,) [dimensionless]
        Size parameter π d n_medium / λ₀, > 0.

    Returns
    -------
    a, b : ndarray (N, n_max) complex
        Column n − 1 holds a_n, b_n in Bohren & Huffman's convention; 0 past each sphere's
        own series length x + 4 x^(1/3) + 2 (Wiscombe 1980, eq. 1).

    References
    ----------
    1. Bohren, C. F. & Huffman, D. R. (1983). Absorption and Scattering of Light by Small
       Particles. Wiley. Eq. 4.88 and Appendix A.
    2. Wiscombe, W. J. (1980). Improved Mie scattering algorithms. Appl. Opt. 19(9), 1505–1509.
    """
    m, x = paired_arguments(m, x)
    if m.shape != x.shape or x.size == 0 or np.any(~np.isfinite(x)) or np.any(x <= 0):
        raise InputError("Mie coefficients: m and x must be equally long, x finite and > 0")
    m_bh = np.conj(m)  # BH write m = n + i k
    nmax = int(series_length(x).max())
    a = np.zeros((x.size, nmax), dtype=complex)
    b = np.zeros((x.size, nmax), dtype=complex)
    for n, a_n, b_n in coefficient_orders(m_bh, x):  # the efficiencies' own recurrence
        a[:, n - 1], b[:, n - 1] = a_n, b_n
    return a, b


def angular_functions(mu, nmax: int) -> tuple[np.ndarray, np.ndarray]:
    """π_n(cos θ) and τ_n(cos θ) for n = 1 … nmax (Bohren & Huffman 1983, eq. 4.47).

    Parameters
    ----------
    mu : array (A,) [dimensionless]
        cos θ of the scattering angles, in [−1, 1].
    nmax : int

    Returns
    -------
    pi, tau : ndarray (nmax, A)
    """
    mu = np.atleast_1d(np.asarray(mu, dtype=float))
    pi = np.zeros((nmax, mu.size))
    tau = np.zeros((nmax, mu.size))
    before, current = np.zeros_like(mu), np.ones_like(mu)  # π_0 = 0, π_1 = 1
    for n in range(1, nmax + 1):
        pi[n - 1] = current
        tau[n - 1] = n * mu * current - (n + 1) * before
        before, current = current, ((2 * n + 1) * mu * current - (n + 1) * before) / n
    return pi, tau


def scattered_intensity(m, x, mu) -> np.ndarray:
    """(|S1|² + |S2|²)/2 of each sphere at each cos θ (unpolarised light).

    Parameters
    ----------
    m : complex or array (N,)
        Relative index, n − i k.
    x : float or array (N,)
        Size parameter.
    mu : array (A,)
        cos θ.

    Returns
    -------
    ndarray (N, A) [dimensionless]
        S11 of Bohren & Huffman (eq. 4.77); the differential scattering cross-section is
        S11 / k² (k the wavenumber in the medium), and (2/x²) ∫ S11 dcos θ = Qsca (eq. 4.61).
    """
    a, b = mie_coefficients(m, x)
    nmax = a.shape[1]
    n = np.arange(1, nmax + 1)
    weight = (2 * n + 1) / (n * (n + 1))
    pi, tau = angular_functions(mu, nmax)
    s1 = (a * weight) @ pi + (b * weight) @ tau  # BH eq. 4.74
    s2 = (a * weight) @ tau + (b * weight) @ pi
    return 0.5 * (np.abs(s1) ** 2 + np.abs(s2) ** 2)


def angle_grid(largest_size_parameter: float, *, minimum: int = 256) -> tuple[np.ndarray, np.ndarray]:
    """Gauss–Legendre nodes and weights in cos θ for angular integrals of Mie scattering.

    The node count, max(minimum, 2 n_max + 64) with n_max the longest series, integrates
    the polynomial |S1|² + |S2|² (degree 2 n_max in cos θ) exactly and leaves room for a smooth
    factor such as a structure factor.

    Returns
    -------
    mu, weights : ndarray (A,)
    """
    nmax = int(series_length(np.array([float(largest_size_parameter)]))[0])
    count = max(int(minimum), 2 * nmax + 64)
    return np.polynomial.legendre.leggauss(count)


def ensemble_differential_cross_section(*, wavelength_nm, particle_index, matrix_index, diameters_um,
                                        number_weights, mu) -> np.ndarray:
    """Mean differential scattering cross-section of a size distribution [µm²/sr].

    Parameters
    ----------
    wavelength_nm : array (W,) [nm]
        Vacuum wavelengths.
    particle_index : complex or array (W,)
        n − i k of the particles.
    matrix_index : float or array (W,)
        Real index of the surrounding medium.
    diameters_um : array (D,) [µm]
    number_weights : array (D,)
        Number weight of each diameter (normalised here).
    mu : array (A,)
        cos θ.

    Returns
    -------
    ndarray (W, A) [µm²/sr]
        ⟨dCsca/dΩ⟩ = Σ_d w_d S11(d) / k² per particle; its integral over all directions is the
        mean cross-section ⟨Csca⟩ of :func:`~phantomlab.optics.mie.sphere_ensemble_optics`.
    """
    wavelength = np.atleast_1d(np.asarray(wavelength_nm, dtype=float))
    n_matrix = np.broadcast_to(np.asarray(matrix_index, dtype=float), wavelength.shape)
    n_particle = np.broadcast_to(np.asarray(particle_index, dtype=complex), wavelength.shape)
    d = np.atleast_1d(np.asarray(diameters_um, dtype=float))
    w = np.atleast_1d(np.asarray(number_weights, dtype=float))
    w = w / w.sum()
    mu = np.atleast_1d(np.asarray(mu, dtype=float))
    k_per_um = 2.0 * np.pi * n_matrix / (wavelength / 1000.0)  # wavenumber in the medium
    x = 0.5 * d[None, :] * k_per_um[:, None]  # (W, D)
    m = np.broadcast_to((n_particle / n_matrix)[:, None], x.shape)
    out = np.zeros((wavelength.size, mu.size))
    rows = max(1, BLOCK // d.size)
    for begin in range(0, wavelength.size, rows):
        block = slice(begin, begin + rows)
        s11 = scattered_intensity(m[block].ravel(), x[block].ravel(), mu).reshape(-1, d.size, mu.size)
        out[block] = np.einsum("wda,d->wa", s11, w) / k_per_um[block, None] ** 2
    return out
