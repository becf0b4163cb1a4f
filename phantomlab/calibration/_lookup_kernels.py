"""numba kernels that read the time-resolved lookup's fine table (layer 3).

:meth:`phantomlab.calibration.mc_lookup_time.TimeResolvedLookup.point` reads ln F on a fine
uniform grid in (ln u, s) by Keys's cubic convolution (Keys 1981, IEEE Trans ASSP 29:1153,
a = −1/2) and weighs it by where the baseline's photons reach (a weight table read
bilinearly: 1 where they reach, 0 where they do not, and a smooth ramp from 0 to 1 about a
distance's first photons, :func:`~phantomlab.calibration.mc_lookup_time_table.front_ramp`).
A fit reads a few hundred points per curve at every step;
in numpy that is some twenty array operations whose fixed cost dominates.  This kernel does
the same arithmetic point by point, in the same order (across u first, once per row, then
along s), so its values equal the numpy path's to rounding.
"""

from __future__ import annotations

import cmath
import math

import numpy as np
from numba import njit

__all__ = ["read_rows", "read_curves", "transform_rows", "error_pair_block"]


@njit(cache=True)
def _keys(f):
    """Keys's weights of the nodes i−1, i, i+1, i+2 at fraction ``f`` ∈ [0, 1)."""
    f2 = f * f
    f3 = f2 * f
    return (-0.5 * f3 + f2 - 0.5 * f, 1.5 * f3 - 2.5 * f2 + 1.0, -1.5 * f3 + 2.0 * f2 + 0.5 * f, 0.5 * f3 - 0.5 * f2)


@njit(cache=True, inline="always")
def _read_point(smooth, inside, i, w0, w1, w2, w3, ib, fx, ls, s0, ds):
    """ln F at one point of a row (u's node i with Keys weights w, weight node ib with fraction fx) and
    the weight of the photons' reach there: cubic convolution across u first (the numpy path's
    per-row profile), then along s; the weight bilinear."""
    cols = smooth.shape[1]
    y = min(max((ls - s0) / ds, 1.0), cols - 2.000001)
    j = int(y)
    v0, v1, v2, v3 = _keys(y - j)
    p0 = w0 * smooth[i - 1, j - 1] + w1 * smooth[i, j - 1] + w2 * smooth[i + 1, j - 1] + w3 * smooth[i + 2, j - 1]
    p1 = w0 * smooth[i - 1, j] + w1 * smooth[i, j] + w2 * smooth[i + 1, j] + w3 * smooth[i + 2, j]
    p2 = w0 * smooth[i - 1, j + 1] + w1 * smooth[i, j + 1] + w2 * smooth[i + 1, j + 1] + w3 * smooth[i + 2, j + 1]
    p3 = w0 * smooth[i - 1, j + 2] + w1 * smooth[i, j + 2] + w2 * smooth[i + 1, j + 2] + w3 * smooth[i + 2, j + 2]
    value = p0 * v0 + p1 * v1 + p2 * v2 + p3 * v3
    yb = min(max((ls - s0) / ds, 0.0), cols - 1.000001)
    jb = int(yb)
    fy = yb - jb
    top = inside[ib, jb] * (1 - fy) + inside[ib, jb + 1] * fy
    bottom = inside[ib + 1, jb] * (1 - fy) + inside[ib + 1, jb + 1] * fy
    return value, top * (1 - fx) + bottom * fx


@njit(cache=True)
def read_rows(smooth, inside, lu_row, ls, lu0, s0, du, ds, out):
    """exp(ln F) times the reach weight at (ln u of each row, s of each point), 0 where the photons do not reach.

    Parameters
    ----------
    smooth, inside : float64 (U, S)
        ln F (smooth continuation beyond the photons) and the weight of where they reach (0–1).
    lu_row : float64 (N,)
        ln u of each row (one distance and μs per row).
    ls : float64 (N, L)
        s = ln(τ/u²) of each point.
    lu0, s0, du, ds : float
        Origins and steps of the grid in ln u and s.
    out : float64 (N, L)
        Filled with F (ln F clipped to ±700 before the exponential).
    """
    rows = smooth.shape[0]
    for n in range(lu_row.shape[0]):
        x = min(max((lu_row[n] - lu0) / du, 1.0), rows - 2.000001)
        i = int(x)
        w0, w1, w2, w3 = _keys(x - i)
        xb = min(max((lu_row[n] - lu0) / du, 0.0), rows - 1.000001)
        ib = int(xb)
        fx = xb - ib
        for k in range(ls.shape[1]):
            value, lit = _read_point(smooth, inside, i, w0, w1, w2, w3, ib, fx, ls[n, k], s0, ds)
            if lit > 0.0:
                out[n, k] = lit * math.exp(min(max(value, -700.0), 700.0))
            else:
                out[n, k] = 0.0


@njit(cache=True)
def read_curves(smooth, inside, lu0, s0, du, ds, v, mua, mus, rho, t, u_range, tau_max, s_range, out):
    """R(ρ, t) = μs³ v F(ρμs, v t μs) e^(−μa v t) of whole curves, one distance per row, in one pass.

    The arithmetic of :meth:`TimeResolvedLookup.point` (its scaling, the table's reach, the
    read of :func:`read_rows` and the Beer–Lambert weight) point by point, in the same order.

    Parameters
    ----------
    smooth, inside : float64 (U, S)
        As for :func:`read_rows`.
    lu0, s0, du, ds : float
        Origins and steps of the grid in ln u and s.
    v : float [mm/ps]
        Speed of light in the medium.
    mua, mus, rho : float64 (N,) [1/mm], [1/mm], [mm]
        Each row's absorption, scattering and distance.
    t : float64 (N, L) [ps]
        Each row's times.
    u_range : (float, float)
        The table's first and last node in u (no light reported beyond).
    tau_max : float
        The longest stored path in scattering lengths.
    s_range : (float, float)
        The table's first and last node in s.
    out : float64 (N, L)
        Filled with R [1/(mm² ps)] (0 outside the table's reach and for t <= 0).
    """
    rows = smooth.shape[0]
    for n in range(rho.shape[0]):
        u = rho[n] * mus[n]
        if not (u > 0.0 and u_range[0] <= u <= u_range[1]):
            for k in range(t.shape[1]):
                out[n, k] = 0.0
            continue
        lu = math.log(u)
        x = min(max((lu - lu0) / du, 1.0), rows - 2.000001)
        i = int(x)
        w0, w1, w2, w3 = _keys(x - i)
        xb = min(max((lu - lu0) / du, 0.0), rows - 1.000001)
        ib = int(xb)
        fx = xb - ib
        scale = mus[n] ** 3 * v
        for k in range(t.shape[1]):
            tau = v * t[n, k] * mus[n]
            ls = math.log(tau) - 2.0 * lu if tau > 0.0 else 0.0
            if not (tau > 0.0 and tau <= tau_max and s_range[0] <= ls <= s_range[1]):
                out[n, k] = 0.0
                continue
            value, lit = _read_point(smooth, inside, i, w0, w1, w2, w3, ib, fx, ls, s0, ds)
            if lit > 0.0:
                out[n, k] = lit * scale * math.exp(min(max(value, -700.0), 700.0)) * math.exp(-mua[n] * v * t[n, k])
            else:
                out[n, k] = 0.0


@njit(cache=True)
def transform_rows(smooth, inside, lu0, du, s_nodes, weights, tau_max, u_range, v, mua, mus, u, omega, out):
    """The lookup's Fourier transform R̃ = μs² Σ_c F(u, τ_c) e^(−(μa + iω/v) τ_c/μs) τ_c w_c, one pass.

    The arithmetic of :meth:`TimeResolvedLookup.frequency_domain` (a row of the fine table at
    each u by cubic convolution in ln u, weighed by the photons' reach (linear in ln u) and cut
    at the longest path, the trapezoid in ln τ) point by point.

    Parameters
    ----------
    smooth, inside : float64 (U, C)
        ln F and the reach weight (0–1) on the columns that hold light.
    lu0, du : float
        Origin and step of the fine grid in ln u.
    s_nodes, weights : float64 (C,)
        The columns' s = ln(τ/u²) and their trapezoid weights in ln τ.
    tau_max : float
        The longest stored path in scattering lengths.
    u_range : (float, float)
        The table's first and last node in u.
    v : float [mm/ps]
    mua, mus : float64 (N,) [1/mm]
    u : float64 (N, G)
        ρμs of each output.
    omega : float64 (G,) [rad/ps]
    out : complex128 (N, G)
    """
    rows = smooth.shape[0]
    for n in range(u.shape[0]):
        for g in range(u.shape[1]):
            uu = u[n, g]
            if not (u_range[0] <= uu <= u_range[1]):
                out[n, g] = 0.0
                continue
            log_u = math.log(uu)
            x = min(max((log_u - lu0) / du, 1.0), rows - 2.000001)
            i = int(x)
            fx = x - i
            w0, w1, w2, w3 = _keys(fx)
            rate = complex(mua[n], omega[g] / v) / mus[n]
            total = 0.0j
            for c in range(s_nodes.shape[0]):
                lit = (1.0 - fx) * inside[i, c] + fx * inside[i + 1, c]
                if lit <= 0.0:
                    continue
                tau = math.exp(s_nodes[c] + 2.0 * log_u)
                if tau > tau_max:
                    continue
                value = w0 * smooth[i - 1, c] + w1 * smooth[i, c] + w2 * smooth[i + 1, c] + w3 * smooth[i + 2, c]
                total += lit * math.exp(min(max(value, -700.0), 700.0)) * cmath.exp(-rate * tau) * tau * weights[c]
            out[n, g] = mus[n] ** 2 * total


#: Kernel products below e^(−40) of their peak are left out of :func:`error_pair_block`
#: (4e-18: nothing a float64 sum of order one keeps).
_PAIR_CUT = 80.0


@njit(cache=True)
def error_pair_block(noise_a, bias_a, noise_b, bias_b, log_t, width_a, width_b, shift, out):
    """One distance pair's block of the fd lookup's error covariance, (M, M) into ``out``.

    Σᵢⱼ noise_a[:, i] Kᵢⱼ noise_b[:, j]ᵀ + the same for the bias rows, with Kᵢⱼ the overlap of
    two Gaussian smoothing kernels of widths aᵢ, bⱼ a distance d = ln tᵢ − ln tⱼ − ``shift``
    apart in s, √(2aᵢbⱼ/(aᵢ² + bⱼ²)) exp(−d²/(2(aᵢ² + bⱼ²)))
    (:meth:`~phantomlab.calibration.mc_lookup_time.TimeResolvedLookup.transform_error_covariance`;
    the dense (T, T) matrix in numpy is the reference of tests/calibration/test_mc_lookup_time.py).
    Pairs whose kernel is below e^(−40) of its peak are skipped.
    """
    m_rows, times = noise_a.shape
    widest_b = 0.0
    for j in range(times):
        widest_b = max(widest_b, width_b[j])
    carried_noise = np.zeros((times, m_rows))
    carried_bias = np.zeros((times, m_rows))
    for i in range(times):
        a = width_a[i]
        reach = _PAIR_CUT * (a * a + widest_b * widest_b)
        for j in range(times):
            d = log_t[i] - log_t[j] - shift
            if d * d > reach:
                continue
            b = width_b[j]
            pair = a * a + b * b
            k = math.sqrt(2.0 * a * b / pair) * math.exp(-d * d / (2.0 * pair))
            for q in range(m_rows):
                carried_noise[i, q] += k * noise_b[q, j]
                carried_bias[i, q] += k * bias_b[q, j]
    for p in range(m_rows):
        for q in range(m_rows):
            total = 0.0
            for i in range(times):
                total += noise_a[p, i] * carried_noise[i, q] + bias_a[p, i] * carried_bias[i, q]
            out[p, q] = total
