"""Blood as a stock: μa at a given sO₂ by hand from the tables, red-cell scattering against
published whole-blood values, isosbestic points, and sO₂ refusals."""

import math

import numpy as np
import pytest

from phantomlab.errors import InputError
from phantomlab.materials.blood import (
    blood_mua_per_mm,
    check_so2,
    isosbestic_points_nm,
    red_cell_scattering_Meinke2007,
)


@pytest.mark.parametrize("so2", [0.0, 0.25, 0.5, 0.75, 1.0])
def test_blood_mua_by_hand(so2):
    # 150 g/L at 800 nm, Gratzer & Kollias (Prahl 1999): HbO2 816, Hb 761.72 1/(M cm) per tetramer
    molar = 150.0 / 64500.0
    expected_per_cm = math.log(10) * molar * (so2 * 816 + (1 - so2) * 761.72)
    assert float(blood_mua_per_mm(wavelength_nm=800.0, haemoglobin_g_per_l=150.0, so2=so2)) == pytest.approx(
        expected_per_cm / 10, rel=1e-12)


def test_oxygenated_whole_blood_at_800_nm_is_a_few_per_cm():
    # Whole blood at 150 g/L absorbs about 4-5 /cm near 800 nm (common practice, no source);
    # a per-heme slip would give 1.1 or 17 /cm.
    assert 0.35 < float(blood_mua_per_mm(wavelength_nm=800.0, haemoglobin_g_per_l=150.0, so2=0.98)) < 0.5


def test_red_cell_scattering_linear_terms_by_hand():
    # Meinke et al. 2007 standard blood at 800 nm: mus 30.8 /mm, mus' 0.407 /mm; H = 0.45
    mus, g = red_cell_scattering_Meinke2007(wavelength_nm=np.array([800.0]), haematocrit=0.45)
    assert mus[0] == pytest.approx(0.1268 * 45 * 30.8, rel=1e-12)
    assert g[0] == pytest.approx(1 - (0.1167 * 45 * 0.407) / (0.1268 * 45 * 30.8), rel=1e-12)


def test_standard_table_with_the_model_function_matches_an_independent_measurement():
    """Friebel et al. 2009, J Biomed Opt 14:034001 (abstract): red cells at Hct 33.2 %, "above
    600 nm mus decreases continuously from values of 85 mm-1". Meinke et al. 2007's full model
    function at Hct 33.2 % on the shipped 600 nm row must land there (within 5 %)."""
    mus_linear, _ = red_cell_scattering_Meinke2007(wavelength_nm=np.array([600.0]), haematocrit=1.0 / 100)
    mus_standard = mus_linear[0] / 0.1268  # the table's row: mus,st(600 nm)
    assert mus_standard == pytest.approx(33.9, rel=1e-12)
    hct = 33.2
    full = (-0.0015 * hct**2 + 0.1268 * hct) * mus_standard
    assert full == pytest.approx(85.0, rel=0.05)


def test_red_cells_scatter_forward():
    mus, g = red_cell_scattering_Meinke2007(wavelength_nm=np.arange(450.0, 1001.0, 50.0), haematocrit=0.4)
    assert np.all(g > 0.95) and np.all(g < 1) and np.all(mus > 0)


def test_isosbestic_points_of_the_tables():
    gratzer = isosbestic_points_nm(band_nm=(480, 1000))
    assert gratzer == pytest.approx([500.1, 529.2, 545.3, 570.2, 584.1, 796.8], abs=0.1)
    # Takatani & Graham print their isosbestic rows with equal columns
    assert list(isosbestic_points_nm(source="takatani-graham")) == [507, 522, 549, 569, 586, 815]


@pytest.mark.parametrize("value", [-0.01, 1.01, 97.0, float("nan")])
def test_so2_outside_0_1_refused(value):
    with pytest.raises(InputError, match="outside 0-1|not a number"):
        check_so2(value)


def test_haematocrit_refused_outside_range():
    with pytest.raises(InputError, match="haematocrit: 45 is not a fraction"):
        red_cell_scattering_Meinke2007(wavelength_nm=800.0, haematocrit=45)
