"""Potency SDs cover the truth: repeated hidden simulated labs (``hidden_lab.py``), and τ recovery.

Every lab draws its own hidden truth (levels 0.7–1.3 of the labels, TiO₂ grains 0.25, 0.30 or
0.32 µm against the labelled 0.25), its own doses, dispensing errors (1 %, the recipe's
pipette error) and readings from its own disjoint photon shares of the independent Monte
Carlo run (``PHOTON_SHARES_PER_PARTITION`` shares; five per lab, so labs of one partition share
no photon).  The calibration (spectral corrections where the rule allows) must put at least
90 % of the true levels within 2 SD (issue 13).  For TiO₂ the true level is that at the
reference wavelength of its correction (the label's μs′ there times the truth's ratio).

The measured numbers (12 labs, 36 levels) are printed: within 1 SD, 2 SD, and the RMS of z.
"""

import numpy as np
import pytest

from hidden_lab import batch_doses, make_lab, photon_shares

from phantomlab.calibration import BatchObservation, PotencyPrior, update_potencies
from phantomlab.calibration.observations import observation_from_fit, priors_from_recipe
from phantomlab.recipe.plan import intrinsic_table

LABS = 12
BATCHES = 5
PHOTON_SHARES_PER_PARTITION = 40
MEASURE_NM = np.arange(600.0, 861.0, 40.0)
REFERENCE_NM = 720.0


@pytest.fixture(scope="module")
def runs(tmp_path_factory):
    from phantomlab.transport.montecarlo import load_baseline
    from hidden_lab import FIXTURES

    data = load_baseline(FIXTURES / "mc_lab_baseline.npz")
    fitting = load_baseline(FIXTURES / "mc_baseline.npz")
    return data, fitting, tmp_path_factory.mktemp("coverage")


def _one_lab(number, data, fitting, folder):
    rng = np.random.default_rng(1000 + number)
    levels = {key: float(rng.uniform(0.7, 1.3)) for key in ("tio2", "alumina1", "carbon_black")}
    diameter = float(rng.choice([0.25, 0.30, 0.32]))
    lab = make_lab(folder / f"lab{number}", data_baseline=data, fit_baseline=fitting, true_level=levels,
                   true_diameter_um=diameter)
    lab.measure_nm = MEASURE_NM
    partition = photon_shares(data, PHOTON_SHARES_PER_PARTITION, seed=3000 + number // 8)
    shares = partition[(number % 8) * BATCHES:(number % 8 + 1) * BATCHES]
    observations = []
    for j, recorded in enumerate(batch_doses(BATCHES, seed=2000 + number)):
        made = {k: v * (1 + 0.01 * rng.standard_normal()) for k, v in recorded.items()}
        fit = lab.fit(lab.reading(made, share=shares[j], seed=4000 + 10 * number + j))
        observations.append(observation_from_fit(lab.recipe, batch_id=f"B{j}", volume_fractions=recorded,
                                                 fit=fit, measurement_id=j))
    update = update_potencies(priors_from_recipe(lab.recipe), observations)
    z = []
    for k, (key, lot) in enumerate(update.stocks):
        true = levels[key]
        if key == "tio2":
            correction = update.spectral.get((key, lot))
            at = correction.reference_nm if correction is not None else REFERENCE_NM
            label = intrinsic_table(lab.recipe, [at]).musp_per_mm[0, 0]
            real = intrinsic_table(lab.truth_recipe, [at]).musp_per_mm[0, 0]
            true *= real / label
        z.append((update.potency[k] - true) / update.potency_sd[k])
    return z, update


def test_potency_sds_cover_the_truth_over_repeated_labs(runs, record_property):
    import warnings

    data, fitting, folder = runs
    z = []
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        for number in range(LABS):
            found, _update = _one_lab(number, data, fitting, folder)
            z.extend(found)
    z = np.abs(np.array(z))
    within_1, within_2 = float(np.mean(z < 1)), float(np.mean(z < 2))
    record_property("coverage_1sd_2sd_rmsz", (within_1, within_2, float(np.sqrt(np.mean(z**2)))))
    print(f"{z.size} potencies: {within_1:.0%} within 1 SD, {within_2:.0%} within 2 SD, "
          f"RMS z {np.sqrt(np.mean(z**2)):.2f}")
    assert within_2 >= 0.90
    # and not by SDs made uselessly wide: a normal variable has 68 % within 1 SD
    assert within_1 <= 0.90


def test_measurement_scale_sd_is_recovered():
    """τ by Paule–Mandel: 60 one-stock batches whose measurements carry a 5 % scale error."""
    rng = np.random.default_rng(8)
    tau, W = 0.05, 6
    wavelength = np.linspace(600, 850, W)
    a = np.linspace(20.0, 10.0, W)
    observations = []
    for b in range(60):
        f = 0.001 * rng.uniform(0.8, 1.2)
        mua = f * a * 1.1 * (1 + tau * rng.standard_normal())
        cov = np.zeros((W, 2, 2))
        cov[:, 0, 0] = (0.002 * mua) ** 2
        cov[:, 1, 1] = np.inf
        observations.append(BatchObservation(
            batch_id=f"B{b}", stocks=(("ink", "L1"),), volume_fractions=[f], wavelength_nm=wavelength,
            intrinsic_mua_per_mm=a[None, :], intrinsic_musp_per_mm=np.zeros((1, W)), matrix_mua_per_mm=0.0,
            mua_per_mm=mua, musp_per_mm=np.full(W, np.nan), covariance=cov, dispensing_rel_sd=0.0))
    update = update_potencies([PotencyPrior("ink", "L1", 1.0, 0.5)], observations, check_outliers=False)
    # SE of an SD estimated from 59 degrees of freedom: tau / sqrt(2 * 59) (normal theory)
    assert update.scale_sd["mua"] == pytest.approx(tau, abs=3 * tau / np.sqrt(2 * 59))
    assert abs(update.potency[0] - 1.1) < 2 * update.potency_sd[0]
    assert update.potency_sd[0] == pytest.approx(1.1 * tau / np.sqrt(60), rel=0.35)


def test_hidden_lab_readings_are_correlated_across_wavelengths(runs):
    """What WAVELENGTH_CORRELATION stands for: 24 readings of one batch (4 partitions x 6 disjoint
    photon shares) fitted with the lookup; the errors of μa at two wavelengths of one reading are
    correlated (one photon share for all): 0.50 on average when this was written."""
    import warnings

    from hidden_lab import REACHABLE_DOSE

    data, fitting, folder = runs
    lab = make_lab(folder / "correlation", data_baseline=data, fit_baseline=fitting)
    truth = lab.true_optics(REACHABLE_DOSE, lab.measure_nm)
    errors = []
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        for partition in range(4):
            for j, share in enumerate(photon_shares(data, 6, seed=50 + partition)):
                fit = lab.fit(lab.reading(REACHABLE_DOSE, share=share, seed=700 + 10 * partition + j))
                errors.append(fit.mua_per_mm / truth.mua_per_mm - 1)
    correlation = np.corrcoef(np.array(errors).T)
    mean_off_diagonal = float(correlation[~np.eye(correlation.shape[0], dtype=bool)].mean())
    print(f"mean correlation of the fitted mua errors across wavelengths: {mean_off_diagonal:.2f}")
    assert 0.15 < mean_off_diagonal < 0.8
