"""numba kernels that turn a stored baseline into R(ρ) for other μa and μs.

A stored photon i has exit radius ρᵢ and path length Lᵢ at the reference (μa_ref, μs_ref).
For a target (μa, μs) with the same g and indices, lengths scale by s = μs_ref/μs and the
photon's weight is exp(−(μa s − μa_ref) Lᵢ) (see :mod:`.baseline`).  Both kernels work on
the stored (unscaled) lengths: a target annulus [a, b] holds the photons with
ρᵢ ∈ [a/s, b/s], and the absorption per stored length is c = μa s − μa_ref ≥ 0.
"""

from __future__ import annotations

import math

import numpy as np
from numba import njit, prange

__all__ = ["exact_sums", "table_sums", "total_sums"]


@njit(cache=True, parallel=True)
def exact_sums(radius_sorted, path_sorted, absorption, scale, lower, upper, sums, squares):
    """Σ exp(−c L) and Σ exp(−2 c L) over the photons of each (pair, annulus).

    radius_sorted, path_sorted : (M,) stored photons sorted by radius
    absorption, scale : (K,) c and s of each target pair
    lower, upper : (R,) annulus edges [mm] at the target
    sums, squares : (K, R) outputs
    """
    for k in prange(absorption.shape[0]):
        c = absorption[k]
        s = scale[k]
        for r in range(lower.shape[0]):
            start = np.searchsorted(radius_sorted, lower[r] / s, side="left")
            stop = np.searchsorted(radius_sorted, upper[r] / s, side="left")
            total = 0.0
            total_sq = 0.0
            for i in range(start, stop):
                w = math.exp(-c * path_sorted[i])
                total += w
                total_sq += w * w
            sums[k, r] = total
            squares[k, r] = total_sq


@njit(cache=True, parallel=True)
def total_sums(path, absorption, sums, squares):
    """Σ exp(−c L) and Σ exp(−2 c L) over every stored photon, for each c."""
    for k in prange(absorption.shape[0]):
        c = absorption[k]
        total = 0.0
        total_sq = 0.0
        for i in range(path.shape[0]):
            w = math.exp(-c * path[i])
            total += w
            total_sq += w * w
        sums[k] = total
        squares[k] = total_sq


@njit(cache=True)
def _cumulative_at(x, c, edges, cumulative, first_photon, radius_sorted, path_sorted):
    """Weight of the photons with radius < x: whole fine bins from the table, and the
    photons of the partly covered fine bin summed exactly."""
    last = edges.shape[0] - 1
    if x <= edges[0]:
        return 0.0
    if x >= edges[last]:
        return cumulative[last]
    i = np.searchsorted(edges, x, side="right") - 1
    total = cumulative[i]
    p = first_photon[i]
    stop = first_photon[i + 1]
    while p < stop and radius_sorted[p] < x:
        total += math.exp(-c * path_sorted[p])
        p += 1
    return total


@njit(cache=True, parallel=True)
def table_sums(
    absorption, scale, lower, upper, fine_edges, first_photon, radius_sorted, path_sorted,
    cell_bin, cell_count, cell_mean, cell_var, cell_low, sums,
):
    """:func:`exact_sums` (without the squares) from a (radius, path) cell table.

    Whole fine radial bins come from the cells: each holds the count, mean and variance of
    its photons' path lengths and the lower path edge of its bin, and its Σ exp(−c L) is
    taken as n exp(−c m + min(c² v/2, c (m − L_lo))) (second cumulant, bounded below by
    Jensen's inequality and above by exp(−c L_lo)).  The fine bin cut by an annulus edge
    is summed photon by photon (``first_photon[i]`` is the first sorted photon of fine
    bin i), so the radial edges are exact.
    """
    n_fine = fine_edges.shape[0] - 1
    for k in prange(absorption.shape[0]):
        c = absorption[k]
        s = scale[k]
        reach = upper.max() / s
        weights = np.zeros(n_fine)
        for j in range(cell_bin.shape[0]):
            b = cell_bin[j]
            if fine_edges[b] > reach:
                break
            m = cell_mean[j]
            correction = 0.5 * c * c * cell_var[j]
            bound = c * (m - cell_low[j])
            if correction > bound:
                correction = bound
            weights[b] += cell_count[j] * math.exp(-c * m + correction)
        cumulative = np.empty(n_fine + 1)
        cumulative[0] = 0.0
        for i in range(n_fine):
            cumulative[i + 1] = cumulative[i] + weights[i]
        for r in range(lower.shape[0]):
            high_value = _cumulative_at(upper[r] / s, c, fine_edges, cumulative, first_photon,
                                        radius_sorted, path_sorted)
            low_value = _cumulative_at(lower[r] / s, c, fine_edges, cumulative, first_photon,
                                       radius_sorted, path_sorted)
            sums[k, r] = high_value - low_value
