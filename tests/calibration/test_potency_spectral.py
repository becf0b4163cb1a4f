"""Spectral potency corrections: the shapes, their SDs, the solver using them, and the selection rule.

References: Legendre polynomials P₁(u) = u, P₂(u) = (3u² − 1)/2 (Abramowitz & Stegun 1964, table
22.9); the delta-method SD is checked against direct sampling of (p, coefficients) from their
normal distribution; the corrected prediction against the mixing rule written out by hand.
"""

import warnings

import numpy as np
import pytest

from phantomlab.calibration import BatchObservation, PotencyPrior, update_potencies
from phantomlab.errors import InputError
from phantomlab.recipe.spectral_potency import SpectralCorrection, legendre_shape, musp_power_law_shape

WAVELENGTH = np.linspace(600.0, 860.0, 8)


def _slope(delta_b=-0.5, potency=0.9, cov=((0.0004, 0.0001), (0.0001, 0.0025))):
    return SpectralCorrection(kind="musp_power_law", reference_nm=720.0, half_width_nm=0.0,
                              coefficients=(delta_b,), potency=potency, covariance=cov)


def test_shapes_are_one_at_the_reference_and_level_neutral():
    assert musp_power_law_shape([720.0], reference_nm=720.0, delta_b=0.7)[0] == pytest.approx(1.0)
    # (λ/λ0)^(−Δb): Δb = 1 halves μs′ when λ doubles
    assert musp_power_law_shape([1440.0], reference_nm=720.0, delta_b=1.0)[0] == pytest.approx(0.5)
    u = np.linspace(-1, 1, 2001)
    shape = legendre_shape(700 + 100 * u, centre_nm=700.0, half_width_nm=100.0, r1=0.1, r2=-0.08)
    assert np.trapezoid(shape, u) / 2 == pytest.approx(1.0, abs=1e-6)  # P1, P2 average to 0 on [-1, 1]
    # held constant beyond the band
    beyond = legendre_shape([500.0, 1000.0], centre_nm=700.0, half_width_nm=100.0, r1=0.1, r2=-0.08)
    assert beyond == pytest.approx(legendre_shape([600.0, 800.0], centre_nm=700.0, half_width_nm=100.0,
                                                  r1=0.1, r2=-0.08))


def test_relative_sd_is_the_delta_method_of_sampled_parameters():
    correction = _slope()
    rng = np.random.default_rng(3)
    draws = rng.multivariate_normal([0.9, -0.5], np.array(correction.covariance), size=200_000)
    samples = draws[:, :1] * musp_power_law_shape(WAVELENGTH[None, :], reference_nm=720.0, delta_b=draws[:, 1:2])
    sampled = samples.std(axis=0) / samples.mean(axis=0)
    np.testing.assert_allclose(correction.relative_sd(WAVELENGTH), sampled, rtol=0.02)
    # at the reference wavelength only the level's SD remains
    assert correction.relative_sd([720.0])[0] == pytest.approx(0.02 / 0.9)


def test_json_round_trip_and_refusals():
    correction = _slope()
    again = SpectralCorrection.from_json(correction.to_json())
    assert again == correction
    with pytest.raises(InputError, match="kind 'tilt'"):
        SpectralCorrection(kind="tilt", reference_nm=700, half_width_nm=0, coefficients=(0.1,), potency=1,
                           covariance=((1, 0), (0, 1)))
    with pytest.raises(InputError, match="covariance must be 3 x 3"):
        SpectralCorrection(kind="mua_legendre", reference_nm=700, half_width_nm=100, coefficients=(0.1, 0.0),
                           potency=1, covariance=((1, 0), (0, 1)))


def test_the_solver_predicts_with_the_corrected_spectrum(demo_recipe):
    from phantomlab.recipe import predict
    from phantomlab.recipe.plan import intrinsic_table

    recipe = demo_recipe
    fractions = {"lipid20": 0.04, "ink_black": 4e-5, "dye_nir": 2e-5}
    grid = recipe.target.wavelength_nm
    correction = SpectralCorrection(kind="musp_power_law", reference_nm=750.0, half_width_nm=0.0,
                                    coefficients=(0.3,), potency=1.2, covariance=((1e-4, 0.0), (0.0, 1e-4)))
    lot = recipe.stock("lipid20").lot
    plain = predict(recipe, volume_fractions=fractions, potencies={"lipid20": (1.2, 0.01, lot)})
    bent = predict(recipe, volume_fractions=fractions, potencies={"lipid20": (1.2, 0.01, lot, correction)})
    table = intrinsic_table(recipe, grid)
    i = table.stock_keys.index("lipid20")
    by_hand = plain.musp_per_mm + 0.04 * 1.2 * table.musp_per_mm[i] * ((grid / 750.0) ** -0.3 - 1.0)
    np.testing.assert_allclose(bent.musp_per_mm, by_hand, rtol=1e-10)
    np.testing.assert_allclose(bent.mua_per_mm, plain.mua_per_mm, rtol=1e-12)  # only μs′ bends
    # at the reference the SDs agree; away from it Δb's SD enters (relative to the value)
    at = list(grid).index(750.0)
    assert bent.musp_sd_per_mm[at] == pytest.approx(plain.musp_sd_per_mm[at], rel=1e-9)
    far = int(np.argmax(np.abs(grid - 750)))
    assert bent.musp_sd_per_mm[far] / bent.musp_per_mm[far] > plain.musp_sd_per_mm[far] / plain.musp_per_mm[far]
    # a correction of another lot is ignored with its potency
    other = predict(recipe, volume_fractions=fractions, potencies={"lipid20": (1.2, 0.01, "old-lot", correction)})
    np.testing.assert_allclose(other.musp_per_mm, predict(recipe, volume_fractions=fractions).musp_per_mm)


@pytest.fixture
def demo_recipe():
    from pathlib import Path

    from phantomlab.recipe import load_recipe

    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        return load_recipe(Path(__file__).resolve().parents[2] / "recipes" / "demo-nir-liquid.toml")


def _absorber_batches(*, tilt: float, batches: int, wavelengths: int = 8, seed: int = 2):
    """One absorber whose true spectrum is the label's times (1 + tilt·u); 1 % fit noise."""
    rng = np.random.default_rng(seed)
    wavelength = np.linspace(600.0, 860.0, wavelengths)
    u = (wavelength - 730.0) / 130.0
    label = 10.0 * np.exp(-((wavelength - 700.0) / 150.0) ** 2)
    out = []
    for b in range(batches):
        f = 0.001 * (1 + 0.2 * b)
        true = f * label * 1.2 * (1 + tilt * u)
        cov = np.zeros((wavelengths, 2, 2))
        cov[:, 0, 0] = (0.01 * true) ** 2
        cov[:, 1, 1] = np.inf
        out.append(BatchObservation(
            batch_id=f"B{b}", stocks=(("dye", "D1"),), volume_fractions=[f], wavelength_nm=wavelength,
            intrinsic_mua_per_mm=label[None, :], intrinsic_musp_per_mm=np.zeros((1, wavelengths)),
            matrix_mua_per_mm=0.0, mua_per_mm=true * (1 + 0.01 * rng.standard_normal(wavelengths)),
            musp_per_mm=np.full(wavelengths, np.nan), covariance=cov, dispensing_rel_sd=0.01))
    return out


def test_an_absorber_shape_error_is_learnt_when_the_data_support_it():
    prior = [PotencyPrior("dye", "D1", 1.0, 0.3)]
    update = update_potencies(prior, _absorber_batches(tilt=0.15, batches=4))
    correction = update.spectral[("dye", "D1")]
    assert correction.kind == "mua_legendre"
    r1, r2 = correction.coefficients
    assert abs(r1 - 0.15) < 3 * correction.coefficient_sd()[0]
    assert abs(r2) < 3 * correction.coefficient_sd()[1]


def test_no_shape_error_means_no_correction():
    update = update_potencies([PotencyPrior("dye", "D1", 1.0, 0.3)], _absorber_batches(tilt=0.0, batches=4))
    assert not update.spectral
    (entry,) = update.selection
    assert entry["used"] is False and "QBIC drops by" in entry["reason"]


@pytest.mark.parametrize("batches, wavelengths, words", [(2, 8, "used in 2 batch(es); the rule needs at least 3"),
                                                         (4, 4, "4 wavelength(s) measured; the rule needs at least 5")])
def test_too_little_data_is_not_eligible(batches, wavelengths, words):
    update = update_potencies([PotencyPrior("dye", "D1", 1.0, 0.3)],
                              _absorber_batches(tilt=0.15, batches=batches, wavelengths=wavelengths))
    assert not update.spectral
    (entry,) = update.selection
    assert entry["eligible"] is False and entry["reason"] == words


def test_tio2_size_error_follows_the_power_law(tmp_path):
    """The claim of spectral_potency's docstring: the μs′ ratio of lognormal rutile 0.32 to 0.25 µm
    follows a power law within 0.5 % over 650–860 nm (our Mie series, held to scattnlay in
    tests/optics/test_mie.py)."""
    from hidden_lab import make_lab

    from phantomlab.recipe.plan import intrinsic_table

    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        lab = make_lab(tmp_path, data_baseline=object(), fit_baseline=object())
        grid = np.arange(650.0, 861.0, 30.0)
        label = intrinsic_table(lab.recipe, grid)
        truth = intrinsic_table(lab.truth_recipe, grid)
    i = label.stock_keys.index("tio2")
    log_ratio = np.log(truth.musp_per_mm[i] / label.musp_per_mm[i])
    x = np.log(grid / 750.0)
    slope, intercept = np.polyfit(x, log_ratio, 1)
    assert np.max(np.abs(log_ratio - (slope * x + intercept))) < 0.005
    assert slope == pytest.approx(0.57, abs=0.03)  # Δb ≈ −0.57 in silicone: larger grains, flatter μs′


def test_the_top_up_mixes_with_the_corrected_spectrum(demo_recipe):
    """Mixing is linear in volume: the top-up's predicted optics must be those of the final doses
    predicted with the same corrected potency (mass balance of undiluted stock)."""
    from phantomlab.calibration.correction import top_up
    from phantomlab.recipe import predict

    recipe = demo_recipe
    lot = recipe.stock("lipid20").lot
    correction = SpectralCorrection(kind="musp_power_law", reference_nm=750.0, half_width_nm=0.0,
                                    coefficients=(0.4,), potency=1.1, covariance=((1e-4, 0.0), (0.0, 1e-4)))
    potencies = {"lipid20": (1.1, 0.01, lot, correction)}
    weak = {"lipid20": 0.03, "ink_black": 3e-5, "dye_nir": 2e-5}
    measured = predict(recipe, volume_fractions=weak, potencies=potencies).to_json()
    measured.update(mua_sd_per_mm=[1e-4] * len(measured["wavelength_nm"]),
                    musp_sd_per_mm=[1e-3] * len(measured["wavelength_nm"]))
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        plan = top_up(recipe, current_volume_ml=400.0, measured=measured, potencies=potencies)
    added = {a["stock"]: a["volume_ml"] for a in plan.additions}
    final = {k: (400.0 * weak[k] + added[k]) / plan.final_volume_ml for k in weak}
    expected = predict(recipe, volume_fractions=final, potencies=potencies)
    np.testing.assert_allclose(plan.predicted_musp_per_mm, expected.musp_per_mm, rtol=1e-6)
    np.testing.assert_allclose(plan.predicted_mua_per_mm, expected.mua_per_mm, rtol=1e-6)
