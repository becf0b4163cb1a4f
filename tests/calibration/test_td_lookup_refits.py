"""The refits that carry a lookup's noise to a td fit's parameters (td_lookup_refits.py).

Two checks against independent computation:

- the drawn model errors have the covariance they claim: a stationary Gaussian correlation
  exp(−Δ²/(4h²)) for a constant width, and Gibbs's non-stationary kernel for a varying one,
  written here in the form of Paciorek CJ & Schervish MJ 2004 (NIPS 16, eq. 6, one
  dimension: C(x₁, x₂) = √(2ℓ₁ℓ₂/(ℓ₁² + ℓ₂²)) exp(−(x₁ − x₂)²/(ℓ₁² + ℓ₂²)), with ℓ² = 2h²);
- where the fit is linear (small errors) the refits' covariance equals the linear sandwich
  (JᵀJ)⁻¹JᵀΣJ(JᵀJ)⁻¹, computed here by hand with the analytic Jacobian of a two-parameter
  exponential decay.
"""

from __future__ import annotations

import numpy as np
import pytest

from phantomlab.calibration.td_lookup_refits import PerturbedShape, noise_fields, refit_covariance


def _paciorek(x1, x2, h1, h2):
    l1, l2 = np.sqrt(2.0) * h1, np.sqrt(2.0) * h2
    return np.sqrt(2 * l1 * l2 / (l1**2 + l2**2)) * np.exp(-(x1 - x2) ** 2 / (l1**2 + l2**2))


def test_drawn_errors_have_the_stated_variance_and_stationary_correlation():
    log_tau = np.linspace(3.0, 8.0, 251)
    draws = 4000
    fields = noise_fields(lambda m, r, t: np.full(t.shape, 0.05), lambda m, r, t: np.full(t.shape, 0.2), 0.1,
                          musp_per_mm=np.array([1.0]), rho_mm=np.array([10.0]), log_tau=log_tau, draws=draws,
                          rng=np.random.default_rng(3))[0]
    sd = fields.std(axis=0)
    # the SD of an SD from n normal draws is σ/√(2n): 3 SE is 3.4 % at n = 4000
    assert np.all(np.abs(sd[50:200] / 0.05 - 1) < 3.4e-2)
    for lag in (10, 20, 40):  # Δ = 0.2, 0.4, 0.8 in ln τ
        gap = log_tau[lag] - log_tau[0]
        expected = np.exp(-gap**2 / (4 * 0.2**2))
        measured = np.corrcoef(fields[:, 100], fields[:, 100 + lag])[0, 1]
        # SE of a correlation coefficient (1 − ρ²)/√n
        assert abs(measured - expected) < 3 * (1 - expected**2) / np.sqrt(draws) + 1e-3, (lag, measured, expected)


def test_drawn_errors_follow_gibbs_kernel_where_the_width_varies():
    log_tau = np.linspace(3.0, 8.0, 251)
    draws = 4000

    def width(m, r, t):
        return 0.05 + 0.06 * (np.log(t) - 3.0)  # 0.05 … 0.35

    fields = noise_fields(lambda m, r, t: np.full(t.shape, 0.02), width, 0.1, musp_per_mm=np.array([1.0]),
                          rho_mm=np.array([10.0]), log_tau=log_tau, draws=draws, rng=np.random.default_rng(4))[0]
    h = width(None, None, np.exp(log_tau))
    for i, j in ((60, 66), (120, 135), (200, 220)):
        expected = _paciorek(log_tau[i], log_tau[j], h[i], h[j])
        measured = np.corrcoef(fields[:, i], fields[:, j])[0, 1]
        assert abs(measured - expected) < 3 * (1 - expected**2) / np.sqrt(draws) + 1e-3, (i, j, measured, expected)


def test_perturbed_shape_multiplies_each_row_by_its_own_error():
    def base(mua, musp, rho, times):
        return np.exp(-times / 1000.0)

    times = np.tile(np.linspace(10.0, 3000.0, 50), (2, 1))
    fields = np.stack([np.full(101, 0.1), np.full(101, -0.5)])
    shape = PerturbedShape(base, fields, np.log(1.0), np.log(1e4) / 100)
    out = shape(None, None, None, times)
    assert np.allclose(out[0], 1.1 * base(None, None, None, times[0]), rtol=1e-14)
    assert np.allclose(out[1], 0.5 * base(None, None, None, times[1]), rtol=1e-14)
    # outside the grid the model is unchanged
    assert shape(None, None, None, np.full((2, 1), 2e4))[0, 0] == pytest.approx(np.exp(-20.0))


class _Decay:
    """S(τ) = A exp(−k τ / 1000 ps) with a stated relative error of 1e-3 correlated over 0.3 in ln τ."""

    default_bandwidth = 0.3

    def __call__(self, amplitude, rate, rho, times):
        return amplitude[:, None] * np.exp(-rate[:, None] * times / 1000.0)

    @staticmethod
    def relative_sd(musp, rho, times):
        return np.full(times.shape, 1e-3)

    @staticmethod
    def bandwidth_at(musp, rho, times):
        return np.full(times.shape, 0.3)


def test_refits_equal_the_linear_sandwich_where_the_fit_is_linear():
    times = np.linspace(100.0, 3000.0, 120)
    truth = np.array([np.log(500.0), np.log(1.5)])
    shape = _Decay()
    data = shape(np.exp(truth[:1]), np.exp(truth[1:]), None, times[None, :])[0]
    sd = 0.01 * data

    def residual(x_rows, curves, model):
        grid = np.broadcast_to(times, (x_rows.shape[0], times.size))
        values = model(np.exp(x_rows[:, 0]), np.exp(x_rows[:, 1]), None, grid)
        return (values - data) / sd

    draws = 600
    cov = refit_covariance(residual, shape, x=truth[None, :], rows=np.array([0]), curves_per_row=1,
                           musp_per_mm=np.array([1.5]), rho_mm=np.array([10.0]), tau_range_ps=(1.0, 5000.0),
                           mask=np.ones((1, times.size), bool), lower=np.array([-10.0, -10.0]),
                           upper=np.array([20.0, 10.0]), tolerance=1e-14, step_tolerance=1e-12, draws=draws)[0]
    # by hand: r = (A e^{−kτ} − y)/σ, ∂r/∂ln A = y/σ, ∂r/∂ln k = −k τ/1000 · y/σ; e = 1e-3 y/σ
    jac = np.stack([data / sd, -1.5 * times / 1000.0 * data / sd], axis=1)
    lt = np.log(times)
    correlation = _paciorek(lt[:, None], lt[None, :], 0.3, 0.3)
    e = 1e-3 * data / sd
    inverse = np.linalg.inv(jac.T @ jac)
    linear = inverse @ jac.T @ (e[:, None] * correlation * e[None, :]) @ jac @ inverse
    # 600 draws: an SD known to 1/√1200 = 2.9 %; 3.5 SE
    assert np.sqrt(np.diag(cov)) == pytest.approx(np.sqrt(np.diag(linear)), rel=0.10)
    corr_refit = cov[0, 1] / np.sqrt(cov[0, 0] * cov[1, 1])
    corr_linear = linear[0, 1] / np.sqrt(linear[0, 0] * linear[1, 1])
    assert corr_refit == pytest.approx(corr_linear, abs=3 * (1 - corr_linear**2) / np.sqrt(draws) + 0.01)
