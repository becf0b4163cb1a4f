"""Carrier and solvent bookkeeping, emulsion validity band and dependent scattering in the plan.

Check values are computed by hand from published tables typed here (Kou et al. 1993 as the
IOCCG 2018 protocols tabulate it) and from closed forms (the Percus–Yevick packing factor),
not from the code under test.
"""

from pathlib import Path

import numpy as np
import pytest

from phantomlab.materials import load_shelf
from phantomlab.recipe import parse_recipe
from phantomlab.recipe.plan import plan_for_fractions, predict, solve
from phantomlab.recipe.sheet import render_sheet_html

REPO = Path(__file__).resolve().parents[2]
DEMO = REPO / "recipes" / "demo-stocks.toml"

# Kou, Labrie & Chylek 1993 as tabulated in the IOCCG 2018 protocols (vol. 1.0, pure-water
# table): a_w [1/m] at 800 and 900 nm, the default water source's rows there
KOU_ROWS_PER_M = {800.0: 2.25, 900.0: 6.4}
# Michels, Foschum & Kienle 2008, Table 4: 20 % emulsion mus = 3.873e8 lambda^-2.397 [1/mm],
# Table 3: g = 1.090 - 6.812e-4 lambda
def michels_musp(lam):
    return 3.873e8 * lam**-2.397 * (1 - (1.090 - 6.812e-4 * lam))


@pytest.fixture(scope="module")
def shelf():
    return load_shelf(DEMO)


#: Measured at 22 °C, the temperature of the Kou et al. water table (IOCCG 2018): the batch's
#: water is then the table's rows as published.
AT_TABLE_TEMPERATURE = {"kind": "liquid", "measure_temperature_c": 22.0}


def recipe(shelf, stocks, target, **extra):
    definition = {"name": "bookkeeping test", "matrix": "water", "stocks": stocks,
                  "batch_volume_ml": 100.0, "target": target, **extra}
    return parse_recipe(definition, base_dir=DEMO.parent, shelf=shelf)


def test_five_percent_water_blanked_dye_brings_its_water(shelf):
    lam = np.array(sorted(KOU_ROWS_PER_M))
    water = np.array([KOU_ROWS_PER_M[w] for w in lam]) / 1000.0  # [1/mm]
    dye_table = np.loadtxt(REPO / "recipes" / "spectra" / "dye_blue.csv", delimiter=",", skiprows=2)
    dye = np.interp(lam, dye_table[:, 0], dye_table[:, 1])  # the stock's spectrum, water-blanked
    r = recipe(shelf, ["dye_blue"], {"wavelength_nm": lam.tolist(), "mua_per_mm": [0.1, 0.1]},
               preparation=AT_TABLE_TEMPERATURE)
    predicted = predict(r, volume_fractions={"dye_blue": 0.05})
    by_hand = 0.95 * water + 0.05 * (dye + water)  # matrix water + the stock's dye and its own water
    assert predicted.mua_per_mm == pytest.approx(by_hand, rel=1e-6)
    # without the solvent the batch would miss the displaced water's share, 5 % of water's mua
    assert np.all(predicted.mua_per_mm - (0.95 * water + 0.05 * dye) == pytest.approx(0.05 * water, rel=1e-6))


def test_water_absorbs_at_the_batch_temperature(shelf):
    """At 37 °C every share of water (matrix and the dye stock's own) takes the IOCCG 2018 ∂a/∂T."""
    from phantomlab.materials.water import water_temperature_coefficient_per_mm_per_c

    lam = np.array(sorted(KOU_ROWS_PER_M))
    coefficient, _ = water_temperature_coefficient_per_mm_per_c(lam)
    water = np.array([KOU_ROWS_PER_M[w] for w in lam]) / 1000.0 + coefficient * (37.0 - 22.0)  # [1/mm]
    dye_table = np.loadtxt(REPO / "recipes" / "spectra" / "dye_blue.csv", delimiter=",", skiprows=2)
    dye = np.interp(lam, dye_table[:, 0], dye_table[:, 1])
    r = recipe(shelf, ["dye_blue"], {"wavelength_nm": lam.tolist(), "mua_per_mm": [0.1, 0.1]},
               preparation={"kind": "liquid", "measure_temperature_c": 37.0})
    predicted = predict(r, volume_fractions={"dye_blue": 0.05})
    assert predicted.mua_per_mm == pytest.approx(0.95 * water + 0.05 * (dye + water), rel=1e-6)
    # and differs from the table-temperature batch by the coefficients' share (IOCCG 2018, pure-water table:
    # -0.0060 and -0.0070 /m per °C at 800 and 900 nm)
    at_22 = predict(recipe(shelf, ["dye_blue"], {"wavelength_nm": lam.tolist(), "mua_per_mm": [0.1, 0.1]},
                           preparation=AT_TABLE_TEMPERATURE), volume_fractions={"dye_blue": 0.05})
    assert predicted.mua_per_mm - at_22.mua_per_mm == pytest.approx(coefficient * 15.0, rel=1e-6)


def test_potency_does_not_scale_the_solvent(shelf):
    lam = [800.0, 900.0]
    r = recipe(shelf, ["dye_blue"], {"wavelength_nm": lam, "mua_per_mm": [0.1, 0.1]})
    one = predict(r, volume_fractions={"dye_blue": 0.05})
    two = predict(r, volume_fractions={"dye_blue": 0.05}, potencies={"dye_blue": (2.0, 0.0)})
    dye_table = np.loadtxt(REPO / "recipes" / "spectra" / "dye_blue.csv", delimiter=",", skiprows=2)
    dye = np.interp(lam, dye_table[:, 0], dye_table[:, 1])
    assert two.mua_per_mm - one.mua_per_mm == pytest.approx(0.05 * dye, rel=1e-9)  # only the dye doubles


def test_emulsion_plan_at_950_nm_warns_with_band_and_source(shelf):
    lam = [850.0, 900.0, 950.0]
    r = recipe(shelf, ["lipid20"], {"wavelength_nm": lam, "musp_per_mm": [1.0, 1.0, 1.0]})
    plan = solve(r, curve=False)
    assert any("wavelength 950 nm outside the 350–900 nm measured by Michels, Foschum & Kienle 2008" in w
               for w in plan.warnings)


def test_emulsion_oil_absorption_enters_the_batch(shelf):
    # van Veen et al. 2004 lard spectrum at 930 nm: 13.10 /m; oil fraction of the 20 % stock
    # 0.20 / 0.92 (lipid % w/v over soybean-oil density)
    lam = [930.0]
    r = recipe(shelf, ["lipid20"], {"wavelength_nm": lam, "musp_per_mm": [1.0]}, preparation=AT_TABLE_TEMPERATURE)
    with pytest.warns(Warning):  # 930 nm is outside the Michels band
        f_oil = 0.20 / 0.92
        with_oil = predict(r, volume_fractions={"lipid20": 0.1})
        water_only = predict(r, volume_fractions={})
    from phantomlab.materials import water_absorption_per_mm  # tested against its tables elsewhere

    # the 10 % dose replaces matrix water by its own water (1 - f_oil) and oil (f_oil)
    expected = 0.1 * f_oil * (0.01310 - float(water_absorption_per_mm(930.0)))
    assert with_oil.mua_per_mm[0] - water_only.mua_per_mm[0] == pytest.approx(expected, rel=1e-6)


def packing(phi):
    return (1 - phi) ** 4 / (1 + 2 * phi) ** 2  # Percus-Yevick S(0), Wertheim 1963 / Thiele 1963


def test_fifteen_percent_emulsion_warns_and_the_correction_applies(shelf):
    lam = [650.0, 750.0, 850.0]
    target = {"wavelength_nm": lam, "musp_per_mm": [3.0, 3.0, 3.0]}
    plain = plan_for_fractions(recipe(shelf, ["lipid20"], target), {"lipid20": 0.15}, check_target=False)
    note = [w for w in plain.warnings if "lipid20 makes up 15.0 % of the batch volume" in w]
    assert note and "predicted scattering is too high" in note[0] and "Aernouts et al. 2014" in note[0]
    corrected = plan_for_fractions(recipe(shelf, ["lipid20"], target, dependent_scattering="percus_yevick"),
                                   {"lipid20": 0.15}, check_target=False)
    phi = 0.15 * 0.20 / 0.92
    assert corrected.predicted.musp_per_mm == pytest.approx(plain.predicted.musp_per_mm * packing(phi), rel=1e-9)
    assert plain.predicted.musp_per_mm == pytest.approx(0.15 * michels_musp(np.array(lam)), rel=1e-9)
    assert any("includes the Percus–Yevick packing correction" in w for w in corrected.warnings)
    html = render_sheet_html(corrected)
    assert "makes up 15.0 % of the batch volume" in html


def test_solver_with_the_correction_reaches_a_target_made_with_it(shelf):
    lam = np.array([650.0, 750.0, 850.0])
    phi = 0.20 * 0.20 / 0.92  # 20 % v/v of the stock: particles 4.3 %, inside the 5 % solids limit
    target = {"wavelength_nm": lam.tolist(), "musp_per_mm": (0.20 * michels_musp(lam) * packing(phi)).tolist()}
    plan = solve(recipe(shelf, ["lipid20"], target, dependent_scattering="percus_yevick"), curve=False)
    assert plan.dose("lipid20").volume_fraction == pytest.approx(0.20, rel=1e-6)
    uncorrected = solve(recipe(shelf, ["lipid20"], target), curve=False)
    assert uncorrected.dose("lipid20").volume_fraction == pytest.approx(0.20 * packing(phi), rel=1e-6)


def test_unknown_dependent_scattering_model_refused(shelf):
    from phantomlab.errors import InputError

    with pytest.raises(InputError, match="dependent_scattering = 'twersky'; accepted: 'none', 'percus_yevick', 'percus_yevick_angular'"):
        recipe(shelf, ["lipid20"], {"wavelength_nm": [700.0], "musp_per_mm": [1.0]}, dependent_scattering="twersky")


def test_angular_model_gives_sphere_stocks_their_own_factors(shelf):
    # ps1000 (Mie spheres) gets the S(q)-weighted factors of its own size distribution, checked
    # against their defining integrals in tests/optics/test_dependent.py; lipid20 (an empirical
    # emulsion model, no size distribution) keeps the small-q factor W(phi)
    from phantomlab.optics.intrinsic import stock_angular_scattering
    from phantomlab.recipe.plan import intrinsic_table

    lam = [650.0, 750.0, 850.0]
    target = {"wavelength_nm": lam, "musp_per_mm": [3.0, 3.0, 3.0]}
    doses = {"ps1000": 0.6, "lipid20": 0.2}
    plain_recipe = recipe(shelf, ["ps1000", "lipid20"], target)
    angular_recipe = recipe(shelf, ["ps1000", "lipid20"], target, dependent_scattering="percus_yevick_angular")
    plain = plan_for_fractions(plain_recipe, doses, check_target=False)
    corrected = plan_for_fractions(angular_recipe, doses, check_target=False)
    table = intrinsic_table(plain_recipe, lam)
    phi = 0.6 * shelf["ps1000"].solids_volume_fraction + 0.2 * 0.20 / 0.92
    spheres = stock_angular_scattering(shelf["ps1000"], wavelength_nm=lam, matrix=shelf["water"])
    _, musp_spheres = spheres.factors(volume_fraction=phi)
    by_hand = (0.6 * table.musp_per_mm[0] * musp_spheres
               + 0.2 * table.musp_per_mm[1] * packing(phi))
    assert corrected.predicted.musp_per_mm == pytest.approx(by_hand, rel=1e-9)
    assert np.all(corrected.predicted.musp_per_mm < plain.predicted.musp_per_mm)
    assert np.all(musp_spheres > packing(phi))  # 1 um spheres: weaker reduction than the q -> 0 factor
    assert any("angular Percus–Yevick correction" in w and "ps1000" in w for w in corrected.warnings)


def test_solver_with_the_angular_model_reaches_a_target_made_with_it(shelf):
    from phantomlab.optics.intrinsic import stock_angular_scattering
    from phantomlab.recipe.plan import intrinsic_table

    lam = np.array([650.0, 750.0, 850.0])
    dose = 0.9  # of the 2.5 % w/v stock: particles about 2 % of the batch
    r0 = recipe(shelf, ["ps500"], {"wavelength_nm": lam.tolist(), "musp_per_mm": [1.0, 1.0, 1.0]})
    phi = dose * shelf["ps500"].solids_volume_fraction
    _, factor = stock_angular_scattering(shelf["ps500"], wavelength_nm=lam, matrix=shelf["water"]).factors(
        volume_fraction=phi)
    want = dose * intrinsic_table(r0, lam).musp_per_mm[0] * factor
    target = {"wavelength_nm": lam.tolist(), "musp_per_mm": want.tolist()}
    plan = solve(recipe(shelf, ["ps500"], target, dependent_scattering="percus_yevick_angular"), curve=False)
    assert plan.dose("ps500").volume_fraction == pytest.approx(dose, rel=1e-6)
