"""Kernel smoothers of the Monte Carlo lookups' tables (layer 3).

The lookups (:mod:`phantomlab.calibration.mc_lookup`, srdr/sfdi; and
:mod:`phantomlab.calibration.mc_lookup_time`, td/fd) tabulate a baseline's photons and
smooth each table as a ratio to a diffusion control, weighted by the photon statistics:

* :func:`smooth_rows` — the srdr table's rows far from the source: a local line in u with a
  kernel as wide as each node's noise needs (Cleveland 1979, J Am Stat Assoc 74:829);
* :func:`smooth_near` — the same rows nearer the source: a local quadratic in log u with a
  fixed kernel (Cleveland & Devlin 1988, J Am Stat Assoc 83:596);
* :func:`local_linear_2d` — the time table: a 2-D local-linear regression with a separable
  Gaussian kernel; :func:`fill_rows` — the empty cells of a row from their nearest values.
"""

from __future__ import annotations

import numpy as np
from scipy.ndimage import gaussian_filter1d

__all__ = ["smooth_rows", "smooth_near", "local_linear_2d", "fill_rows"]

#: Fewest photon-bearing nodes a row needs to be smoothed (fewer: kept as counted).
_MIN_SMOOTHED_NODES = 8
#: Relative SD the smoothing brings each table node down to (where its photons do not).
_TARGET_RELATIVE_SD = 0.003
#: Widest smoothing kernel (Gaussian SD in log u): a factor 1.5 in distance.  Beyond the
#: photons, the kernel of a node reaches back to the nearest well-counted nodes; wider
#: kernels would mix in the region near the source, where the far-field form does not hold.
_MAX_KERNEL_WIDTH = float(np.log(1.5))
#: Width (Gaussian SD in log u) of :func:`smooth_near`'s kernel: ±15 % in distance.
_NEAR_KERNEL_WIDTH = 0.15


def smooth_rows(log_table, positive, relative_sd, log_u, log_control, *, log_u_start, log_u_near=None):
    """Each row of ``log_table`` smoothed over ``log_u`` as a ratio to ``log_control``.

    A local-linear kernel regression (Cleveland 1979, J Am Stat Assoc 74:829) of
    y = log R − log R_control with weights 1/SD² and a Gaussian kernel (in log u) whose width
    at each node grows with that node's noise: about as many neighbours as bring its relative
    SD down to :data:`_TARGET_RELATIVE_SD`, none where the photons already give that (near the
    source), and at most :data:`_MAX_KERNEL_WIDTH`.  The local line is in u, not log u: far
    from the source the Monte Carlo R(ρ) and the diffusion control both fall as
    exp(−κρ)/ρ² with slightly different decay constants κ (the transport equation's
    asymptotic one against √(3 μa μt′)), so their log ratio tends to a straight line in ρ;
    where the photons thin out, the kernel reaches back to the well-counted nodes and the
    line continues that far-field form instead of the noise (the far-field join).  Only nodes
    from ``log_u_start`` out are smoothed so (nearer the source the ratio bends: nodes from
    ``log_u_near`` to ``log_u_start``, when given, go to :func:`smooth_near`); nodes from
    half the distance ``log_u_start`` take part in the regression.  Nodes holding photons
    with a relative SD below 0.5 take part; every node from ``log_u_start`` out gets an
    estimate.

    Returns
    -------
    (ndarray, ndarray)
        The smoothed log table, and the relative SD of each value (the linear smoother's
        variance Σ lᵢ² σᵢ²; the counted SD where a node was kept as counted).
    """
    out = log_table.copy()
    out_sd = relative_sd.copy()
    step = float(log_u[1] - log_u[0])
    for row in range(log_table.shape[0]):
        use = (positive[row] & np.isfinite(log_control[row]) & (relative_sd[row] < 0.5)
               & (log_u >= log_u_start - np.log(2.0)))
        if use.sum() < _MIN_SMOOTHED_NODES:
            continue
        x = log_u[use]
        y = log_table[row, use] - log_control[row, use]
        sd = np.clip(relative_sd[row, use], 1e-4, None)
        node_sd = np.clip(relative_sd[row], 1e-4, None)
        # neighbours needed n = (sd/target)²; a Gaussian of width σ spans 2√π σ/step nodes
        wanted = np.maximum((node_sd / _TARGET_RELATIVE_SD) ** 2, 1.0)
        width = np.clip(step * wanted / (2.0 * np.sqrt(np.pi)), 1e-3 * step, _MAX_KERNEL_WIDTH)
        targets = np.where((log_u >= log_u_start) & np.isfinite(log_control[row])
                           & ((wanted > 1.0) | ~positive[row]))[0]
        for j in targets:
            d = np.expm1(x - log_u[j])  # (u − u_j)/u_j: the local line is in u
            w = np.exp(-0.5 * ((x - log_u[j]) / width[j]) ** 2) / sd**2
            s0, s1, s2 = w.sum(), (w * d).sum(), (w * d * d).sum()
            if s0 <= 0.0 or not np.isfinite(s0):
                continue
            det = s0 * s2 - s1 * s1
            weights = w * (s2 - s1 * d) / det if det > 1e-12 * s0 * s2 else w / s0
            out[row, j] = log_control[row, j] + float(weights @ y)
            out_sd[row, j] = float(np.sqrt(np.sum(weights**2 * sd**2)))
        if log_u_near is not None:
            smooth_near(out, out_sd, row, log_table[row] - log_control[row], positive[row], relative_sd[row],
                         log_u, log_control[row], log_u_near, log_u_start)
    return out, out_sd


def smooth_near(out, out_sd, row, y_row, positive_row, sd_row, log_u, log_control_row, log_u_near, log_u_start):
    """Nodes from ``log_u_near`` to ``log_u_start`` (within a transport length of the source) smoothed in place.

    A local-quadratic kernel regression in log u (Cleveland & Devlin 1988, J Am Stat Assoc
    83:596) of y = log R − log R_control, weights 1/SD², a fixed Gaussian kernel of
    :data:`_NEAR_KERNEL_WIDTH`: the ratio to diffusion bends there (a local line would
    flatten it), but over ±15 % in distance a parabola follows it; its value's SD is the
    smoother's Σ lᵢ² σᵢ².
    """
    use = positive_row & np.isfinite(y_row) & (sd_row < 0.5)
    x = log_u[use]
    y = y_row[use]
    sd = np.clip(sd_row[use], 1e-4, None)
    targets = np.where((log_u >= log_u_near) & (log_u < log_u_start) & np.isfinite(log_control_row))[0]
    for j in targets:
        d = x - log_u[j]
        w = np.exp(-0.5 * (d / _NEAR_KERNEL_WIDTH) ** 2) / sd**2
        if np.count_nonzero(w > 1e-3 * w.max()) < 5:
            continue  # too few nodes around: kept as counted
        design = np.stack([np.ones_like(d), d, d * d], axis=1)
        normal = design.T @ (w[:, None] * design)
        try:
            weights = np.linalg.solve(normal, design.T * w)[0]
        except np.linalg.LinAlgError:
            continue
        out[row, j] = log_control_row[j] + float(weights @ y)
        out_sd[row, j] = float(np.sqrt(np.sum(weights**2 * sd**2)))


def _centred_moments(weights, gx, gy, smooth):
    """Σ K w (x_i − x_j)^a (y_i − y_j)^b about each node j for a + b ≤ 2, as a (…, 3, 3) matrix."""
    w = weights
    s = {name: smooth(arr) for name, arr in {
        "1": w, "x": w * gx, "y": w * gy, "xx": w * gx * gx, "xy": w * gx * gy, "yy": w * gy * gy}.items()}
    m1 = s["1"]
    mx = s["x"] - gx * m1
    my = s["y"] - gy * m1
    mxx = s["xx"] - 2 * gx * s["x"] + gx * gx * m1
    mxy = s["xy"] - gx * s["y"] - gy * s["x"] + gx * gy * m1
    myy = s["yy"] - 2 * gy * s["y"] + gy * gy * m1
    return np.stack([np.stack([m1, mx, my], -1), np.stack([mx, mxx, mxy], -1), np.stack([my, mxy, myy], -1)], -2)


def local_linear_2d(y, weights, x_step, y_step, *, with_variance=False):
    """Local-linear regression of ``y`` on a 2-D grid with a separable Gaussian kernel.

    ``weights`` are inverse variances (0 where no data); kernel SDs in grid units
    (``x_step``, ``y_step``).  Returns the fitted values and Σ K w (the kernel's mass at each
    node, with the unit-area kernel); with ``with_variance``, also the variance of each fitted
    value, the sandwich e₁ᵀ M⁻¹ (Σ K² w X Xᵀ) M⁻¹ e₁ of the weighted least-squares fit with
    M = Σ K w X Xᵀ and X = (1, x − x_j, y − y_j) (Fan & Gijbels 1996, ch. 3): at the edge
    of the data, where the local line extrapolates, it is about twice the local-constant
    Σ K² w/(Σ K w)² (K² of a Gaussian is the Gaussian of half its variance;
    tests/calibration/test_lookup_smoothing_variance.py).
    """
    rows, cols = y.shape
    gx = np.arange(rows, dtype=float)[:, None] * np.ones((1, cols))
    gy = np.ones((rows, 1)) * np.arange(cols, dtype=float)[None, :]
    yz = np.where(weights > 0, y, 0.0)

    def smooth(a, scale=1.0):
        a = gaussian_filter1d(a, x_step * scale, axis=0, mode="constant", truncate=3.0)
        return gaussian_filter1d(a, y_step * scale, axis=1, mode="constant", truncate=3.0)

    w = weights
    matrix = _centred_moments(w, gx, gy, smooth)
    m1 = matrix[..., 0, 0]
    mz = smooth(w * yz)
    mxz = smooth(w * gx * yz) - gx * mz
    myz = smooth(w * gy * yz) - gy * mz
    rhs = np.stack([mz, mxz, myz], -1)
    fitted = np.full(y.shape, np.nan)
    variance = np.full(y.shape, np.inf)
    ok = m1 > 0
    with np.errstate(invalid="ignore", divide="ignore"):
        det = np.linalg.det(matrix[ok])
        scale = np.abs(matrix[ok][:, 0, 0] * matrix[ok][:, 1, 1] * matrix[ok][:, 2, 2])
        good = np.abs(det) > 1e-10 * np.maximum(scale, 1e-300)
        solved = np.full(ok.sum(), np.nan)
        if np.any(good):
            solved[good] = np.linalg.solve(matrix[ok][good], rhs[ok][good][..., None])[:, 0, 0]
        constant = mz[ok] / m1[ok]  # local-constant where the linear fit is singular (edges)
        solved = np.where(good, solved, constant)
    fitted[ok] = solved
    if not with_variance:
        return fitted, m1
    # the kernel with peak 1 is Z·G (G the unit-area filter, Z = 2π σx σy in cells) and its
    # square (Z/2)·G of half the variance: Var = e₁ᵀ M_G⁻¹ M_H M_G⁻¹ e₁ / (4π σx σy)
    half = _centred_moments(w, gx, gy, lambda a: smooth(a, 1.0 / np.sqrt(2.0)))
    z = 4.0 * np.pi * x_step * y_step
    with np.errstate(invalid="ignore", divide="ignore"):
        local_constant = half[ok][:, 0, 0] / (z * m1[ok] ** 2)
        values = local_constant.copy()
        if np.any(good):
            row = np.linalg.solve(np.swapaxes(matrix[ok][good], -1, -2), np.eye(3)[0][None, :, None].repeat(good.sum(), 0))
            values[good] = np.einsum("ni,nij,nj->n", row[..., 0], half[ok][good], row[..., 0]) / z
    variance[ok] = np.where(np.isfinite(values) & (values > 0), values, local_constant)
    return fitted, m1, variance


def fill_rows(values: np.ndarray) -> np.ndarray:
    """NaN entries of each row replaced by the nearest finite value of that row (0 if none)."""
    out = values.copy()
    columns = np.arange(values.shape[1])
    for row in range(values.shape[0]):
        finite = np.isfinite(values[row])
        if not finite.any():
            out[row] = 0.0
            continue
        index = columns[finite]
        nearest = np.clip(np.searchsorted(index, columns), 0, index.size - 1)
        before = np.clip(nearest - 1, 0, index.size - 1)
        pick = np.where(np.abs(index[before] - columns) < np.abs(index[nearest] - columns), before, nearest)
        out[row] = np.where(finite, values[row], values[row, index[pick]])
    return out
