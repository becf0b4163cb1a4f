"""numba kernel of the td starting grid's shift scan (layer 3).

:func:`phantomlab.calibration.td_curves.start_values` moves each grid model by a set of time
shifts (linear interpolation between bins), projects the amplitude and scores χ².  In numpy
that builds arrays of rows × shifts × bins several times over; this kernel does the same
arithmetic bin by bin without them, so its χ² equals the numpy path's to rounding.
"""

from __future__ import annotations

import math

import numpy as np
from numba import njit

__all__ = ["shift_scan_chi2"]


@njit(cache=True)
def shift_scan_chi2(curves, shifts_in_bins, data, weight, out):
    """χ² of each curve moved later by each shift, with its best non-negative amplitude.

    Parameters
    ----------
    curves : float64 (N, K)
        Model curves on the data bins (unit amplitude).
    shifts_in_bins : float64 (N, S)
        Shifts in bins (a curve moved later by s reads its value at bin k − s, linear
        between bins, 0 outside).
    data, weight : float64 (N, K)
        Background-free counts and the weights 1/σ² (0 outside the window).
    out : float64 (N, S)
        Filled with Σ w (A m − d)², A = max(Σ w m d / Σ w m², 0); +inf where not finite.
    """
    rows, bins = curves.shape
    padded = np.zeros(bins + 2)  # a zero before and after the curve
    for n in range(rows):
        padded[1:bins + 1] = curves[n]
        for s in range(shifts_in_bins.shape[1]):
            # bin k reads the curve at k − shift: between bins k + o and k + o + 1, the same
            # fraction for every k; the moved curve is 0 outside bins first … last − 1
            offset = math.floor(-shifts_in_bins[n, s])
            frac = -shifts_in_bins[n, s] - offset
            o = int(offset)
            first = max(0, -o - 1)
            last = min(bins, bins - o)
            cross = 0.0
            square = 0.0
            for k in range(first, last):
                moved = padded[k + o + 1] * (1.0 - frac) + padded[k + o + 2] * frac
                w = weight[n, k]
                cross += w * moved * data[n, k]
                square += w * moved * moved
            amplitude = max(cross / max(square, 1e-300), 0.0)
            chi2 = 0.0
            for k in range(bins):
                if first <= k < last:
                    moved = padded[k + o + 1] * (1.0 - frac) + padded[k + o + 2] * frac
                    residual = amplitude * moved - data[n, k]
                else:  # the moved curve is 0 there
                    residual = -data[n, k]
                chi2 += weight[n, k] * residual * residual
            out[n, s] = chi2 if math.isfinite(chi2) else math.inf
