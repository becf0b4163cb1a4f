"""Bayesian linear least-squares potency update against closed forms and an independent solver.

References: the one-parameter conjugate normal update, posterior precision = prior precision
+ data precision, mean = precision-weighted average (Gelman et al. 2013, *Bayesian Data
Analysis*, 3rd ed., eqs. 2.11–2.12); the general linear case equals ordinary least squares
on the data rows stacked with the prior rows, each whitened (Tarantola 2005, *Inverse Problem
Theory*, eq. 3.37), solved here by ``numpy.linalg.lstsq`` as the independent check, with the
covariance of each batch's values written out in full (the fits' 2 × 2 blocks, their
correlation across wavelengths and the measurement scale SD that the update reports) and
whitened by its Cholesky factor.
"""

import numpy as np
import pytest

from phantomlab.calibration.potency import BatchObservation, PotencyPrior, update_potencies
from phantomlab.calibration.potency_blocks import WAVELENGTH_CORRELATION
from phantomlab.errors import InputError


def _observation(batch_id, f, a, s, am, mua, musp, cov, stocks=(("ink", "L1"),), rel=0.0):
    W = np.size(mua)
    return BatchObservation(
        batch_id=batch_id, stocks=stocks, volume_fractions=np.atleast_1d(f),
        wavelength_nm=np.linspace(600, 800, W), intrinsic_mua_per_mm=np.atleast_2d(a),
        intrinsic_musp_per_mm=np.atleast_2d(s), matrix_mua_per_mm=am, mua_per_mm=mua,
        musp_per_mm=musp, covariance=cov, dispensing_rel_sd=rel,
    )


def test_one_absorber_one_wavelength_is_the_conjugate_normal_update():
    p0, s0 = 1.0, 0.3
    f, a, am = 0.001, 20.0, 0.002  # ink fraction, intrinsic mua, matrix mua [1/mm]
    y, sy = 0.0168, 0.0004  # measured mua
    cov = np.array([[[sy**2, 0.0], [0.0, np.inf]]])
    obs = _observation("B1", f, [[a]], [[0.0]], [am], [y], [1.0], cov)
    update = update_potencies([PotencyPrior("ink", "L1", p0, s0)], [obs])
    design = f * a
    data = y - (1 - f) * am
    precision = 1 / s0**2 + design**2 / sy**2  # Gelman et al. 2013, eq. 2.12
    mean = (p0 / s0**2 + design * data / sy**2) / precision  # eq. 2.11
    assert update.potency[0] == pytest.approx(mean, rel=1e-12)
    assert update.potency_sd[0] == pytest.approx(precision**-0.5, rel=1e-12)
    moved = update.moved_by[("ink", "L1")]
    assert moved[0]["batch_id"] == "B1"
    assert moved[0]["shift"] == pytest.approx(mean - p0, rel=1e-12)
    assert moved[0]["information_share"] == pytest.approx(1 - 1 / s0**2 / precision, rel=1e-12)


def test_general_case_equals_whitened_stacked_least_squares():
    rng = np.random.default_rng(5)
    W = 6
    stocks = (("spheres", "S1"), ("ink", "I1"), ("dye", "D1"))
    priors = [PotencyPrior("spheres", "S1", 1.0, 0.3), PotencyPrior("ink", "I1", 1.0, 0.25),
              PotencyPrior("dye", "D1", 1.2, 0.35)]
    a = np.vstack([np.full(W, 0.01), np.linspace(10, 8, W), 30 * np.exp(-np.linspace(-1, 1, W) ** 2)])
    s = np.vstack([np.linspace(30, 20, W), np.full(W, 2.0), np.zeros(W)])  # the ink scatters
    am = np.linspace(0.002, 0.004, W)
    true = np.array([1.3, 0.7, 1.5])
    observations, batches = [], []
    for b, f in enumerate([np.array([0.04, 0.001, 0.0002]), np.array([0.03, 0.0015, 0.0003]),
                           np.array([0.035, 0.0008, 0.00025])]):
        mua = (1 - f.sum()) * am + (f * true) @ a
        musp = (f * true) @ s
        cov = np.zeros((W, 2, 2))
        sa, ss = 0.02 * mua, 0.01 * musp
        cov[:, 0, 0], cov[:, 1, 1] = sa**2, ss**2
        cov[:, 0, 1] = cov[:, 1, 0] = -0.5 * sa * ss  # correlated fit errors
        noise = np.array([rng.multivariate_normal([0, 0], c) for c in cov])
        observations.append(_observation(f"B{b}", f, a, s, am, mua + noise[:, 0], musp + noise[:, 1], cov,
                                         stocks=stocks))
        design = np.zeros((W, 2, 3))
        design[:, 0, :], design[:, 1, :] = (f[:, None] * a).T, (f[:, None] * s).T
        data = np.stack([mua + noise[:, 0] - (1 - f.sum()) * am, musp + noise[:, 1]], axis=1)
        batches.append((design.reshape(2 * W, 3), data.reshape(-1), cov, mua, musp))
    update = update_potencies(priors, observations)
    rho = WAVELENGTH_CORRELATION
    rows, rhs = [], []
    for design, data, cov, mua, musp in batches:
        full = np.zeros((2 * W, 2 * W))
        for w in range(W):
            full[2 * w:2 * w + 2, 2 * w:2 * w + 2] = cov[w]
        for q, values in ((0, mua), (1, musp)):
            sd = np.zeros(2 * W)
            sd[q::2] = np.sqrt(cov[:, q, q])
            full += rho * np.outer(sd, sd)
            scale = np.zeros(2 * W)
            scale[q::2] = update.scale_sd[("mua", "musp")[q]] * values  # at the level it was taken
            full += np.outer(scale, scale)
        L = np.linalg.cholesky(np.linalg.inv(full))
        rows.append(L.T @ design)
        rhs.append(L.T @ data)
    for k, prior in enumerate(priors):
        row = np.zeros(3)
        row[k] = 1 / prior.potency_sd
        rows.append(row[None, :])
        rhs.append(np.array([prior.potency / prior.potency_sd]))
    X, y = np.vstack(rows), np.concatenate(rhs)
    reference, *_ = np.linalg.lstsq(X, y, rcond=None)
    reference_cov = np.linalg.inv(X.T @ X) * update.birge_ratio**2
    np.testing.assert_allclose(update.potency, reference, rtol=1e-7)
    np.testing.assert_allclose(update.covariance, reference_cov, rtol=1e-7)
    # the per-batch shifts add up to the whole shift, for every factor
    for k, ident in enumerate(update.stocks):
        total = sum(item["shift"] for item in update.moved_by[ident])
        assert total == pytest.approx(update.potency[k] - update.prior_potency[k], rel=1e-9, abs=1e-12)


def test_no_batches_leaves_the_prior():
    update = update_potencies([PotencyPrior("ink", "L1", 1.1, 0.2)], [])
    assert update.potency[0] == pytest.approx(1.1, rel=1e-12)
    assert update.potency_sd[0] == pytest.approx(0.2, rel=1e-12)
    assert update.to_json()["stocks"] == {"ink": {"potency": pytest.approx(1.1), "potency_sd": pytest.approx(0.2),
                                                  "lot": "L1", "spectral": None}}


def test_undetermined_musp_rows_carry_no_weight():
    cov = np.array([[[1e-8, 0.0], [0.0, np.inf]]])
    obs = _observation("B1", 0.01, [[1.0]], [[50.0]], [0.0], [0.012], [np.nan], cov)
    update = update_potencies([PotencyPrior("ink", "L1", 1.0, 0.5)], [obs])
    assert update.potency[0] == pytest.approx(1.2, rel=1e-3)


def test_json_has_before_after_and_moved_by():
    cov = np.array([[[1e-8, 0.0], [0.0, 1e-4]]])
    obs = _observation("B7", 0.01, [[1.0]], [[0.0]], [0.0], [0.012], [0.0], cov)
    payload = update_potencies([PotencyPrior("ink", "L1", 1.0, 0.3)], [obs]).to_json()
    assert set(payload) >= {"stocks", "before", "after", "moved_by"}
    assert payload["before"]["ink"]["potency"] == 1.0
    assert payload["after"]["ink"]["potency"] == pytest.approx(1.2, rel=1e-3)
    assert payload["moved_by"]["ink"][0]["batch_id"] == "B7"


def test_lot_without_prior_refused():
    cov = np.array([[[1e-8, 0.0], [0.0, 1e-4]]])
    obs = _observation("B1", 0.01, [[1.0]], [[0.0]], [0.0], [0.012], [0.0], cov, stocks=(("ink", "L2"),))
    with pytest.raises(InputError, match="batch B1 used stock ink lot L2 which has no prior"):
        update_potencies([PotencyPrior("ink", "L1", 1.0, 0.3)], [obs])


@pytest.mark.parametrize("potency, sd, words", [(0.0, 0.1, "potency 0.0; accepted: > 0"),
                                                (1.0, float("nan"), "potency_sd nan; accepted: > 0")])
def test_bad_prior_refused(potency, sd, words):
    with pytest.raises(InputError, match=words):
        PotencyPrior("ink", None, potency, sd)


def test_bad_observation_shape_refused():
    with pytest.raises(InputError, match="covariance has shape"):
        _observation("B1", 0.01, [[1.0]], [[0.0]], [0.0], [0.012], [0.0], np.zeros((2, 2)))
