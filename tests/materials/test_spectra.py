"""Absorber spectra: Beer–Lambert conversions, cuvette dilution-series fit, CSV reading."""

import numpy as np
import pytest

from phantomlab.errors import InputError, PhantomlabWarning
from phantomlab.materials import fit_dilution_series, mua_from_molar_extinction, mua_from_specific_extinction
from phantomlab.materials.spectra import read_csv_table

LN10 = np.log(10.0)


def test_molar_extinction_beer_lambert():
    # Beer-Lambert: eps = 1e5 /(M cm), c = 1e-5 M gives A = 1 per cm, so mua = ln(10) /cm
    assert mua_from_molar_extinction(epsilon_per_molar_per_cm=1e5, concentration_mol_per_l=1e-5) == pytest.approx(
        LN10 / 10.0, rel=1e-12
    )
    values = mua_from_molar_extinction(epsilon_per_molar_per_cm=np.array([1e4, 2e4]), concentration_mol_per_l=1e-4)
    assert values == pytest.approx([LN10 / 10.0, 2 * LN10 / 10.0])


def test_specific_extinction_beer_lambert():
    # A = eps * c * L: 0.5 /((mg/mL) cm) * 2 mg/mL * 1 cm = 1, mua = ln(10) /cm
    assert mua_from_specific_extinction(epsilon_per_mg_per_ml_per_cm=0.5, concentration_mg_per_ml=2.0) == pytest.approx(
        LN10 / 10.0
    )


def _series(mu_intrinsic, fractions, path_mm, curvature=None, noise=0.0, seed=1):
    rng = np.random.default_rng(seed)
    wl, f, a = [], [], []
    for i, w in enumerate(np.arange(500.0, 500.0 + 10 * mu_intrinsic.size, 10.0)):
        for frac in fractions:
            mu = mu_intrinsic[i] * frac + (0.0 if curvature is None else curvature[i] * frac**2)
            absorbance = mu * path_mm / LN10  # Beer-Lambert, base 10
            absorbance *= 1.0 + noise * rng.standard_normal()
            wl.append(w), f.append(frac), a.append(absorbance)
    return np.array(wl), np.array(f), np.array(a)


def test_cuvette_round_trip_recovers_intrinsic_mua():
    true = np.linspace(80.0, 20.0, 30)  # intrinsic mua [1/mm]
    fractions = [0.001, 0.002, 0.003, 0.004, 0.005, 0.006, 0.007, 0.008]
    wl, f, a = _series(true, fractions, 10.0, noise=0.003, seed=7)  # 0.3 % reading noise
    with pytest.warns(PhantomlabWarning, match="outside the 0.1–1.5"):  # low dilutions at the red end
        fit = fit_dilution_series(wavelength_nm=wl, stock_volume_fraction=f, absorbance=a, path_length_mm=10.0)
    # 8 readings of 0.3 % noise: the slope is good to well under 1 %
    assert fit.coefficient_per_mm == pytest.approx(true, rel=0.01)
    # the SD is honest: |error|/SD has a median near 0.7 (t distribution, 7 dof)
    z = (fit.coefficient_per_mm - true) / fit.coefficient_sd_per_mm
    assert 0.35 < np.median(np.abs(z)) < 1.3
    assert not fit.any_nonlinear


def test_cuvette_exact_data_exact_result():
    true = np.array([50.0, 40.0, 30.0])
    wl, f, a = _series(true, [0.002, 0.003, 0.004], 10.0)
    fit = fit_dilution_series(wavelength_nm=wl, stock_volume_fraction=f, absorbance=a, path_length_mm=10.0)
    assert fit.coefficient_per_mm == pytest.approx(true, rel=1e-12)
    assert fit.coefficient_sd_per_mm == pytest.approx(0.0, abs=1e-9)


def test_cuvette_curvature_is_reported_and_flagged():
    true = np.full(5, 60.0)
    bend = np.full(5, -1500.0)  # mu = 60 f - 1500 f^2: 15 % low at f = 0.006
    wl, f, a = _series(true, [0.0015, 0.003, 0.0045, 0.006], 10.0, curvature=bend, noise=0.001)
    with pytest.warns(PhantomlabWarning, match="Beer–Lambert bends"):
        fit = fit_dilution_series(wavelength_nm=wl, stock_volume_fraction=f, absorbance=a, path_length_mm=10.0)
    assert fit.any_nonlinear and np.all(fit.nonlinear)
    assert fit.curvature_per_mm == pytest.approx(bend, rel=0.1)
    assert fit.relative_nonlinearity == pytest.approx(-1500 * 0.006 / 60, rel=0.1)


def test_cuvette_needs_three_dilutions():
    wl, f, a = _series(np.array([50.0]), [0.002, 0.004], 10.0)
    with pytest.raises(InputError, match="at least 3 are needed"):
        fit_dilution_series(wavelength_nm=wl, stock_volume_fraction=f, absorbance=a, path_length_mm=10.0)


def test_cuvette_bad_inputs():
    wl, f, a = _series(np.array([50.0]), [0.002, 0.004, 0.006], 10.0)
    with pytest.raises(InputError, match="path length must be a number > 0 mm"):
        fit_dilution_series(wavelength_nm=wl, stock_volume_fraction=f, absorbance=a, path_length_mm=0.0)
    with pytest.raises(InputError, match=r"stock_volume_fraction must lie in \(0, 1\]"):
        fit_dilution_series(wavelength_nm=wl, stock_volume_fraction=f * np.nan, absorbance=a, path_length_mm=10.0)
    with pytest.raises(InputError, match="1-D of one length"):
        fit_dilution_series(wavelength_nm=wl[:-1], stock_volume_fraction=f, absorbance=a, path_length_mm=10.0)


def test_cuvette_warns_outside_trusted_absorbance():
    wl, f, a = _series(np.array([500.0]), [0.002, 0.004, 0.006], 10.0)  # A up to 13
    with pytest.warns(PhantomlabWarning, match="outside the 0.1–1.5"):
        fit_dilution_series(wavelength_nm=wl, stock_volume_fraction=f, absorbance=a, path_length_mm=10.0)


def test_csv_reader(tmp_path):
    good = tmp_path / "s.csv"
    good.write_text("# source: demo data, invented\nwavelength_nm,mua_per_mm\n600,1.0\n700,2.5\n")
    table = read_csv_table(good, required=("wavelength_nm", "mua_per_mm"), context="stock x, field spectrum_csv")
    assert table.source == "source: demo data, invented"
    assert table.columns["mua_per_mm"] == pytest.approx([1.0, 2.5])


@pytest.mark.parametrize(
    "text, message",
    [
        ("wavelength_nm,mu\n600,1\n700,2\n", r"missing column.*mua_per_mm.*unknown column\(s\) \(number 2\);"),
        ("wavelength_nm\n600\n700\n", r"missing column\(s\) mua_per_mm"),
        ("wavelength_nm,mua_per_mm\n600,one\n700,2\n", "data row 1, column mua_per_mm: not a number"),
        ("wavelength_nm,mua_per_mm\n600,1\n", "at least two data rows"),
        ("wavelength_nm,mua_per_mm\n600,1\n700\n", "data row 2 has 1 cells"),
        ("# source: x\n", "is empty"),
        ("wavelength_nm,mua_per_mm\n600,nan\n700,1\n", "value must be finite"),
    ],
)
def test_csv_reader_refuses(tmp_path, text, message):
    bad = tmp_path / "bad.csv"
    bad.write_text(text)
    with pytest.raises(InputError, match="stock x, field spectrum_csv: .*" + message):
        read_csv_table(bad, required=("wavelength_nm", "mua_per_mm"), context="stock x, field spectrum_csv")


def test_csv_reader_missing_file(tmp_path):
    with pytest.raises(InputError, match="stock x, field spectrum_csv: file .*nope.csv' not found"):
        read_csv_table(tmp_path / "nope.csv", required=("a",), context="stock x, field spectrum_csv")
