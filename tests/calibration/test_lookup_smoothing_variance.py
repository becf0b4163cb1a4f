"""The td table's local-linear smoother and its variance (calibration/lookup_smoothing.py).

``local_linear_2d`` fits a local line at every node of a grid with separable Gaussian
filters; with ``with_variance`` it also returns the variance of each fitted value (the
weighted least-squares sandwich).  Checked against two independent computations:

* an explicit weighted least-squares fit at single nodes (numpy's lstsq on the kernel-weighted
  design, the kernel written out), for the fitted value and for the sandwich
  e₁ᵀ M⁻¹ (Σ K² w X Xᵀ) M⁻¹ e₁ (weights w = 1/σ²);
* the spread of the fitted values over many noise draws (numpy's generator), in the middle of
  the data and at their edge, where the local line extrapolates and the local-constant
  variance Σ K² w/(Σ K w)² is half of it.
"""

from __future__ import annotations

import numpy as np

from phantomlab.calibration.lookup_smoothing import local_linear_2d

SX, SY = 1.6, 1.2  # kernel SDs in cells


def _grid(rows=14, cols=18, seed=1):
    rng = np.random.default_rng(seed)
    x = np.arange(rows)[:, None] * np.ones((1, cols))
    y = np.ones((rows, 1)) * np.arange(cols)[None, :]
    truth = 0.3 + 0.05 * x - 0.02 * y + 0.004 * x * y  # smooth, not linear
    sigma = 0.05 * (1.0 + rng.random((rows, cols)))
    weights = 1.0 / sigma**2
    weights[:, :5] = 0.0  # no data in the first columns: nodes at column 5 sit on the data's edge
    return truth, sigma, weights


def _explicit(values, weights, node):
    """Fitted value and sandwich variance at ``node`` by an explicit weighted least-squares fit."""
    rows, cols = values.shape
    i, j = np.meshgrid(np.arange(rows), np.arange(cols), indexing="ij")
    dx, dy = (i - node[0]).ravel(), (j - node[1]).ravel()
    kernel = np.exp(-0.5 * ((dx / SX) ** 2 + (dy / SY) ** 2))
    w = weights.ravel()
    use = w > 0
    design = np.stack([np.ones(dx.size), dx, dy], axis=1)[use]
    k, w, v = kernel[use], w[use], values.ravel()[use]
    root = np.sqrt(k * w)
    beta = np.linalg.lstsq(design * root[:, None], v * root, rcond=None)[0]
    m = design.T @ ((k * w)[:, None] * design)
    m2 = design.T @ ((k * k * w)[:, None] * design)
    inverse = np.linalg.inv(m)
    return beta[0], (inverse @ m2 @ inverse)[0, 0]


def test_fitted_values_and_variances_match_an_explicit_weighted_least_squares_fit():
    truth, sigma, weights = _grid()
    values = truth + sigma * np.random.default_rng(2).standard_normal(truth.shape)
    fitted, _, variance = local_linear_2d(values, weights, SX, SY, with_variance=True)
    for node in [(7, 10), (7, 5), (2, 12), (13, 17), (0, 6)]:
        value, var = _explicit(values, weights, node)
        # the filters are truncated at 3 SD and normalised on the grid: agreement to a few 1e-3
        assert abs(fitted[node] - value) < 2e-3 * max(abs(value), 0.1), (node, fitted[node], value)
        assert abs(variance[node] / var - 1) < 0.03, (node, variance[node], var)


def test_the_variance_is_the_spread_of_the_fit_over_noise_draws_also_at_the_data_edge():
    truth, sigma, weights = _grid()
    rng = np.random.default_rng(3)
    nodes = [(7, 10), (7, 5), (3, 5)]
    draws = np.array([[local_linear_2d(truth + sigma * rng.standard_normal(truth.shape), weights, SX, SY)[0][n]
                       for n in nodes] for _ in range(1500)])
    _, mass, variance = local_linear_2d(truth, weights, SX, SY, with_variance=True)
    for k, node in enumerate(nodes):
        spread = np.std(draws[:, k], ddof=1)
        # 1500 draws: the sample SD is within ±5.5 % (3 SE) of the true one
        assert abs(spread / np.sqrt(variance[node]) - 1) < 0.055, (node, spread, np.sqrt(variance[node]))
    # at the edge the local-constant variance is far too small (the local line extrapolates)
    from scipy.ndimage import gaussian_filter1d

    half = gaussian_filter1d(gaussian_filter1d(weights, SX / np.sqrt(2), axis=0, mode="constant"),
                             SY / np.sqrt(2), axis=1, mode="constant")
    with np.errstate(divide="ignore", invalid="ignore"):
        local_constant = half / (4 * np.pi * SX * SY * mass**2)
    assert variance[7, 5] > 1.8 * local_constant[7, 5]  # measured 2.1 times
    assert abs(variance[7, 10] / local_constant[7, 10] - 1) < 0.5
