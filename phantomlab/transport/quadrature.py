"""Angular quadratures for the adding-doubling slab code (layer 2).

Gauss–Legendre and Gauss–Radau rules on an interval of direction cosines, and the split
rule used at an index-mismatched surface: Gauss on [0, μc] (directions totally reflected
inside the slab) and Radau on [μc, 1] with the fixed node at μ = 1 (the direction of a
normally incident collimated beam), so that the Fresnel kink at the critical cosine μc
falls between the two rules.

References
----------
Abramowitz M, Stegun IA 1964, *Handbook of Mathematical Functions*, §25.4.29 (Gauss–Legendre)
and §25.4.31 (Radau: interior nodes are the roots of (P_{N−1} + P_N)/(1 + x), weights
(1 − x)/(N² P_{N−1}(x)²), end weight 2/N²).
Prahl SA 1995, "The adding-doubling method", in Welch AJ, van Gemert MJC (eds),
*Optical-Thermal Response of Laser-Irradiated Tissue*, Plenum, ch. 5 (the split rule at
the critical angle).
"""

from __future__ import annotations

from functools import lru_cache

import numpy as np
from numpy.polynomial import legendre

from phantomlab.errors import InputError

__all__ = ["gauss_rule", "radau_rule", "slab_quadrature", "SPLIT_MIN_CRITICAL_COSINE", "uses_split_rule"]

#: Below this critical cosine the split rule is not used: the face is treated as matched for
#: the quadrature, and the totally reflected cone (μc² ≤ 1e-6 of a diffuse flux) is ignored.
#: Measured against 256 streams at μc = 1.4e-3 (n/n_outside = 1 + 1e-6), the default
#: streams miss the Fresnel rise just above μc by 3e-6 of the incident power unsplit and
#: 5e-7 split; with the threshold at 0.05 the unsplit miss reached 2.5e-4 (n/n_outside =
#: 1.001).  The tiny Gauss nodes of a split at small μc are solved by doubling where the
#: eigen-decomposition cannot resolve them (discrete_ordinates).  A face matched up to
#: rounding (n = 1 + 2e-16, μc = 2e-8) stays unsplit.
SPLIT_MIN_CRITICAL_COSINE = 1e-3


def uses_split_rule(mu_critical) -> np.ndarray:
    """Where :func:`slab_quadrature` splits at the critical cosine (bool, shape of the input)."""
    return np.asarray(mu_critical, dtype=float) > SPLIT_MIN_CRITICAL_COSINE


@lru_cache(maxsize=32)
def gauss_rule(count: int) -> tuple[np.ndarray, np.ndarray]:
    """Gauss–Legendre nodes and weights on [0, 1] (ascending)."""
    x, w = legendre.leggauss(count)
    return 0.5 * (x + 1.0), 0.5 * w


@lru_cache(maxsize=32)
def radau_rule(count: int) -> tuple[np.ndarray, np.ndarray]:
    """Gauss–Radau nodes and weights on [0, 1] with the fixed node at 1 (ascending).

    Abramowitz & Stegun 1964, §25.4.31 (rule with the fixed node at −1, mirrored here).
    """
    if count < 2:
        raise InputError(f"a Radau rule needs at least 2 nodes, got {count}")
    coefficients = np.zeros(count + 1)
    coefficients[count - 1] = 1.0
    coefficients[count] = 1.0
    roots = np.sort(legendre.legroots(coefficients).real)
    interior = roots[1:]  # drop the root at x = −1
    # Newton polish on P_{N−1} + P_N.
    for _ in range(3):
        value = legendre.legval(interior, coefficients)
        slope = legendre.legval(interior, legendre.legder(coefficients))
        interior = interior - value / slope
    p_prev = legendre.legval(interior, np.eye(count)[count - 1])
    weights_interior = (1.0 - interior) / (count**2 * p_prev**2)
    x = np.concatenate(([-1.0], interior))
    w = np.concatenate(([2.0 / count**2], weights_interior))
    # Mirror to fix the node at +1, then map [−1, 1] → [0, 1].
    x, w = -x[::-1], w[::-1]
    return 0.5 * (x + 1.0), 0.5 * w


def slab_quadrature(mu_critical: np.ndarray, count: int) -> tuple[np.ndarray, np.ndarray]:
    """Direction cosines and weights for each wavelength, shape (W, count).

    Where ``mu_critical`` is 0 (no total internal reflection) or below
    :data:`SPLIT_MIN_CRITICAL_COSINE`, a Radau rule of ``count`` nodes on [0, 1]; elsewhere Gauss on [0, μc] with ``count // 2`` nodes and Radau on
    [μc, 1] with the rest, in the variable s of μ = μc + (1 − μc) s² (which removes the
    square-root kink of the Fresnel transmission at μc).  The last node is always μ = 1.
    """
    mu_c = np.atleast_1d(np.asarray(mu_critical, dtype=float))
    if count < 4 or count % 2:
        raise InputError(f"quadrature_points must be an even integer >= 4, got {count}")
    full_x, full_w = radau_rule(count)
    low_x, low_w = gauss_rule(count // 2)
    high_x, high_w = radau_rule(count - count // 2)
    split = uses_split_rule(mu_c)[:, None]
    c = mu_c[:, None]
    # Above μc the Fresnel transmission grows like √(μ − μc): the Radau rule is applied in
    # s with μ = μc + (1 − μc) s², which makes that kink smooth (and keeps the node μ = 1).
    sx = high_x[None, :]
    split_mu = np.concatenate([c * low_x[None, :], c + (1.0 - c) * sx * sx * (2.0 - sx)], axis=1)
    split_w = np.concatenate(
        [c * low_w[None, :], (1.0 - c) * sx * (4.0 - 3.0 * sx) * high_w[None, :]], axis=1
    )
    mu = np.where(split, split_mu, full_x[None, :])
    w = np.where(split, split_w, full_w[None, :])
    return mu, w
