"""The fitting framework: solutions and covariances against independent references.

References: for a model linear in its parameters, weighted least squares has the closed-form
solution and covariance (XᵀWX)⁻¹ (Press et al. 1992, *Numerical Recipes*, 2nd ed., eq.
15.4.8–15.4.11); ``numpy.polyfit(..., w=1/σ, cov='unscaled')`` is an independent
implementation of the same.  The delta method for log parameters: Var(e^x) ≈ e^{2x} Var(x)
(Bevington & Robinson 2003, *Data Reduction and Error Analysis*, 3rd ed., eq. 3.14).
"""

import numpy as np
import pytest

from phantomlab.calibration.fitting import fit_blocks, fit_joint, log_to_linear, step_aware_jacobian


def _line_data(W=7, M=12, seed=3):
    rng = np.random.default_rng(seed)
    x = np.linspace(0.0, 2.0, M)
    slope = rng.uniform(0.5, 2.0, W)
    intercept = rng.uniform(-1.0, 1.0, W)
    sd = rng.uniform(0.01, 0.05, (W, M))
    y = intercept[:, None] + slope[:, None] * x + sd * rng.standard_normal((W, M))
    return x, y, sd


def test_block_fit_of_a_line_matches_numpy_polyfit():
    x, y, sd = _line_data()

    def residuals(p):
        return (p[:, :1] + p[:, 1:2] * x - y) / sd

    outcome = fit_blocks(residuals, np.zeros((y.shape[0], 2)), mask=np.ones_like(y, bool))
    for w in range(y.shape[0]):
        coef, cov = np.polyfit(x, y[w], 1, w=1 / sd[w], cov="unscaled")  # [slope, intercept]
        np.testing.assert_allclose(outcome.x[w], coef[::-1], rtol=1e-7, atol=1e-9)
        np.testing.assert_allclose(outcome.covariance[w], cov[::-1, ::-1], rtol=1e-4)
    assert np.all(outcome.dof == 10)
    np.testing.assert_allclose(outcome.chi2, np.nansum(outcome.residuals**2, axis=1))


def test_row_aware_block_fit_with_its_steps_in_one_call_matches_numpy_polyfit():
    """The row-aware path hands the Jacobian's steps to the model in one call (rows repeated)."""
    x, y, sd = _line_data()
    calls = []

    def residuals(p, rows):
        calls.append(rows.size)
        return (p[:, :1] + p[:, 1:2] * x - y[rows]) / sd[rows]

    outcome = fit_blocks(residuals, np.zeros((y.shape[0], 2)), mask=np.ones_like(y, bool), row_aware=True)
    for w in range(y.shape[0]):
        coef, cov = np.polyfit(x, y[w], 1, w=1 / sd[w], cov="unscaled")
        np.testing.assert_allclose(outcome.x[w], coef[::-1], rtol=1e-7, atol=1e-9)
        np.testing.assert_allclose(outcome.covariance[w], cov[::-1, ::-1], rtol=1e-4)
    assert max(calls) == 2 * y.shape[0]  # both steps of every block in one call
    np.testing.assert_allclose(outcome.jacobian[:, :, 0], 1 / sd, rtol=1e-6)  # ∂r/∂intercept, exact
    np.testing.assert_allclose(outcome.jacobian[:, :, 1], x / sd, rtol=1e-5)


def test_a_solution_on_a_step_of_the_model_takes_the_smooth_side_derivative():
    """A line with a jump of 1 in the intercept at a = 0.3: a forward difference across the jump
    is 1/step (1e5) per point and would claim an SD of about 1e-6; the smooth side gives the
    line's own derivative, 1/σ (exact for a line)."""
    x, y, sd = _line_data(W=3)
    # on the jump (the backward step crosses it), just below it (the forward step does), clear of it
    p = np.array([[0.3, 1.0], [0.3 - 5e-6, 1.0], [0.3 + 1e-3, 1.0]])

    def residuals(q, rows):
        jump = (q[:, :1] >= 0.3).astype(float)
        return (q[:, :1] + q[:, 1:2] * x + jump - y[rows]) / sd[rows]

    rows = np.arange(3)
    base = residuals(p, rows)
    from phantomlab.calibration.fitting import stacked_jacobian

    forward = stacked_jacobian(residuals, p, rows, base)
    assert np.all(forward[1, :, 0] * sd[1] > 1e4)  # the forward step crosses the jump: 1/step
    jacobian, stepped = step_aware_jacobian(residuals, p, base, forward)
    assert stepped[:, 0].tolist() == [True, True, False] and not stepped[:, 1].any()
    np.testing.assert_allclose(jacobian[:, :, 0], 1 / sd[:3], rtol=1e-6)
    np.testing.assert_allclose(jacobian[:, :, 1], x / sd[:3], rtol=1e-5)


def test_joint_fit_of_a_line_matches_numpy_polyfit():
    x, y, sd = _line_data(W=1)
    outcome = fit_joint(lambda p: (p[0] + p[1] * x - y[0]) / sd[0], np.zeros(2))
    coef, cov = np.polyfit(x, y[0], 1, w=1 / sd[0], cov="unscaled")
    np.testing.assert_allclose(outcome.x, coef[::-1], rtol=1e-7)
    np.testing.assert_allclose(outcome.covariance, cov[::-1, ::-1], rtol=1e-4)


def test_masked_points_do_not_count():
    x, y, sd = _line_data(W=2)
    mask = np.ones_like(y, bool)
    mask[0, :4] = False
    y_bad = y.copy()
    y_bad[0, :4] = 1e6  # would wreck the fit if used

    outcome = fit_blocks(lambda p: (p[:, :1] + p[:, 1:2] * x - y_bad) / sd, np.zeros((2, 2)), mask=mask)
    coef = np.polyfit(x[4:], y[0, 4:], 1, w=1 / sd[0, 4:])
    np.testing.assert_allclose(outcome.x[0], coef[::-1], rtol=1e-7)
    assert outcome.dof[0] == 6 and np.all(np.isnan(outcome.residuals[0, :4]))


def test_scale_by_chi2_matches_polyfit_scaled_covariance():
    x, y, _ = _line_data(W=1)
    outcome = fit_blocks(lambda p: p[:, :1] + p[:, 1:2] * x - y, np.zeros((1, 2)), mask=np.ones_like(y, bool),
                         scale_by_chi2=True)
    _, cov = np.polyfit(x, y[0], 1, cov=True)  # numpy scales by chi2/dof
    np.testing.assert_allclose(outcome.covariance[0], cov[::-1, ::-1], rtol=1e-4)


def test_undetermined_parameter_gets_infinite_variance():
    # y depends on a + b only: a and b separately are not determined
    x = np.linspace(0, 1, 5)
    y = np.full((1, 5), 3.0)
    outcome = fit_blocks(lambda p: (p[:, :1] + p[:, 1:2]) * np.ones_like(x) - y, np.zeros((1, 2)),
                         mask=np.ones_like(y, bool))
    assert np.all(np.isinf(np.diag(outcome.covariance[0])))


def test_delta_method_for_log_parameters():
    values, cov = log_to_linear(np.log(np.array([[2.0, 5.0]])), np.array([[[0.01, 0.002], [0.002, 0.04]]]))
    np.testing.assert_allclose(values, [[2.0, 5.0]])
    np.testing.assert_allclose(cov[0], [[4 * 0.01, 10 * 0.002], [10 * 0.002, 25 * 0.04]])


def test_nonlinear_exponential_recovers_truth_with_right_coverage():
    # y = A exp(-k t) with 1 % noise, 400 independent problems: the standardised errors of the
    # fitted log k must have unit spread (within sampling error, 3 sigma of a chi-square SD).
    rng = np.random.default_rng(11)
    W, t = 400, np.linspace(0, 4, 15)
    A, k = rng.uniform(1, 3, W), rng.uniform(0.3, 1.5, W)
    y = A[:, None] * np.exp(-k[:, None] * t)
    sd = 0.01 * y
    data = y + sd * rng.standard_normal(y.shape)
    outcome = fit_blocks(lambda p: (np.exp(p[:, :1] - np.exp(p[:, 1:2]) * t) - data) / sd,
                         np.zeros((W, 2)), mask=np.ones_like(y, bool))
    z = (outcome.x[:, 1] - np.log(k)) / np.sqrt(outcome.covariance[:, 1, 1])
    assert abs(np.std(z) - 1.0) < 3 * np.sqrt(1 / (2 * W))
    # standard normal: P(|z| < 1) = erf(1/sqrt 2) = 0.6827 (exact)
    assert np.mean(np.abs(z) < 1) == pytest.approx(0.6827, abs=3 * np.sqrt(0.68 * 0.32 / W))
