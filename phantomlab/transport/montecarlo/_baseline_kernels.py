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

__all__ = ["exact_sums", "table_sums", "table_sums_serial", "total_sums"]


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
def _cumulative_at(x, edges, cumulative, weights):
    """Weight of the photons with radius < x: whole fine bins, plus the share of the fine bin
    that x cuts, taken as uniform per unit area inside it (continuous in x, so a fit's
    finite-difference derivatives see no steps)."""
    last = edges.shape[0] - 1
    if x <= edges[0]:
        return 0.0
    if x >= edges[last]:
        return cumulative[last]
    i = np.searchsorted(edges, x, side="right") - 1
    lo = edges[i]
    hi = edges[i + 1]
    return cumulative[i] + weights[i] * (x * x - lo * lo) / (hi * hi - lo * lo)


@njit(cache=True)
def _table_one(c, s, lower, upper, fine_edges, cell_bin, cell_count, cell_mean, cell_var,
               cell_low, out):
    n_fine = fine_edges.shape[0] - 1
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
        high_value = _cumulative_at(upper[r] / s, fine_edges, cumulative, weights)
        low_value = _cumulative_at(lower[r] / s, fine_edges, cumulative, weights)
        out[r] = high_value - low_value


@njit(cache=True, parallel=True)
def table_sums(
    absorption, scale, lower, upper, fine_edges, cell_bin, cell_count, cell_mean, cell_var,
    cell_low, sums,
):
    """:func:`exact_sums` (without the squares) from a (radius, path) cell table.

    Each cell holds the count, mean and variance of its photons' path lengths and the lower
    path edge of its bin; its Σ exp(−c L) is taken as n exp(−c m + min(c² v/2, c (m − L_lo)))
    (second cumulant, bounded below by Jensen's inequality and above by exp(−c L_lo)).
    Cells are sorted by fine radial bin, so the loop stops past the farthest annulus.
    Parallel over the (μa, μs) pairs.
    """
    for k in prange(absorption.shape[0]):
        _table_one(absorption[k], scale[k], lower, upper, fine_edges, cell_bin, cell_count,
                   cell_mean, cell_var, cell_low, sums[k])


@njit(cache=True)
def table_sums_serial(
    absorption, scale, lower, upper, fine_edges, cell_bin, cell_count, cell_mean, cell_var,
    cell_low, sums,
):
    """:func:`table_sums` on one thread (few pairs: no thread start-up and join)."""
    for k in range(absorption.shape[0]):
        _table_one(absorption[k], scale[k], lower, upper, fine_edges, cell_bin, cell_count,
                   cell_mean, cell_var, cell_low, sums[k])
