"""Chandrasekhar's H-function for isotropic scattering, and the exact reflectance it gives.

For a semi-infinite, index-matched medium that scatters isotropically with single-scattering
albedo ``a``, the radiative-transfer problem has an exact solution in terms of the
H-function (Chandrasekhar 1950, ch. V).  It is the project's exact reference for the
adding-doubling slab code and for the Monte Carlo engine.

The H-function is computed here, not tabulated: it solves the non-linear integral equation
(Chandrasekhar 1950, ch. V, the "alternative form" of the H-equation, which converges for
every albedo including a = 1)::

    1/H(μ) = √(1 − a) + (a/2) ∫₀¹ μ′ H(μ′) / (μ + μ′) dμ′

by fixed-point iteration on Gauss–Legendre nodes (Newton's method where that is slow,
near a = 1), then evaluated at any μ by the same equation (Nyström interpolation).

References
----------
Chandrasekhar S. 1950, *Radiative Transfer*, Oxford: Clarendon Press, ch. V (the
H-equation for isotropic scattering, its moments, and the law of diffuse reflection).
"""

from __future__ import annotations

from functools import lru_cache

import numpy as np

from phantomlab.errors import InputError

__all__ = [
    "h_function_isotropic",
    "semi_infinite_reflectance_isotropic",
    "semi_infinite_diffuse_incidence_reflectance_isotropic",
]

#: Gauss–Legendre nodes on [0, 1] used for the integral (default).  With 200 nodes the
#: zeroth-moment identity ∫H dμ = (2/a)(1 − √(1 − a)) holds to better than 1e-9 for a ≤ 1.
DEFAULT_NODES = 200

#: Fixed-point sweeps before Newton's method takes over (albedo close to 1).
_SWEEPS = 300


@lru_cache(maxsize=8)
def _nodes(count: int) -> tuple[np.ndarray, np.ndarray]:
    x, w = np.polynomial.legendre.leggauss(count)
    return 0.5 * (x + 1.0), 0.5 * w


def _albedo_array(albedo) -> np.ndarray:
    values = np.asarray(albedo, dtype=float)
    finite = values[np.isfinite(values)]
    if np.any(finite < 0.0) or np.any(finite > 1.0):
        raise InputError(f"albedo must lie in [0, 1], got {albedo!r}")
    return values


def _mu_array(mu, name: str = "mu") -> np.ndarray:
    values = np.asarray(mu, dtype=float)
    finite = values[np.isfinite(values)]
    if np.any(finite < 0.0) or np.any(finite > 1.0):
        raise InputError(f"{name} (cosine of the polar angle) must lie in [0, 1], got {mu!r}")
    return values


def _solve_on_nodes(albedo: np.ndarray, count: int) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """H at the quadrature nodes for each albedo; shapes (K,), (M,), (K, M).

    Fixed-point sweeps of the H-equation converge in tens of sweeps for a < 0.999; where
    they have not converged after :data:`_SWEEPS` (near a = 1 the iteration slows to a
    crawl), Newton's method on the discretised equation
    h_i (√(1 − a) + (a/2) Σ_j K_ij h_j) = 1 finishes quadratically.
    """
    x, w = _nodes(count)
    a = albedo.reshape(-1, 1)
    root = np.sqrt(1.0 - a)
    kernel = (x * w)[None, :] / (x[:, None] + x[None, :])  # [i, j] = w_j μ_j / (μ_i + μ_j)
    h = np.ones((a.shape[0], count))
    change = np.full(a.shape[0], np.inf)
    for _ in range(_SWEEPS):
        new = 1.0 / (root + 0.5 * a * (h @ kernel.T))
        change = np.max(np.abs(new - h), axis=1)
        h = new
        if np.all(change < 1e-14):
            break
    slow = change >= 1e-14
    if np.any(slow):
        h[slow] = _newton(h[slow], a[slow], root[slow], kernel)
    return x, w, h


def _newton(h: np.ndarray, a: np.ndarray, root: np.ndarray, kernel: np.ndarray) -> np.ndarray:
    eye = np.eye(kernel.shape[0])[None]
    for _ in range(50):
        bracket = root + 0.5 * a * (h @ kernel.T)
        residual = h * bracket - 1.0
        jacobian = eye * bracket[:, :, None] + 0.5 * a[:, :, None] * h[:, :, None] * kernel[None]
        step = np.linalg.solve(jacobian, residual[:, :, None])[:, :, 0]
        h = h - step
        if np.max(np.abs(step)) < 1e-14 * np.max(np.abs(h)):
            break
    return h


def h_function_isotropic(*, mu, albedo, nodes: int = DEFAULT_NODES):
    """Chandrasekhar's H-function for isotropic scattering.

    Parameters
    ----------
    mu : float or array [dimensionless]
        Cosine(s) of the polar angle, in [0, 1].
    albedo : float or array [dimensionless]
        Single-scattering albedo a = μs / (μa + μs), in [0, 1].
    nodes : int
        Gauss–Legendre nodes on [0, 1] for the integral.

    Returns
    -------
    ndarray
        H of shape ``albedo.shape + mu.shape`` (a float when both are scalars).  NaN in
        either input gives NaN in the matching entries.

    References
    ----------
    Chandrasekhar S. 1950, *Radiative Transfer*, ch. V (alternative form of the H-equation).
    """
    if int(nodes) < 8:
        raise InputError(f"nodes must be an integer >= 8, got {nodes!r}")
    a = _albedo_array(albedo)
    m = _mu_array(mu)
    flat_a = a.reshape(-1)
    good = np.isfinite(flat_a)
    out = np.full((flat_a.size,) + m.shape, np.nan)
    if np.any(good):
        x, w, h_nodes = _solve_on_nodes(flat_a[good], int(nodes))
        mm = m.reshape(-1)
        integral = (h_nodes * (x * w)[None, :]) @ (1.0 / (mm[None, :] + x[:, None]))
        # The H-equation: 1/H(μ) = √(1 − a) + (a/2) ∫ μ′H(μ′)/(μ + μ′) dμ′, evaluated at the wanted μ.
        values = 1.0 / (np.sqrt(1.0 - flat_a[good])[:, None] + 0.5 * flat_a[good][:, None] * integral)
        out[good] = values.reshape((-1,) + m.shape)
    result = out.reshape(a.shape + m.shape)
    return result[()] if result.ndim == 0 else result


def semi_infinite_reflectance_isotropic(*, albedo, mu0=1.0, nodes: int = DEFAULT_NODES):
    """Exact diffuse reflectance of an index-matched, isotropically scattering half-space.

    R(μ0) = 1 − H(μ0) √(1 − a) for a collimated beam whose direction makes cosine μ0 with
    the inward normal (normal incidence: μ0 = 1).  This is the fraction of the incident
    power that leaves the surface; there is no specular part (matched boundary).

    Parameters
    ----------
    albedo : float or array [dimensionless]
        Single-scattering albedo, in [0, 1].
    mu0 : float or array [dimensionless]
        Cosine of the angle of incidence, in [0, 1].

    Returns
    -------
    ndarray
        Shape ``albedo.shape + mu0.shape``.

    References
    ----------
    Chandrasekhar S. 1950, *Radiative Transfer*, ch. V (the law of diffuse reflection
    integrated over the emergent directions).
    """
    a = _albedo_array(albedo)
    h = np.asarray(h_function_isotropic(mu=mu0, albedo=a, nodes=nodes))
    root = np.sqrt(1.0 - a).reshape(a.shape + (1,) * np.ndim(mu0))
    result = 1.0 - h * root
    return result[()] if result.ndim == 0 else result


def semi_infinite_diffuse_incidence_reflectance_isotropic(*, albedo, nodes: int = DEFAULT_NODES):
    """Exact reflectance of the same half-space under diffuse (Lambertian) illumination.

    R = 2 ∫₀¹ R(μ0) μ0 dμ0 = 1 − 2 √(1 − a) ∫₀¹ H(μ) μ dμ (the flux-weighted average of
    :func:`semi_infinite_reflectance_isotropic`).

    Parameters
    ----------
    albedo : float or array [dimensionless]

    Returns
    -------
    ndarray of the shape of ``albedo``

    References
    ----------
    Chandrasekhar S. 1950, *Radiative Transfer*, ch. V.
    """
    a = _albedo_array(albedo)
    x, w = _nodes(int(nodes))
    h = np.asarray(h_function_isotropic(mu=x, albedo=a, nodes=nodes))
    first_moment = h @ (x * w)
    result = 1.0 - 2.0 * np.sqrt(1.0 - a) * first_moment
    return result[()] if np.ndim(result) == 0 else result
