"""The verdict and the misfit-scaled SDs of every fit (phantomlab.calibration.fit_quality).

The χ² reference values come from scipy.stats (an independent implementation of the χ²
distribution); the data from the diffusion models and the Monte Carlo fixtures.
"""

import json
from dataclasses import replace

import numpy as np
from scipy.stats import chi2

from phantomlab.calibration.fit_file import fit_measurement
from phantomlab.calibration.fit_quality import (
    POOR_MIN_CHI2_RED,
    POOR_P_VALUE,
    SD_PARTS,
    assess_fit,
    misfit_flags,
    wavelength_dof,
)
from phantomlab.calibration.measurement_metadata import MeasurementMetadata
from phantomlab.calibration.measurements import Measurement
from phantomlab.transport.diffusion import srdr_reflectance

WL = np.linspace(600.0, 900.0, 101)
RHO = np.linspace(2.0, 12.0, 20)
MUA = 0.004 + 0.01 * np.exp(-((WL - 700) / 40) ** 2)
MUSP = 1.2 * (WL / 700) ** -1.3


def _measurement(values, sd, scale="absolute", kind="srdr", axis=RHO):
    return Measurement(kind=kind, scale=scale, wavelength_nm=WL, axis=axis, values=values, sd=sd,
                       source="test data (diffusion model + noise)", metadata=MeasurementMetadata(n=1.4))


def _data(model, *, noise, claimed, seed=3):
    R = srdr_reflectance(mua_per_mm=MUA, musp_per_mm=MUSP, rho_mm=RHO, n=1.4, model=model)
    values = R * (1 + noise * np.random.default_rng(seed).standard_normal(R.shape))
    return values, claimed * R


def test_misfit_rule_needs_both_significance_and_size():
    # p-values from scipy.stats.chi2: at 12 000 degrees of freedom chi2_red = 1.1 is
    # overwhelmingly significant (p ~ 1e-27) but small: not poor.  At 18 degrees of freedom
    # chi2_red = 2.1 is large but not significant at 0.001 (its 0.999 quantile / 18 = 2.35).
    assert chi2.sf(1.1 * 12000, 12000) < 1e-13
    assert not misfit_flags(1.1, 12000)
    assert misfit_flags(2.1, 12000)
    threshold = chi2.isf(POOR_P_VALUE, 18) / 18
    assert threshold > POOR_MIN_CHI2_RED
    assert not misfit_flags(threshold * 0.99, 18) and misfit_flags(threshold * 1.01, 18)
    # 601 wavelengths tested together: the per-wavelength threshold is Bonferroni-corrected
    assert misfit_flags(threshold * 1.01, 18, tests=1) and not misfit_flags(threshold * 1.01, 18, tests=601)
    assert not misfit_flags(np.nan, 18) and not misfit_flags(5.0, np.nan)


def test_matched_data_whose_sds_are_ten_percent_small_is_good_and_sds_grow():
    # noise 1.1 %, stated 1 %: chi2_red about 1.2 over 1818 degrees of freedom, p far below
    # 0.001, but the systematic part is nil: good; every SD with chi2_red > 1 grows by its root
    values, sd = _data("kienle1997", noise=0.011, claimed=0.01)
    from phantomlab.calibration.fit_srdr import fit_srdr

    raw = fit_srdr(_measurement(values, sd), model="kienle1997", min_transport_mfp=0)
    fit = assess_fit(replace(raw, model_covariance=None))
    assert 1.1 < fit.chi2_red < 1.35 and chi2.sf(fit.chi2_red * fit.dof, fit.dof) < POOR_P_VALUE
    assert fit.fit_quality == "good", fit.fit_quality_reason
    assert "small systematic misfit" in fit.fit_quality_reason
    factor = np.sqrt(np.maximum(raw.chi2_red_per_wavelength, 1.0))
    np.testing.assert_allclose(fit.mua_sd_per_mm, raw.mua_sd_per_mm * factor, rtol=1e-12)
    np.testing.assert_allclose(fit.musp_sd_per_mm, raw.musp_sd_per_mm * factor, rtol=1e-12)
    assert fit.sd_includes == ("measurement_sd", "misfit_scale")
    assert np.all(wavelength_dof(fit) == RHO.size - 2)


def test_model_that_does_not_describe_the_data_is_poor_everywhere():
    # data made by the flux-only model (8-21 % below the fluence-plus-flux one at n = 1.4),
    # fitted with kienle1997 at 1 % noise
    values, sd = _data("farrell1992", noise=0.01, claimed=0.01)
    fit = fit_measurement(_measurement(values, sd), model="kienle1997")
    assert fit.fit_quality == "poor"
    assert fit.fit_quality_reason.startswith("the model does not describe these data")
    payload = json.loads(json.dumps(fit.to_json()))
    assert payload["fit_quality"] == "poor" and payload["fit_quality_reason"] == fit.fit_quality_reason
    assert "misfit_scale" in payload["sd_includes"]


def test_a_band_the_model_misses_is_named():
    # matched data except 702-750 nm, where a 10 % step over the far distances is no R(rho)
    values, sd = _data("kienle1997", noise=0.01, claimed=0.01, seed=4)
    band = (WL >= 700) & (WL <= 750)
    values[band] *= 1 + 0.10 * (RHO > 7)
    fit = fit_measurement(_measurement(values, sd), model="kienle1997")
    assert fit.fit_quality == "poor", fit.fit_quality_reason
    assert "at 702-750 nm (17 of 101 wavelengths)" in fit.fit_quality_reason
    quiet = fit_measurement(_measurement(*_data("kienle1997", noise=0.01, claimed=0.01, seed=4)), model="kienle1997")
    assert quiet.fit_quality == "good", quiet.fit_quality_reason


def test_failed_fits():
    values, sd = _data("kienle1997", noise=0.01, claimed=0.01)
    from phantomlab.calibration.fit_srdr import fit_srdr

    fit = fit_srdr(_measurement(values, sd), model="kienle1997")
    nan = fit.mua_per_mm.copy()
    nan[3] = np.nan
    broken = assess_fit(replace(fit, mua_per_mm=nan))
    assert broken.fit_quality == "failed" and "non-finite values at 609 nm" in broken.fit_quality_reason
    stuck = assess_fit(replace(fit, converged=False))
    assert stuck.fit_quality == "failed" and "did not converge" in stuck.fit_quality_reason
    blind = assess_fit(replace(fit, mua_sd_per_mm=np.full(WL.size, np.inf), musp_sd_per_mm=np.full(WL.size, np.inf),
                               covariance=np.full((WL.size, 2, 2), np.inf)))
    assert blind.fit_quality == "failed" and "determine neither" in blind.fit_quality_reason


def test_no_sd_column_and_direct_optics_have_no_test_of_fit():
    values, _ = _data("kienle1997", noise=0.01, claimed=0.01)
    fit = fit_measurement(_measurement(values, None), model="kienle1997")
    assert fit.fit_quality == "good" and fit.fit_quality_reason.startswith("no test of fit")
    assert fit.sd_includes[0] == "residual_scatter"
    optics = Measurement(kind="optics", scale="absolute", wavelength_nm=WL, axis=np.array([0.0, 1.0]),
                         values=np.column_stack([MUA, MUSP]), sd=np.column_stack([0.02 * MUA, 0.02 * MUSP]),
                         source="test", metadata=MeasurementMetadata())
    direct = fit_measurement(optics)
    assert direct.fit_quality == "good" and "taken as measured" in direct.fit_quality_reason
    assert direct.sd_includes == ("as_measured",)
    np.testing.assert_allclose(direct.mua_sd_per_mm, 0.02 * MUA)


def test_every_sd_part_is_described_and_assessment_is_done_once():
    values, sd = _data("farrell1992", noise=0.01, claimed=0.01)
    fit = fit_measurement(_measurement(values, sd), model="kienle1997")
    assert set(fit.sd_includes) <= set(SD_PARTS)
    assert assess_fit(fit) is fit  # a second assessment does not scale the SDs again


def test_cli_table_puts_the_verdict_above_the_numbers(tmp_path):
    from phantomlab.commands.fit import _table

    values, sd = _data("farrell1992", noise=0.01, claimed=0.01)
    fit = fit_measurement(_measurement(values, sd), model="kienle1997")
    lines = _table(fit).splitlines()
    assert lines[1] == "fit quality: POOR"
    assert fit.fit_quality_reason.startswith("the model does not describe these data")
    assert lines[2].strip() == fit.fit_quality_reason
    assert lines[3].startswith("SDs include: measurement sd, misfit scale")
