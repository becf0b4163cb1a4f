"""Refractive-index formulas against their published values and an independent IAPWS library."""

import numpy as np
import pytest

from phantomlab.errors import InputError, PhantomlabWarning
from phantomlab.materials import (
    INDEX_MODELS,
    alumina_index_MalitsonDodge1972,
    pmma_index_Sultanova2009,
    polystyrene_index_Ma2003,
    refractive_index,
    rutile_index_DeVore1951,
    silica_index_Malitson1965,
    water_density_Kell1975,
    water_index_IAPWS1997,
)

# ---- water: IAPWS R9-97 ------------------------------------------------------------------------


@pytest.mark.parametrize(
    "wavelength_um, expected",
    [
        (0.2265, 1.39277824),  # IAPWS R9-97 verification value, 298.15 K, 997.047435 kg/m3
        (0.5893, 1.33285819),  # IAPWS R9-97 verification value, 298.15 K, 997.047435 kg/m3
    ],
)
def test_water_iapws_verification_values(wavelength_um, expected):
    n = water_index_IAPWS1997(
        wavelength_nm=wavelength_um * 1000, temperature_c=25.0, density_kg_m3=997.047435
    )
    assert n == pytest.approx(expected, abs=1e-8)  # the release prints 8 decimals


def test_water_index_matches_independent_iapws_library():
    from iapws._iapws import _Refractive  # independent implementation (registry package iapws)

    for t_c in (1.0, 20.0, 37.0, 80.0):
        rho = float(water_density_Kell1975(temperature_c=t_c)) * 1000.0
        for lam_um in (0.25, 0.4, 0.6328, 0.85, 1.05):
            ours = water_index_IAPWS1997(wavelength_nm=lam_um * 1000, temperature_c=t_c)
            assert ours == pytest.approx(_Refractive(rho, t_c + 273.15, lam_um), abs=1e-9)


def test_water_density_kell_matches_iapws95():
    from iapws import IAPWS95  # independent: IAPWS-95 at 1 atm

    for t_c in (0.5, 4.0, 20.0, 37.0, 60.0, 90.0):
        reference = IAPWS95(T=273.15 + t_c, P=0.101325).rho / 1000.0
        # Kell 1975 (IPTS-68, air-free) and IAPWS-95 agree to about 1e-5 over 0-90 degC
        assert water_density_Kell1975(temperature_c=t_c) == pytest.approx(reference, rel=2e-5)


def test_water_density_maximum_near_4_c():
    # Liquid water is densest at 3.98 degC (Kell 1975, Table; from memory)
    t = np.linspace(0, 10, 1001)
    assert t[np.argmax(water_density_Kell1975(temperature_c=t))] == pytest.approx(3.98, abs=0.02)


def test_water_index_falls_with_temperature():
    cold, warm = water_index_IAPWS1997(wavelength_nm=632.8, temperature_c=np.array([10.0, 40.0]))
    assert cold > warm


def test_water_density_warns_outside_kell_range():
    with pytest.warns(PhantomlabWarning, match="0–150 °C"):
        water_density_Kell1975(temperature_c=160.0)


# ---- dispersion formulas ---------------------------------------------------------------------


@pytest.mark.parametrize(
    "function, wavelength_nm, expected, tol",
    [
        # CHECKS.md: computed from Malitson 1965's Sellmeier at the helium d line
        (silica_index_Malitson1965, 587.6, 1.45846, 5e-6),
        # Malitson 1965 Table: fused silica at 1064 nm 1.4496 # from memory
        (silica_index_Malitson1965, 1064.0, 1.4496, 1e-4),
        # CHECKS.md: computed from Ma et al. 2003 at 632.8 nm
        (polystyrene_index_Ma2003, 632.8, 1.58243, 5e-6),
        # FIELD.md: DeVore 1951 ordinary ray gives n ~ 2.61 at 589 nm (memory)
        (rutile_index_DeVore1951, 589.0, 2.61, 0.005),
        # sapphire ordinary index 1.7681 at 589.3 nm (Malitson & Dodge 1972) # from memory
        (alumina_index_MalitsonDodge1972, 589.3, 1.7681, 2e-4),
        # PMMA n_D = 1.4905 (Sultanova et al. 2009 table of n_D) # from memory
        (pmma_index_Sultanova2009, 589.3, 1.4905, 2e-4),
    ],
)
def test_dispersion_formula_values(function, wavelength_nm, expected, tol):
    assert function(wavelength_nm=wavelength_nm) == pytest.approx(expected, abs=tol)


def test_polystyrene_cauchy_terms_at_one_micron():
    # Ma 2003: n = 1.5725 + 0.0031080/1 + 0.00034779/1 at lambda = 1 um, exactly
    assert polystyrene_index_Ma2003(wavelength_nm=1000.0) == pytest.approx(1.5725 + 0.0031080 + 0.00034779, abs=1e-12)


@pytest.mark.parametrize(
    "material, outside_nm, band_text",
    [
        ("polystyrene", 300.0, "370–1610"),
        ("silica", 5000.0, "210–3710"),
        ("rutile", 400.0, "430–1530"),
        ("pmma", 1300.0, "436.8–1052"),  # Sultanova 2009 range (refractiveindex.info Sultanova.yml)
        ("alumina", 5200.0, "200–5000"),  # Malitson & Dodge 1972 (refractiveindex.info Malitson-o.yml)
        ("water", 1200.0, "200–1100"),
    ],
)
def test_band_warning_names_value_and_band(material, outside_nm, band_text):
    with pytest.warns(PhantomlabWarning, match=band_text) as record:
        refractive_index(material, wavelength_nm=outside_nm)
    assert f"{outside_nm:g}" in str(record[0].message)


def test_dispersion_decreases_with_wavelength():
    wavelength = np.linspace(450, 1000, 12)
    for material in ("water", "polystyrene", "silica", "rutile", "alumina", "pmma"):
        n = refractive_index(material, wavelength_nm=wavelength)
        assert np.all(np.diff(n) < 0), material  # normal dispersion in the transparent band


# ---- registry and front function -------------------------------------------------------------


@pytest.mark.parametrize("material", sorted(INDEX_MODELS))
def test_front_function_scalar_array_nan(material):
    scalar = refractive_index(material, wavelength_nm=650.0)
    assert scalar.shape == () and 1.3 < float(scalar) < 2.7
    array = refractive_index(material, wavelength_nm=np.array([[500.0, 650.0], [700.0, 900.0]]))
    assert array.shape == (2, 2)
    assert array[0, 1] == pytest.approx(float(scalar))
    with_nan = refractive_index(material, wavelength_nm=np.array([650.0, np.nan]))
    assert with_nan[0] == pytest.approx(float(scalar)) and np.isnan(with_nan[1])


@pytest.mark.parametrize("material", sorted(INDEX_MODELS))
def test_front_function_refuses_nonpositive_and_text(material):
    with pytest.raises(InputError, match="must be > 0 nm"):
        refractive_index(material, wavelength_nm=-5.0)
    with pytest.raises(InputError, match="wavelength_nm must be a number"):
        refractive_index(material, wavelength_nm="six hundred")


def test_unknown_material_lists_known_ones():
    with pytest.raises(InputError, match=r"unknown material 'polystyrol'; known materials: agar, alumina"):
        refractive_index("polystyrol", wavelength_nm=600.0)


def test_constant_models_are_marked_common_practice():
    for name in ("silicone", "epoxy", "gelatin", "agar"):
        assert "common practice, no source" in INDEX_MODELS[name].source
    # FIELD.md ranges (memory): PDMS 1.40-1.43, epoxy 1.54-1.57, gelatin ~1.35
    assert 1.40 <= refractive_index("silicone", wavelength_nm=700.0) <= 1.43
    assert 1.54 <= refractive_index("epoxy", wavelength_nm=700.0) <= 1.57
    gel = refractive_index("gelatin", wavelength_nm=589.3, temperature_c=25.0)
    assert gel - refractive_index("water", wavelength_nm=589.3, temperature_c=25.0) == pytest.approx(0.02)
