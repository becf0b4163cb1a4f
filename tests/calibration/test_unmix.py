"""Unmixing μa into sO₂, total haemoglobin and water, on independent synthetic spectra.

The synthetic spectra are made here by a separate, simple computation: μa = ln(10)/10 ·
1e-6 · (ε_HbO2 · c_HbO2 + ε_Hb · c_Hb) + f_water · μa_water, with ε typed below from the
printed rows of the Gratzer & Kollias table (Prahl 1999 compilation, omlc.org) at exactly
the wavelengths used (no interpolation), and the water spectrum as a given input.  1 % noise
(relative, Gaussian, fixed seed) is added and the unmixing must recover the truth; its SDs
are checked for coverage over the noisy copies.
"""

import json
import math

import numpy as np
import pytest

from phantomlab.calibration.fit_json_spectrum import spectrum_from_fit_json
from phantomlab.calibration.unmix import CONDITION_WARN, parse_chromophore_list, unmix_spectrum
from phantomlab.errors import InputError
from phantomlab.materials.water import water_absorption_per_mm

# Gratzer & Kollias (Prahl 1999 compilation), 1/(M cm) per mole of tetramer: (nm, HbO2, Hb).
NIR_ROWS = [
    (650, 368, 3750.12),
    (660, 319.6, 3226.56),
    (670, 294, 2795.12),
    (680, 277.6, 2407.92),
    (690, 276, 2051.96),
    (700, 290, 1794.28),
    (710, 314, 1540.48),
    (720, 348, 1325.88),
    (730, 390, 1102.2),
    (740, 446, 1115.88),
    (750, 518, 1405.24),
    (760, 586, 1548.52),
    (770, 650, 1311.88),
    (780, 710, 1075.44),
    (790, 756, 890.8),
    (800, 816, 761.72),
    (810, 864, 717.08),
    (820, 916, 693.76),
    (830, 974, 693.04),
    (840, 1022, 692.36),
    (850, 1058, 691.32),
    (860, 1092, 694.32),
    (870, 1128, 705.84),
    (880, 1154, 726.44),
    (890, 1178, 743.6),
    (900, 1198, 761.84),
    (910, 1214, 774.56),
    (920, 1224, 777.36),
    (930, 1222, 763.84),
    (940, 1214, 693.44),
    (950, 1204, 602.24),
    (960, 1186, 525.56),
    (970, 1162, 429.32),
    (980, 1128, 359.656),
    (990, 1080, 283.22),
    (1000, 1024, 206.784),
]
VISIBLE_ROWS = [
    (500, 20932.8, 20862),
    (504, 20418, 22803.6),
    (508, 19996, 24745.2),
    (512, 20150.4, 26936.8),
    (516, 21001.6, 29263.2),
    (520, 24202.4, 31589.6),
    (524, 29269.2, 34397.6),
    (528, 35990, 37490),
    (532, 43876, 40584),
    (536, 49752, 43592),
    (540, 53236, 46592),
    (544, 52096, 49708),
    (548, 46660, 52496),
    (552, 39675.2, 54080),
    (556, 34476.8, 54540),
    (560, 32613.2, 53788),
    (564, 33915.6, 50572),
    (568, 40172, 46948),
    (572, 49172, 43340),
    (576, 55540, 40092),
    (580, 50104, 37020),
    (584, 34639.6, 34332.8),
    (588, 19763.2, 31075.2),
    (592, 10468.4, 25470),
    (596, 5683.6, 19800),
    (600, 3200, 14677.2),
]

LEVELS = (0.0, 0.25, 0.5, 0.75, 1.0)
THB_UM = 25.0  # about 1 % v/v whole blood at 150 g/L: 0.01 * 150 / 64500 * 1e6 = 23 uM
WATER_FRACTION = 0.98
COPIES = 100


def synthetic_mua(rows, *, so2, thb_um, water_fraction):
    table = np.array(rows, dtype=float)
    wavelength = table[:, 0]
    haemoglobin = math.log(10) / 10 * 1e-6 * thb_um * (so2 * table[:, 1] + (1 - so2) * table[:, 2])
    if water_fraction == 0:
        return wavelength, haemoglobin
    return wavelength, haemoglobin + water_fraction * water_absorption_per_mm(wavelength)


def noisy_unmixing(rows, so2, seed, copies=COPIES):
    # Water only in the NIR set: below 600 nm it absorbs < 0.5 % of this phantom's μa and the
    # visible set unmixes HbO2 and Hb alone.
    chromophores = ("hbo2", "hb", "water") if rows is NIR_ROWS else ("hbo2", "hb")
    water = WATER_FRACTION if "water" in chromophores else 0.0
    wavelength, truth = synthetic_mua(rows, so2=so2, thb_um=THB_UM, water_fraction=water)
    sd = 0.01 * truth
    rng = np.random.default_rng(seed)
    results = []
    for _ in range(copies):
        noisy = truth + sd * rng.standard_normal(truth.size)
        results.append(unmix_spectrum(wavelength_nm=wavelength, mua_per_mm=noisy, mua_sd_per_mm=sd,
                                      chromophores=chromophores))
    return results


@pytest.mark.filterwarnings("ignore::phantomlab.errors.PhantomlabWarning")
@pytest.mark.parametrize(
    "rows, name", [(NIR_ROWS, "650-1000 nm every 10 nm, hbo2,hb,water"), (VISIBLE_ROWS, "500-600 nm every 4 nm, hbo2,hb")]
)
@pytest.mark.parametrize("so2", LEVELS)
def test_recovers_so2_and_total_haemoglobin(rows, name, so2):
    results = noisy_unmixing(rows, so2, seed=int(1000 * so2) + len(rows))
    so2_errors = np.array([r.so2 - so2 for r in results])
    thb_errors = np.array([r.thb_um / THB_UM - 1 for r in results])
    # Every noisy copy within 0.02 in sO2 and 3 % in total haemoglobin, allowing one copy in
    # a hundred beyond (a 3-SD excursion at sO2 = 0, where the SD is largest).  No bias inside
    # 0-1; at 0 and 1 the non-negativity folds half the noise back (mean about 0.4 SD inward).
    assert np.mean(np.abs(so2_errors) <= 0.02) >= 0.99, (name, np.abs(so2_errors).max())
    assert np.mean(np.abs(thb_errors) <= 0.03) >= 0.99, (name, np.abs(thb_errors).max())
    assert abs(so2_errors.mean()) < (0.003 if 0 < so2 < 1 else 0.006)
    assert abs(thb_errors.mean()) < 0.005
    assert all(r.condition_number < CONDITION_WARN and not r.warnings for r in results)


@pytest.mark.filterwarnings("ignore::phantomlab.errors.PhantomlabWarning")
@pytest.mark.parametrize("rows", [NIR_ROWS, VISIBLE_ROWS])
def test_sds_cover_the_truth(rows):
    """The printed SDs of sO2 and total haemoglobin are claims: checked on 400 copies."""
    z_so2, z_thb = [], []
    for so2 in (0.25, 0.5, 0.75):  # inside the bounds, where the linear covariance applies
        for r in noisy_unmixing(rows, so2, seed=7 + int(100 * so2), copies=400):
            z_so2.append((r.so2 - so2) / r.so2_sd)
            z_thb.append((r.thb_um - THB_UM) / r.thb_sd_um)
    for z in (np.abs(z_so2), np.abs(z_thb)):
        assert 0.62 <= np.mean(z < 1) <= 0.75  # normal: 0.683
        assert 0.93 <= np.mean(z < 2) <= 0.975  # normal: 0.954
        assert np.mean(z < 3) >= 0.99


@pytest.mark.filterwarnings("ignore::phantomlab.errors.PhantomlabWarning")
def test_chi2_red_near_one_with_true_sds():
    results = noisy_unmixing(NIR_ROWS, 0.5, seed=3, copies=200)
    assert np.mean([r.chi2_red for r in results]) == pytest.approx(1.0, abs=0.08)
    assert results[0].dof == len(NIR_ROWS) - 3


def test_isosbestic_wavelengths_only_are_flagged():
    # Gratzer & Kollias rows at the isosbestic points near 500, 544, 570, 584 and 796 nm: HbO2
    # and Hb absorb alike, so the split between them is not determined.
    rows = [(500, 20932.8, 20862), (544, 52096, 49708), (570, 44496, 45072), (584, 34639.6, 34332.8), (796, 786.4, 802.96)]
    wavelength, truth = synthetic_mua(rows, so2=0.5, thb_um=THB_UM, water_fraction=0.0)
    result = unmix_spectrum(wavelength_nm=wavelength, mua_per_mm=truth, mua_sd_per_mm=0.01 * truth, chromophores=("hbo2", "hb"))
    assert result.condition_number > CONDITION_WARN
    assert any("cannot separate hbo2, hb well" in w for w in result.warnings)
    assert any("sO2 SD" in w for w in result.warnings)
    assert result.thb_um == pytest.approx(THB_UM, rel=0.02)  # the total is still found


def test_without_sds_relative_residuals_and_no_chi2():
    wavelength, truth = synthetic_mua(NIR_ROWS, so2=0.6, thb_um=THB_UM, water_fraction=WATER_FRACTION)
    noisy = truth * (1 + 0.01 * np.random.default_rng(5).standard_normal(truth.size))
    result = unmix_spectrum(wavelength_nm=wavelength, mua_per_mm=noisy, chromophores=("hbo2", "hb", "water"))
    assert result.chi2_red is None
    assert result.so2 == pytest.approx(0.6, abs=0.02) and result.thb_um == pytest.approx(THB_UM, rel=0.03)
    assert 0.001 < result.so2_sd < 0.02  # scaled by the residual spread of 1 % noise


def test_json_keys():
    wavelength, truth = synthetic_mua(NIR_ROWS, so2=0.6, thb_um=THB_UM, water_fraction=WATER_FRACTION)
    payload = unmix_spectrum(wavelength_nm=wavelength, mua_per_mm=truth, mua_sd_per_mm=0.01 * truth).to_json()
    assert list(payload)[:8] == ["so2", "so2_sd", "thb_um", "thb_sd_um", "water_fraction", "chi2_red",
                                 "condition_number", "warnings"]
    assert payload["so2"] == pytest.approx(0.6, abs=1e-9) and payload["water_fraction"] == pytest.approx(0.98, rel=1e-9)
    assert "lipid_fraction" not in payload and "tetramer" in payload["basis"]
    json.dumps(payload, allow_nan=False)


def test_spectrum_from_fit_json():
    text = json.dumps({"wavelength_nm": [700, 800], "mua_per_mm": [0.01, 0.02], "mua_sd_per_mm": [0.001, None]})
    wavelength, mua, sd = spectrum_from_fit_json(text)
    assert sd is None and mua.tolist() == [0.01, 0.02]
    with pytest.raises(InputError, match="not JSON"):
        spectrum_from_fit_json("wavelength_nm,mua_per_mm")
    with pytest.raises(InputError, match="no wavelength_nm and mua_per_mm"):
        spectrum_from_fit_json("{}")


@pytest.mark.parametrize(
    "text, message",
    [
        ("hbo2,water", "give both hbo2 and hb"),
        ("hbo2,hb,blood", "unknown blood; known: hbo2, hb, methb, cohb, water, lipid \\(a recipe.s absorber stock: phantomlab unmix --recipe\\)"),
        ("hbo2,hb,hb", "each name once"),
    ],
)
def test_chromophore_list_refusals(text, message):
    with pytest.raises(InputError, match=message):
        parse_chromophore_list(text)


def test_bad_spectra_refused():
    with pytest.raises(InputError, match="2 wavelengths for 3 chromophores"):
        unmix_spectrum(wavelength_nm=[700, 800], mua_per_mm=[0.01, 0.02])
    with pytest.raises(InputError, match="SD must be a finite number > 0"):
        unmix_spectrum(wavelength_nm=[700, 800, 900], mua_per_mm=[0.01, 0.02, 0.03], mua_sd_per_mm=[0.001, 0, 0.001])
    with pytest.raises(InputError, match="each wavelength once"):
        unmix_spectrum(wavelength_nm=[700, 700, 900], mua_per_mm=[0.01, 0.02, 0.03])


def test_lipid_column_recovered_without_noise():
    from phantomlab.materials.solvents import lipid_absorption_vanVeen2004

    wavelength, truth = synthetic_mua(NIR_ROWS, so2=0.4, thb_um=THB_UM, water_fraction=0.9)
    truth = truth + 0.05 * lipid_absorption_vanVeen2004(wavelength_nm=wavelength)  # 5 % v/v oil, invented
    result = unmix_spectrum(wavelength_nm=wavelength, mua_per_mm=truth, mua_sd_per_mm=0.01 * truth,
                            chromophores=("hbo2", "hb", "water", "lipid"))
    assert result.so2 == pytest.approx(0.4, abs=1e-9) and result.amounts["lipid"] == pytest.approx(0.05, rel=1e-6)
    payload = result.to_json()
    assert payload["lipid_fraction"] == pytest.approx(0.05, rel=1e-6) and payload["lipid_fraction_sd"] > 0
