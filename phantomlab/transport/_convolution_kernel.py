"""numba kernel of the IRF convolution's sum over the IRF and the sub-bins (layer 2).

:meth:`phantomlab.transport.convolution.InstrumentResponse.counts` needs, per data bin k,
counts_k = Σ_j c_j S_{k s + o − j}: the model S on the lattice convolved with the IRF's
moving sum c over s sub-bins, read every s-th lattice point.  c is short (the IRF's span), so
the sum is a band; this kernel adds it directly, which touches only the band (a dense
lattice × bins matrix is mostly zeros and its product is bound by memory).
"""

from __future__ import annotations

from numba import njit

__all__ = ["banded_counts"]


@njit(cache=True)
def banded_counts(values, moving, which, stride, offset, out):
    """out[n, k] = Σ_j moving[which[n], j] · values[n, k·stride + offset − j] (terms inside ``values`` only).

    Parameters
    ----------
    values : float64 (N, M)
        The model on the lattice, one row per curve.
    moving : float64 (G, J′)
        The IRF's moving sums, one row per IRF.
    which : int64 (N,)
        The IRF row of each curve.
    stride, offset : int
        Sub-bins per bin s, and the lattice index of bin 0's first term (J′ − 1).
    out : float64 (N, K)
        Filled with the counts per bin for unit amplitude.
    """
    rows, lattice = values.shape
    span = moving.shape[1]
    for n in range(rows):
        g = which[n]
        for k in range(out.shape[1]):
            top = k * stride + offset  # the lattice index paired with moving[0]
            first = max(0, top - lattice + 1)  # j with top − j < M
            last = min(span, top + 1)  # j with top − j >= 0
            total = 0.0
            for j in range(first, last):
                total += moving[g, j] * values[n, top - j]
            out[n, k] = total
