"""Intrinsic optics of stocks and the mixing rule, checked against independent computations
and published values."""

import io
import json
from contextlib import redirect_stdout
from pathlib import Path

import numpy as np
import pytest

from phantomlab.errors import InputError, PhantomlabWarning
from phantomlab.materials import load_shelf, water_absorption_per_mm
from phantomlab.optics import IntrinsicOptics, intrinsic_optics, mix_optics
from phantomlab.optics.emulsion import emulsion_scattering_Michels2008

REPO = Path(__file__).resolve().parents[2]
DEMO = REPO / "recipes" / "demo-stocks.toml"

SHELF_1UM = """
[stocks.water]
kind = "matrix"
material = "water"
density_g_per_ml = 1.0

[stocks.ps1000]
kind = "spheres"
material = "polystyrene"
diameter_um = 1.0
size_cv = 0.03
solids_percent_w_v = 2.5
particle_density_g_per_ml = 1.05
"""


@pytest.fixture(scope="module")
def shelf():
    return load_shelf(DEMO)


def independent_musp_ps1000(wavelength_nm=632.8, cv=0.03):
    """musp of 1.0 um polystyrene, 2.5 % w/v, density 1.05, in water at 20 degC, computed
    without phantomlab: scattnlay for Mie, iapws (IAPWS-95 density + R9-97 index) for water,
    the Ma 2003 formula typed here, Gauss-Hermite quadrature of the normal size distribution."""
    from iapws import IAPWS95
    from iapws._iapws import _Refractive
    from scattnlay import scattnlay

    lam_um = wavelength_nm / 1000
    n_water = _Refractive(IAPWS95(T=293.15, P=0.101325).rho, 293.15, lam_um)
    n_ps = 1.5725 + 0.0031080 / lam_um**2 + 0.00034779 / lam_um**4  # Ma et al. 2003
    nodes, weights = np.polynomial.hermite_e.hermegauss(40)
    d_um = 1.0 * (1 + cv * nodes)
    weights = weights / weights.sum()
    csca_1mg = []
    for d in d_um:
        x = np.pi * d * n_water / lam_um
        _, _, qsca, _, _, _, g, *_ = scattnlay(np.array([x]), np.array([n_ps / n_water + 0j]))
        csca_1mg.append(qsca * np.pi * (d / 1000) ** 2 / 4 * (1 - g))
    volume = np.pi * (d_um / 1000) ** 3 / 6
    f = 0.025 / 1.05
    return f * np.sum(weights * np.array(csca_1mg)) / np.sum(weights * volume)


def test_done_when_ps1000_musp_matches_independent_mie(tmp_path):
    path = tmp_path / "stocks.toml"
    path.write_text(SHELF_1UM)
    s = load_shelf(path)
    ours = intrinsic_optics(s["ps1000"], wavelength_nm=632.8, matrix=s["water"])
    reference = independent_musp_ps1000()
    assert ours.musp_per_mm[0] == pytest.approx(reference, rel=0.005)  # issue 2 "Done when": 0.5 %


def test_done_when_through_cli_json(tmp_path):
    from phantomlab.cli import main

    path = tmp_path / "stocks.toml"
    path.write_text(SHELF_1UM)
    out = io.StringIO()
    with redirect_stdout(out):
        status = main(["stock", "optics", str(path), "ps1000", "--wavelength-nm", "632.8", "--json"])
    assert status == 0
    payload = json.loads(out.getvalue())
    assert {"stock", "wavelength_nm", "mua_per_mm", "mus_per_mm", "g", "musp_per_mm", "warnings"} <= set(payload)
    assert payload["stock"] == "ps1000" and payload["wavelength_nm"] == [632.8]
    assert payload["musp_per_mm"][0] == pytest.approx(independent_musp_ps1000(), rel=0.005)
    assert payload["musp_per_mm"][0] == pytest.approx(payload["mus_per_mm"][0] * (1 - payload["g"][0]), rel=1e-12)


def test_sphere_stock_absorption_is_carrier_water(shelf):
    grid = np.array([650.0, 800.0, 950.0])
    ps = shelf["ps1000"]
    optics = intrinsic_optics(ps, wavelength_nm=grid, matrix=shelf["water"])
    expected = (1 - ps.solids_volume_fraction) * water_absorption_per_mm(grid)  # polystyrene index is real
    assert optics.mua_per_mm == pytest.approx(expected, rel=1e-12)


@pytest.mark.parametrize(
    "wavelength_nm, musp_intrinsic",
    [(632.8, 25.9), (751.0, 21.2), (833.0, 18.4)],  # Di Ninni, Martelli & Zaccanti 2011, PMB 56:N21
)
def test_emulsion_against_di_ninni(shelf, wavelength_nm, musp_intrinsic):
    optics = intrinsic_optics(shelf["lipid20"], wavelength_nm=wavelength_nm, matrix=shelf["water"])
    assert optics.musp_per_mm[0] == pytest.approx(musp_intrinsic, rel=0.03)  # CHECKS.md: within ~3 %


def test_emulsion_formula_values():
    # Michels et al. 2008 power law and linear g, evaluated by hand at 600 nm
    mus, g = emulsion_scattering_Michels2008(wavelength_nm=600.0)
    assert mus == pytest.approx(3.873e8 * 600.0**-2.397, rel=1e-12)
    assert g == pytest.approx(1.090 - 6.812e-4 * 600.0, rel=1e-12)
    # Michels et al. 2008, abstract: measured "for wavelengths between 350 nm and 900 nm"
    with pytest.warns(PhantomlabWarning, match="wavelength 950 nm outside the 350–900 nm measured by Michels"):
        emulsion_scattering_Michels2008(wavelength_nm=950.0)


def test_potency_scales_the_ingredient_not_the_carrier_water(shelf):
    one = intrinsic_optics(shelf["ps500"], wavelength_nm=[700.0, 800.0], matrix=shelf["water"])
    two = intrinsic_optics(shelf["ps500"], wavelength_nm=[700.0, 800.0], matrix=shelf["water"], potency=2.0)
    assert two.mus_per_mm == pytest.approx(2 * one.mus_per_mm)
    # polystyrene's index is real: all of the suspension's mua is its carrier water, unscaled
    carrier = (1 - shelf["ps500"].solids_volume_fraction) * water_absorption_per_mm([700.0, 800.0])
    assert two.mua_per_mm == pytest.approx(carrier, rel=1e-12)
    assert two.mua_carrier_per_mm == pytest.approx(carrier, rel=1e-12)
    assert two.g == pytest.approx(one.g)
    with pytest.raises(InputError, match="potency must be a number > 0"):
        intrinsic_optics(shelf["ps500"], wavelength_nm=700.0, matrix=shelf["water"], potency=-1.0)


def test_matrix_own_optics(shelf):
    water = intrinsic_optics(shelf["water"], wavelength_nm=[700.0, 900.0], matrix=shelf["water"])
    assert water.mua_per_mm == pytest.approx(water_absorption_per_mm([700.0, 900.0]))
    assert np.all(water.mus_per_mm == 0) and np.all(water.g == 0)
    silicone = intrinsic_optics(shelf["silicone"], wavelength_nm=[700.0], matrix=shelf["silicone"])
    assert silicone.mua_per_mm[0] == pytest.approx(0.0005)  # the demo file's constant background


def test_matrix_index_changes_mie(shelf):
    # Spheres scatter less in a higher-index matrix (smaller relative index)
    in_water = intrinsic_optics(shelf["ps1000"], wavelength_nm=700.0, matrix=shelf["water"])
    in_silicone = intrinsic_optics(shelf["ps1000"], wavelength_nm=700.0, matrix=shelf["silicone"])
    assert in_silicone.musp_per_mm[0] < in_water.musp_per_mm[0]


def test_extinction_absorber(shelf):
    optics = intrinsic_optics(shelf["dye_ext660"], wavelength_nm=[660.0], matrix=None)
    table = np.loadtxt(REPO / "recipes" / "spectra" / "dye_ext660-extinction.csv", delimiter=",", skiprows=2)
    epsilon = np.interp(660.0, table[:, 0], table[:, 1])
    water = water_absorption_per_mm(660.0)  # the demo stock is an aqueous solution: solvent = "water"
    assert optics.mua_per_mm[0] == pytest.approx(np.log(10) * epsilon * 1e-3 / 10 + water, rel=1e-12)
    assert optics.mua_carrier_per_mm[0] == pytest.approx(water, rel=1e-12)
    assert optics.mus_per_mm[0] == 0


def test_ink_albedo_splits_attenuation(shelf):
    ink = shelf["ink_black"]
    optics = intrinsic_optics(ink, wavelength_nm=[600.0, 800.0], matrix=shelf["water"])
    attenuation = np.interp([600.0, 800.0], ink.spec.wavelength_nm, ink.spec.coefficient_per_mm)
    ink_mua = optics.mua_per_mm - optics.mua_carrier_per_mm  # the diluent water is added back apart
    assert optics.mua_carrier_per_mm == pytest.approx(water_absorption_per_mm([600.0, 800.0]), rel=1e-12)
    assert ink_mua + optics.mus_per_mm == pytest.approx(attenuation, rel=1e-12)
    assert optics.mus_per_mm / (ink_mua + optics.mus_per_mm) == pytest.approx(0.1)
    assert optics.g == pytest.approx(0.5)
    assert np.all(optics.mua_sd_per_mm > 0)


def test_powder_warns_first_guess(shelf):
    with pytest.warns(PhantomlabWarning, match="first guess"):
        optics = intrinsic_optics(shelf["tio2"], wavelength_nm=[500.0, 800.0], matrix=shelf["silicone"])
    assert np.all(optics.musp_per_mm > 0)


def test_bad_inputs(shelf):
    with pytest.raises(InputError, match="NaN or infinite"):
        intrinsic_optics(shelf["ps1000"], wavelength_nm=[600.0, np.nan], matrix=shelf["water"])
    with pytest.raises(InputError, match="needs matrix="):
        intrinsic_optics(shelf["ps1000"], wavelength_nm=600.0, matrix=None)
    with pytest.raises(InputError, match="matrix= must be a matrix stock"):
        intrinsic_optics(shelf["ps1000"], wavelength_nm=600.0, matrix=shelf["dye_blue"])
    with pytest.raises(InputError, match="stock dye_blue: spectrum_csv covers 400–1000 nm; asked 300–600 nm"):
        intrinsic_optics(shelf["dye_blue"], wavelength_nm=[300.0, 600.0], matrix=None)
    with pytest.raises(InputError, match="needs a Stock"):
        intrinsic_optics("ps1000", wavelength_nm=600.0, matrix=shelf["water"])


def test_scalar_and_array(shelf):
    scalar = intrinsic_optics(shelf["ps500"], wavelength_nm=700.0, matrix=shelf["water"])
    array = intrinsic_optics(shelf["ps500"], wavelength_nm=np.array([650.0, 700.0]), matrix=shelf["water"])
    assert scalar.mus_per_mm.shape == (1,) and array.mus_per_mm.shape == (2,)
    assert array.mus_per_mm[1] == pytest.approx(scalar.mus_per_mm[0])


# ---- mixing rule -------------------------------------------------------------------------------


def test_mix_linear_rule(shelf):
    grid = np.array([650.0, 800.0])
    water = intrinsic_optics(shelf["water"], wavelength_nm=grid, matrix=shelf["water"])
    ps = intrinsic_optics(shelf["ps1000"], wavelength_nm=grid, matrix=shelf["water"])
    ink = intrinsic_optics(shelf["ink_black"], wavelength_nm=grid, matrix=shelf["water"])
    f_ps, f_ink = 0.04, 1e-4
    mix = mix_optics(matrix_optics=water, components=[(ps, f_ps), (ink, f_ink)], n=1.33)
    assert mix.mua_per_mm == pytest.approx((1 - f_ps - f_ink) * water.mua_per_mm + f_ps * ps.mua_per_mm + f_ink * ink.mua_per_mm)
    mus = f_ps * ps.mus_per_mm + f_ink * ink.mus_per_mm
    assert mix.mus_per_mm == pytest.approx(mus)
    assert mix.g == pytest.approx((f_ps * ps.mus_per_mm * ps.g + f_ink * ink.mus_per_mm * ink.g) / mus)
    assert mix.n == pytest.approx([1.33, 1.33])


def test_mix_di_ninni_dilution(shelf):
    # 1 % v/v of the 20 % emulsion: musp = 0.01 x 25.9 /mm at 632.8 nm (Di Ninni et al. 2011)
    water = intrinsic_optics(shelf["water"], wavelength_nm=632.8, matrix=shelf["water"])
    lipid = intrinsic_optics(shelf["lipid20"], wavelength_nm=632.8, matrix=shelf["water"])
    mix = mix_optics(matrix_optics=water, components=[(lipid, 0.01)], n=1.33)
    assert mix.musp_per_mm[0] == pytest.approx(0.259, rel=0.03)


def test_mix_matrix_only(shelf):
    water = intrinsic_optics(shelf["water"], wavelength_nm=[700.0], matrix=shelf["water"])
    mix = mix_optics(matrix_optics=water, components=[], n=1.33)
    assert mix.mua_per_mm == pytest.approx(water.mua_per_mm) and mix.mus_per_mm[0] == 0 and mix.g[0] == 0


def test_mix_warns_above_independent_scattering(shelf):
    water = intrinsic_optics(shelf["water"], wavelength_nm=[700.0], matrix=shelf["water"])
    lipid = intrinsic_optics(shelf["lipid20"], wavelength_nm=[700.0], matrix=shelf["water"])
    with pytest.warns(PhantomlabWarning) as record:
        mix_optics(matrix_optics=water, components=[(lipid, 0.5)], n=1.33)
    messages = [str(r.message) for r in record]
    assert any("particle volume fraction 0.109 above 0.1" in m for m in messages)
    # FIELD notes (Aernouts et al. 2014): emulsion stock above ~10 % v/v is no longer linear
    with pytest.warns(PhantomlabWarning, match="emulsion lipid20 at 0.2 v/v, above the ≈0.1 v/v"):
        mix_optics(matrix_optics=water, components=[(lipid, 0.2)], n=1.33)
    import warnings

    with warnings.catch_warnings():
        warnings.simplefilter("error", PhantomlabWarning)
        mix_optics(matrix_optics=water, components=[(lipid, 0.05)], n=1.33)  # linear range: silent


def test_mix_refuses_bad_input(shelf):
    water = intrinsic_optics(shelf["water"], wavelength_nm=[700.0], matrix=shelf["water"])
    ps = intrinsic_optics(shelf["ps1000"], wavelength_nm=[700.0], matrix=shelf["water"])
    other = intrinsic_optics(shelf["ps1000"], wavelength_nm=[750.0], matrix=shelf["water"])
    with pytest.raises(InputError, match="add up to 1.2 > 1"):
        mix_optics(matrix_optics=water, components=[(ps, 0.6), (ps, 0.6)], n=1.33)
    with pytest.raises(InputError, match="must lie in \\[0, 1\\], got -0.1"):
        mix_optics(matrix_optics=water, components=[(ps, -0.1)], n=1.33)
    with pytest.raises(InputError, match="must be a finite number, got nan"):
        mix_optics(matrix_optics=water, components=[(ps, float("nan"))], n=1.33)
    with pytest.raises(InputError, match="another wavelength grid"):
        mix_optics(matrix_optics=water, components=[(other, 0.1)], n=1.33)
    with pytest.raises(InputError, match="pairs"):
        mix_optics(matrix_optics=water, components=[ps], n=1.33)


def test_intrinsic_optics_by_hand():
    optics = IntrinsicOptics("mine", [600.0, 700.0], [0.1, 0.2], [10.0, 8.0], [0.9, 0.8])
    assert optics.musp_per_mm == pytest.approx([1.0, 1.6])
    assert optics.stock_key == "mine" and optics.solids_volume_fraction == 0.0
    with pytest.raises(InputError, match="g must lie in"):
        IntrinsicOptics("mine", [600.0], [0.1], [10.0], [1.0])


def test_low_contrast_warns(tmp_path):
    # FIELD notes: silica against silicone has low contrast (1.457 / 1.41 = 1.033)
    path = tmp_path / "s.toml"
    path.write_text(
        '[stocks.pdms]\nkind = "matrix"\nmaterial = "silicone"\ndensity_g_per_ml = 1.03\n'
        '[stocks.silica]\nkind = "powder"\nmaterial = "silica"\ndiameter_um = 1.0\nparticle_density_g_per_ml = 2.2\n'
    )
    s = load_shelf(path)
    with pytest.warns(PhantomlabWarning) as record:
        intrinsic_optics(s["silica"], wavelength_nm=[633.0], matrix=s["pdms"])
    assert any("relative index silica/silicone within 0.033 of 1" in str(r.message) for r in record)


def test_absorber_solvents(shelf, tmp_path):
    from phantomlab.materials.stock import parse_shelf

    # Kedenburg et al. 2012 ethanol at 0.908 um: k = 9.46558e-7, mua = 4 pi k / lambda [1/mm]
    ethanol_908 = 4 * np.pi * 9.46558e-7 / 0.908e-3
    nir = intrinsic_optics(shelf["dye_nir"], wavelength_nm=[908.0], matrix=None)
    assert nir.mua_carrier_per_mm[0] == pytest.approx(ethanol_908, rel=1e-9)
    (tmp_path / "dye.csv").write_text("# source: invented for a test\nwavelength_nm,mua_per_mm\n600,1.0\n900,2.0\n")
    (tmp_path / "solvent.csv").write_text("# source: invented for a test\nwavelength_nm,mua_per_mm\n600,0.01\n900,0.04\n")
    document = {"stocks": {"dye": {"kind": "absorber", "spectrum_csv": "dye.csv", "solvent_spectrum_csv": "solvent.csv"}}}
    dye = parse_shelf(document, base=tmp_path)["dye"]
    optics = intrinsic_optics(dye, wavelength_nm=[750.0], matrix=None, potency=3.0)
    assert optics.mua_per_mm[0] == pytest.approx(3.0 * 1.5 + 0.025, rel=1e-12)  # linear interpolation by hand
    none = parse_shelf({"stocks": {"dye": {"kind": "absorber", "spectrum_csv": "dye.csv"}}}, base=tmp_path)["dye"]
    assert intrinsic_optics(none, wavelength_nm=[750.0], matrix=None).mua_carrier_per_mm[0] == 0.0


def test_emulsion_water_and_oil(shelf):
    # 20 % w/v soybean oil over 0.92 g/mL: oil fraction 0.2174; van Veen et al. 2004 lard at
    # 930 nm: 13.10 /m; the water phase (1 - oil) is not scaled by the potency
    stock = shelf["lipid20"]
    oil = 0.20 / 0.92
    with pytest.warns(PhantomlabWarning, match="outside the 350–900 nm"):
        optics = intrinsic_optics(stock, wavelength_nm=[930.0], matrix=None, potency=2.0)
    water = float(water_absorption_per_mm(930.0))
    assert optics.mua_carrier_per_mm[0] == pytest.approx((1 - oil) * water, rel=1e-12)
    assert optics.mua_per_mm[0] == pytest.approx((1 - oil) * water + 2.0 * oil * 0.01310, rel=1e-9)
    with pytest.warns(PhantomlabWarning, match="the oil.s own absorption is left out at 400 nm, outside the 429–1098 nm"):
        intrinsic_optics(stock, wavelength_nm=[400.0, 500.0], matrix=None)
