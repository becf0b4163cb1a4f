"""The stock model: the demo shelf, conversions, and every kind of bad stock file."""

import datetime as dt
from pathlib import Path

import numpy as np
import pytest

from phantomlab.errors import InputError, PhantomlabWarning
from phantomlab.materials import HAZARD_KEYS, KINDS, load_shelf, lognormal_sizes, normal_sizes
from phantomlab.materials.sizes import histogram_sizes

REPO = Path(__file__).resolve().parents[2]
DEMO = REPO / "recipes" / "demo-stocks.toml"

GOOD = """
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
potency = 1.0
potency_sd = 0.05
lot = "L1"

[stocks.dye]
kind = "absorber"
spectrum_csv = "dye.csv"
hazards = ["dye"]
"""

DYE_CSV = "# source: demo data, invented\nwavelength_nm,mua_per_mm\n400,1.0\n1000,2.0\n"


def write_shelf(tmp_path, text, csv_files=None):
    files = {"dye.csv": DYE_CSV}
    files.update(csv_files or {})
    for name, content in files.items():
        (tmp_path / name).write_text(content)
    path = tmp_path / "stocks.toml"
    path.write_text(text)
    return path


# ---- the demo shelf ------------------------------------------------------------------------


def test_demo_shelf_loads_with_every_kind():
    shelf = load_shelf(DEMO)
    assert set(s.kind for s in shelf.values()) == set(KINDS)
    assert {"water", "gelatin10", "silicone", "ps500", "ps1000", "lipid20", "tio2", "dye_blue",
            "dye_nir", "dye_ext660", "ink_black"} <= set(shelf.keys())
    assert DEMO.read_text().startswith("# demo data, invented")
    for stock in shelf.values():
        assert set(stock.hazards) <= set(HAZARD_KEYS)
        assert stock.definition["kind"] == stock.kind
    assert shelf["tio2"].hazards == ("nano_powder",)
    assert "respirator" in shelf["tio2"].cautions[0]


def test_demo_spectra_carry_provenance_line():
    for csv in (REPO / "recipes" / "spectra").glob("*.csv"):
        assert csv.read_text().splitlines()[0] == "# source: demo data, invented", csv.name


def test_definition_holds_resolved_csv_for_snapshots():
    shelf = load_shelf(DEMO)
    resolved = shelf["dye_blue"].definition["resolved"]["spectrum_csv"]
    assert resolved["source"] == "source: demo data, invented"
    assert len(resolved["columns"]["wavelength_nm"]) == len(resolved["columns"]["mua_per_mm"]) > 10
    assert shelf["gelatin10"].definition["expiry"] == "2031-06-30"  # dates as ISO text
    assert shelf["gelatin10"].expiry == dt.date(2031, 6, 30)


# ---- conversions ---------------------------------------------------------------------------


def test_solids_w_v_to_volume_fraction(tmp_path):
    stock = load_shelf(write_shelf(tmp_path, GOOD))["ps1000"]
    # 2.5 % w/v = 0.025 g/mL of particles; / 1.05 g/mL = particle volume per stock volume
    assert stock.solids_volume_fraction == pytest.approx(0.025 / 1.05, rel=1e-12)
    assert stock.density_g_per_ml == pytest.approx(0.025 / 1.05 * 1.05 + (1 - 0.025 / 1.05) * 1.0)


def test_solids_w_w_to_volume_fraction(tmp_path):
    text = GOOD.replace("solids_percent_w_v = 2.5", "solids_percent_w_w = 10")
    stock = load_shelf(write_shelf(tmp_path, text))["ps1000"]
    # 100 g of stock: 10 g of particles (9.524 mL) in 90 g of water (90 mL)
    assert stock.solids_volume_fraction == pytest.approx((10 / 1.05) / (10 / 1.05 + 90.0), rel=1e-12)


def test_emulsion_and_powder_fractions():
    shelf = load_shelf(DEMO)
    assert shelf["lipid20"].solids_volume_fraction == pytest.approx(0.20 / 0.92)
    assert shelf["tio2"].solids_volume_fraction == 1.0
    assert shelf["tio2"].density_g_per_ml == 4.2
    assert shelf["dye_blue"].solids_volume_fraction == 0.0 and shelf["water"].solids_volume_fraction == 0.0


def test_extinction_absorber_converted():
    stock = load_shelf(DEMO)["dye_ext660"]
    table = np.loadtxt(REPO / "recipes" / "spectra" / "dye_ext660-extinction.csv", delimiter=",", skiprows=2)
    assert stock.spec.coefficient_per_mm == pytest.approx(np.log(10) * table[:, 1] * 1.0e-3 / 10.0)


def test_cuvette_absorber_fitted():
    stock = load_shelf(DEMO)["ink_black"]
    assert stock.spec.method == "cuvette" and stock.spec.quantity == "attenuation"
    # the demo series was made from 320 (lambda/600)^-0.85 /mm with a 0.4 % wobble
    at600 = np.interp(600.0, stock.spec.wavelength_nm, stock.spec.coefficient_per_mm)
    assert at600 == pytest.approx(320.0, rel=0.01)
    assert not stock.spec.dilution_fit.any_nonlinear


def test_with_potency_returns_new_shelf():
    shelf = load_shelf(DEMO)
    new = shelf.with_potency("ps1000", 1.1, 0.02)
    assert new["ps1000"].potency == 1.1 and new["ps1000"].potency_sd == 0.02
    assert shelf["ps1000"].potency == 1.0
    with pytest.raises(InputError, match="stock ps1000, field potency: expected a number > 0"):
        shelf.with_potency("ps1000", 0.0, 0.1)
    with pytest.raises(InputError, match="unknown stock 'ps999'"):
        shelf.with_potency("ps999", 1.0, 0.1)


def test_shelf_matrix_choice():
    shelf = load_shelf(DEMO)
    with pytest.raises(InputError, match=r"several matrices \(water, gelatin10, silicone\)"):
        shelf.matrix()
    assert shelf.matrix("gelatin10").key == "gelatin10"
    with pytest.raises(InputError, match="stock 'ps1000' is of kind spheres, not a matrix; matrices on the shelf: water"):
        shelf.matrix("ps1000")


def test_unknown_key_lists_known(tmp_path):
    shelf = load_shelf(write_shelf(tmp_path, GOOD))
    with pytest.raises(InputError, match=r"unknown stock 'ps100' \(did you mean 'ps1000'\?\); stocks on the shelf: water, ps1000, dye"):
        shelf["ps100"]


def test_expired_stock_warns(tmp_path):
    text = GOOD.replace('lot = "L1"', 'lot = "L1"\nexpiry = 2001-01-01')
    with pytest.warns(PhantomlabWarning, match="stock ps1000 \\(lot L1\\) expired on 2001-01-01"):
        load_shelf(write_shelf(tmp_path, text))


# ---- size distributions -------------------------------------------------------------------


def test_normal_sizes_moments():
    sizes = normal_sizes(diameter_um=1.0, cv=0.05)
    mean = np.sum(sizes.number_weights * sizes.diameters_um)
    sd = np.sqrt(np.sum(sizes.number_weights * (sizes.diameters_um - mean) ** 2))
    assert mean == pytest.approx(1.0, rel=1e-9) and sd == pytest.approx(0.05, rel=2e-3)
    assert sizes.diameters_um.size >= 50


def test_lognormal_sizes_moments():
    sizes = lognormal_sizes(diameter_um=0.25, cv=0.4)
    mean = np.sum(sizes.number_weights * sizes.diameters_um)
    sd = np.sqrt(np.sum(sizes.number_weights * (sizes.diameters_um - mean) ** 2))
    # log-normal moments: mean = exp(mu + s^2/2), CV = sqrt(exp(s^2) - 1); the +-4 s grid truncates a little
    assert mean == pytest.approx(0.25, rel=2e-3) and sd / mean == pytest.approx(0.4, rel=0.02)


def test_histogram_volume_weights_become_number_weights():
    sizes = histogram_sizes(diameters_um=[1.0, 2.0], weights=[1.0, 8.0], weighting="volume")
    assert sizes.number_weights == pytest.approx([0.5, 0.5])  # equal numbers: volume 1:8


def test_histogram_stock(tmp_path):
    text = GOOD.replace("diameter_um = 1.0\nsize_cv = 0.03", 'size_distribution = "histogram"\nsize_histogram_csv = "sizes.csv"')
    csv = "# source: demo data, invented\ndiameter_um,number_weight\n0.9,1\n1.0,2\n1.1,1\n"
    stock = load_shelf(write_shelf(tmp_path, text, {"sizes.csv": csv}))["ps1000"]
    assert stock.spec.sizes.mean_diameter_um == pytest.approx(1.0)
    assert stock.definition["resolved"]["size_histogram_csv"]["columns"]["number_weight"] == [1, 2, 1]


# ---- every kind of bad stock file: one line naming stock, field and what is expected --------


BAD_CASES = [
    # missing fields
    (("diameter_um = 1.0\n", ""), "stock ps1000, field diameter_um: missing; expected the mean diameter, a number > 0 in µm"),
    (('material = "polystyrene"\n', ""), "stock ps1000, field material: missing; expected a refractive-index model name"),
    (("particle_density_g_per_ml = 1.05\n", ""), "stock ps1000, field particle_density_g_per_ml: missing"),
    (("solids_percent_w_v = 2.5\n", ""), "stock ps1000, field solids_percent_w_v: missing; expected the strength as solids_percent_w_v or solids_percent_w_w"),
    (('kind = "matrix"\n', ""), "stock water, field kind: missing; expected one of matrix, spheres, powder, emulsion, absorber"),
    (('spectrum_csv = "dye.csv"\n', ""), "stock dye, field spectrum_csv: missing; an absorber needs one of spectrum_csv, extinction_csv, cuvette_csv"),
    # misspelt fields and names
    (("diameter_um = 1.0", "diamter_um = 1.0"), "stock ps1000: unknown field 'diamter_um' \\(did you mean 'diameter_um'\\?\\); fields of a spheres stock:"),
    (('kind = "spheres"', 'kind = "sphere"'), "stock ps1000, field kind: 'sphere' is not one of matrix, spheres, powder, emulsion, absorber, blood \\(did you mean 'spheres'\\?\\)"),
    (('material = "polystyrene"', 'material = "polystyren"'), "stock ps1000, field material: unknown material 'polystyren' \\(did you mean 'polystyrene'\\?\\)"),
    (('hazards = ["dye"]', 'hazards = ["dyes"]'), "stock dye, field hazards: unknown hazard key 'dyes' \\(did you mean 'dye'\\?\\)"),
    # impossible values
    (("diameter_um = 1.0", "diameter_um = -1.0"), "stock ps1000, field diameter_um: expected the mean diameter, a number > 0 in µm, got -1.0"),
    (("size_cv = 0.03", "size_cv = 1.5"), "stock ps1000, field size_cv: expected the relative SD of the diameter, a number in \\[0, 1\\), got 1.5"),
    (("size_cv = 0.03", "size_cv = 0.4"), "stock ps1000, field size_cv: size CV 0.4 too wide for a normal distribution"),
    (("solids_percent_w_v = 2.5", "solids_percent_w_v = 250"), "stock ps1000, field solids_percent_w_v: expected g of particles per 100 mL of stock, a number in \\(0, 100\\), got 250"),
    (("solids_percent_w_v = 2.5", "solids_percent_w_v = 80"), "stock ps1000, field solids_percent_w_v: 80 % with particle density 1.05 g/mL gives a particle volume fraction 0.762, above the 0.64 of randomly packed spheres"),
    (("potency = 1.0", "potency = 0"), "stock ps1000, field potency: expected a number > 0, got 0"),
    (("potency_sd = 0.05", "potency_sd = -0.05"), "stock ps1000, field potency_sd: expected a number >= 0, got -0.05"),
    (("diameter_um = 1.0", 'diameter_um = "1 um"'), "stock ps1000, field diameter_um: expected the mean diameter, a number > 0 in µm, got '1 um'"),
    (('lot = "L1"', 'lot = "L1"\nexpiry = "next year"'), "stock ps1000, field expiry: expected a date YYYY-MM-DD, got 'next year'"),
    (('hazards = ["dye"]', 'hazards = "dye"'), "stock dye, field hazards: expected a list of hazard keys"),
    (("density_g_per_ml = 1.0", "density_g_per_ml = 0.0"), "stock water, field density_g_per_ml: expected a number > 0 in g/mL, got 0.0"),
    (("solids_percent_w_v = 2.5", "solids_percent_w_v = 2.5\nsolids_percent_w_w = 2.5"), "stock ps1000, field solids_percent_w_w: give the strength once"),
    # missing CSV, CSV with bad columns
    (('spectrum_csv = "dye.csv"', 'spectrum_csv = "nope.csv"'), "stock dye, field spectrum_csv: file '.*nope.csv' not found"),
    (('spectrum_csv = "dye.csv"', 'spectrum_csv = "badcols.csv"'), "stock dye, field spectrum_csv: '.*badcols.csv' has unknown column\\(s\\) \\(number 2\\); expected columns wavelength_nm\\[,mua_per_mm\\]"),
    (('spectrum_csv = "dye.csv"', 'spectrum_csv = "decreasing.csv"'), "stock dye, field spectrum_csv: '.*decreasing.csv': wavelength_nm must increase strictly"),
    (('spectrum_csv = "dye.csv"', 'spectrum_csv = "dye.csv"\ncuvette_csv = "dye.csv"'), "stock dye, field cuvette_csv: give one of spectrum_csv, extinction_csv, cuvette_csv"),
    # water sources and solvents
    (('density_g_per_ml = 1.0', 'density_g_per_ml = 1.0\nwater_source = "hale1973"'), "stock water, field water_source: 'hale1973' is not one of popefry1997_kou1993, popefry1997_segelstein1981, segelstein1981, halequerry1973 \\(did you mean 'halequerry1973'\\?\\)"),
    (('hazards = ["dye"]', 'hazards = ["dye"]\nsolvent = "acetone"'), "stock dye, field solvent: 'acetone' is not one of none, water, ethanol"),
    (('hazards = ["dye"]', 'hazards = ["dye"]\nsolvent = "water"\nsolvent_spectrum_csv = "dye.csv"'), "stock dye, field solvent: give the solvent once: solvent or solvent_spectrum_csv"),
    (('hazards = ["dye"]', 'hazards = ["dye"]\nwater_source = "segelstein1981"'), "stock dye, field water_source: only used with solvent = \"water\"; remove it"),
    (('hazards = ["dye"]', 'hazards = ["dye"]\nsolvent_spectrum_csv = "badcols.csv"'), "stock dye, field solvent_spectrum_csv: '.*badcols.csv' has missing column\\(s\\) mua_per_mm"),
]

BAD_CSV = {
    "badcols.csv": "wavelength_nm,absorbance\n400,1\n500,2\n",
    "decreasing.csv": "wavelength_nm,mua_per_mm\n500,1\n400,2\n",
}


@pytest.mark.parametrize("edit, message", BAD_CASES, ids=[m[:60] for _, m in BAD_CASES])
def test_bad_stock_file_refused_with_one_line(tmp_path, edit, message):
    old, new = edit
    assert old in GOOD
    path = write_shelf(tmp_path, GOOD.replace(old, new, 1), BAD_CSV)
    with pytest.raises(InputError, match=message) as info:
        load_shelf(path)
    assert "\n" not in str(info.value)


def test_water_source_and_solvent_fields(tmp_path):
    text = GOOD.replace('density_g_per_ml = 1.0', 'density_g_per_ml = 1.0\nwater_source = "halequerry1973"', 1)
    text = text.replace('hazards = ["dye"]', 'hazards = ["dye"]\nsolvent = "water"\nwater_source = "segelstein1981"')
    shelf = load_shelf(write_shelf(tmp_path, text))
    assert shelf["water"].spec.water_source == "halequerry1973"
    assert shelf["dye"].spec.solvent == "water" and shelf["dye"].spec.water_source == "segelstein1981"
    assert shelf["ps1000"].spec.water_source == "popefry1997_kou1993"  # the default
    own = "# source: invented solvent for a test\nwavelength_nm,mua_per_mm\n400,0.01\n1000,0.03\n"
    text = GOOD.replace('hazards = ["dye"]', 'hazards = ["dye"]\nsolvent_spectrum_csv = "solvent.csv"')
    shelf = load_shelf(write_shelf(tmp_path, text, {"solvent.csv": own}))
    assert shelf["dye"].spec.solvent == "spectrum"
    assert "solvent_spectrum_csv" in shelf["dye"].definition["resolved"]


def test_emulsion_10_percent_refused(tmp_path):
    text = GOOD + '\n[stocks.lipid10]\nkind = "emulsion"\nmodel = "michels2008"\nlipid_percent_w_v = 10\n'
    with pytest.raises(InputError, match="stock lipid10, field lipid_percent_w_v: 10 % is not what model 'michels2008' describes \\(20 %"):
        load_shelf(write_shelf(tmp_path, text))


def test_emulsion_unknown_model_refused(tmp_path):
    text = GOOD + '\n[stocks.lipid]\nkind = "emulsion"\nmodel = "michels"\n'
    with pytest.raises(InputError, match="stock lipid, field model: 'michels' is not one of michels2008 \\(did you mean 'michels2008'\\?\\)"):
        load_shelf(write_shelf(tmp_path, text))


def test_extinction_needs_concentration_and_molar_mass(tmp_path):
    csv = {"ext.csv": "wavelength_nm,epsilon_per_molar_per_cm\n400,100\n500,200\n"}
    text = GOOD + '\n[stocks.mb]\nkind = "absorber"\nextinction_csv = "ext.csv"\n'
    with pytest.raises(InputError, match="stock mb, field concentration_mol_per_l: give the stock's concentration once"):
        load_shelf(write_shelf(tmp_path, text, csv))
    with pytest.raises(InputError, match="stock mb, field molar_mass_g_per_mol: missing; a molar extinction table with concentration_mg_per_ml needs the molar mass"):
        load_shelf(write_shelf(tmp_path, text + "concentration_mg_per_ml = 0.1\n", csv))
    shelf = load_shelf(write_shelf(tmp_path, text + "concentration_mg_per_ml = 0.32\nmolar_mass_g_per_mol = 320\n", csv))
    # 0.32 mg/mL / 320 g/mol = 1e-3 mol/L; mua = ln10 * 100 * 1e-3 / 10 per mm
    assert shelf["mb"].spec.coefficient_per_mm[0] == pytest.approx(np.log(10) * 100 * 1e-3 / 10)


def test_cuvette_absorber_needs_path(tmp_path):
    csv = {"cuv.csv": "wavelength_nm,stock_volume_fraction,absorbance\n600,0.001,0.2\n600,0.002,0.4\n600,0.003,0.6\n"}
    text = GOOD + '\n[stocks.ink]\nkind = "absorber"\ncuvette_csv = "cuv.csv"\n'
    with pytest.raises(InputError, match="stock ink, field cuvette_path_mm: missing; expected the cuvette path length"):
        load_shelf(write_shelf(tmp_path, text, csv))


@pytest.mark.parametrize(
    "text, message",
    [
        ("[stocks.a\nkind=1", "not valid TOML"),
        ("[shelf]\nname = 'x'\n", "no stocks; expected one table \\[stocks.KEY\\]"),
        ("[stock.water]\nkind = 'matrix'\n", "unknown top-level entry 'stock' \\(did you mean 'stocks'\\?\\)"),
        ("[stocks]\nwater = 3\n", "stock water: expected a table \\[stocks.water\\]"),
    ],
)
def test_bad_documents(tmp_path, text, message):
    with pytest.raises(InputError, match=message):
        load_shelf(write_shelf(tmp_path, text))


def test_missing_stock_file(tmp_path):
    with pytest.raises(InputError, match="stock file '.*none.toml' not found"):
        load_shelf(tmp_path / "none.toml")
