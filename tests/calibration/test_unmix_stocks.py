"""Unmixing a recipe's absorber stocks (and its blood stock's dose) from independent synthetic μa.

The synthetic spectra are a separate, simple computation from the files themselves, on a
650–950 nm grid every 10 nm where every file has printed rows (no interpolation):

* haemoglobin: the rows of the shipped Gratzer & Kollias CSV (Prahl 1999 compilation), read
  here with the csv module: μa = ln(10)/10 · 1e-6 · c [µM] · ε;
* ``dye_ext660``: its extinction CSV (1/(M cm), base 10) at the stock's 1 mM:
  μa per unit volume fraction = ln(10) · ε · 1e-3 / 10 [1/mm];
* ``dye_nir``: its spectrum CSV (μa of the undiluted stock) plus its solvent, ethanol, from
  the Kedenburg et al. 2012 CSV: μa = 4π k / λ;
* water: the total water of the mix (matrix + the aqueous dye's solvent + the blood's
  water) times the pure-water μa, given as an input.

The demo stock file and its spectra (demo data, invented) are copied beside a test recipe.
1 % Gaussian noise (fixed seeds) is added and the fractions, sO₂ and SDs are checked.
"""

from __future__ import annotations

import csv
import io
import json
import math
import shutil
import warnings
from importlib import resources
from pathlib import Path

import numpy as np
import pytest

from phantomlab.calibration.unmix import CONDITION_WARN, unmix_spectrum
from phantomlab.cli import main
from phantomlab.errors import InputError, PhantomlabWarning
from phantomlab.materials.water import water_absorption_per_mm
from phantomlab.recipe import load_recipe

RECIPES = Path(__file__).resolve().parents[2] / "recipes"
WAVELENGTH = np.arange(650.0, 950.0 + 1, 10.0)
# The mix: blood at 35 µM total haemoglobin (blood_kb1: 14.2 g/dL, water 0.8 by volume: the
# demo stock file), 1e-3 of the 1 mM dye, 2e-4 of the NIR dye, the rest water (matrix).
THB_UM = 35.0
BLOOD_UM = 142.0 / 64500 * 1e6  # 14.2 g/dL over 64 500 g/mol: 2201.55 µM of tetramer
F_BLOOD = THB_UM / BLOOD_UM
F_EXT660 = 1.0e-3
F_NIR = 2.0e-4
WATER = (1 - F_BLOOD - F_EXT660 - F_NIR) + F_EXT660 + 0.8 * F_BLOOD  # matrix + aqueous dye + blood water

RECIPE = """name = "test: blood with two dyes"
version = "1"
stocks_file = "demo-stocks.toml"
matrix = "water"
stocks = ["lipid20", "blood_kb1", "dye_ext660", "dye_nir"]
batch_volume_ml = 100

[target]
wavelength_nm = [660, 800, 900]
musp_per_mm = [1.0, 0.9, 0.8]

[oxygenation]
thb_um = 35
so2_levels_percent = [100, 0]
"""


def _rows(path, skip_comments=True):
    text = Path(path).read_text(encoding="utf-8") if not isinstance(path, str) or "\n" not in path else path
    lines = [line for line in text.splitlines() if line and not (skip_comments and line.startswith("#"))]
    reader = csv.reader(io.StringIO("\n".join(lines)))
    next(reader)
    return {float(r[0]): [float(v) for v in r[1:]] for r in reader}


def _package_csv(name):
    return resources.files("phantomlab").joinpath("data", name).read_text(encoding="utf-8")


HB = _rows(_package_csv("haemoglobin_extinction_gratzer_kollias.csv"))
ETHANOL_K = {round(w * 1000): v[0] for w, v in _rows(_package_csv("ethanol_absorption_kedenburg_2012.csv")).items()}
EXT660 = _rows(RECIPES / "spectra" / "dye_ext660-extinction.csv")
NIR = _rows(RECIPES / "spectra" / "dye_nir.csv")
BLUE = _rows(RECIPES / "spectra" / "dye_blue.csv")


def haemoglobin_mua(so2):
    return np.array([math.log(10) / 10 * 1e-6 * THB_UM * (so2 * HB[w][0] + (1 - so2) * HB[w][1]) for w in WAVELENGTH])


def ext660_per_fraction():
    return np.array([math.log(10) * EXT660[w][0] * 1e-3 / 10 for w in WAVELENGTH])


def nir_per_fraction():
    ethanol = np.array([4 * math.pi * ETHANOL_K[int(w)] / (w * 1e-6) for w in WAVELENGTH])  # 1/mm
    return np.array([NIR[w][0] for w in WAVELENGTH]) + ethanol


def truth_mua(so2, *, f_ext660=F_EXT660, f_nir=F_NIR, water_temperature_c=None):
    """The mix's μa; water as tabulated, or at ``water_temperature_c`` (the command takes a recipe's
    ``measure_temperature_c``, 20 °C when the recipe gives none)."""
    return (haemoglobin_mua(so2) + f_ext660 * ext660_per_fraction() + f_nir * nir_per_fraction()
            + WATER * water_absorption_per_mm(WAVELENGTH, temperature_c=water_temperature_c))


@pytest.fixture(scope="module")
def lab(tmp_path_factory):
    folder = tmp_path_factory.mktemp("lab")
    shutil.copy(RECIPES / "demo-stocks.toml", folder / "demo-stocks.toml")
    shutil.copytree(RECIPES / "spectra", folder / "spectra")
    (folder / "blood-dyes.toml").write_text(RECIPE, encoding="utf-8")
    return folder


@pytest.fixture(scope="module")
def stocks(lab):
    recipe = load_recipe(lab / "blood-dyes.toml")
    shelf = {key: recipe.stock(key) for key in ("water", *recipe.stock_keys)}
    # what the synthetic truth assumes of the demo stock file
    assert shelf["dye_ext660"].potency == shelf["dye_nir"].potency == shelf["blood_kb1"].potency == 1.0
    assert shelf["blood_kb1"].spec.water_volume_fraction == 0.8 and shelf["dye_nir"].spec.solvent == "ethanol"
    return shelf


NAMES = ("hbo2", "hb", "water", "dye_ext660", "dye_nir")


def _unmix(stocks, mua, sd):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", PhantomlabWarning)
        return unmix_spectrum(wavelength_nm=WAVELENGTH, mua_per_mm=mua, mua_sd_per_mm=sd, chromophores=NAMES,
                              stocks=stocks, blood_stock="blood_kb1")


def test_noiseless_spectrum_comes_back_exactly_and_water_is_counted_once(stocks):
    truth = truth_mua(0.6)
    result = _unmix(stocks, truth, 0.01 * truth)
    assert result.stock_fractions["dye_ext660"] == pytest.approx(F_EXT660, rel=1e-6)
    assert result.stock_fractions["dye_nir"] == pytest.approx(F_NIR, rel=1e-6)
    assert result.stock_fractions["blood_kb1"] == pytest.approx(F_BLOOD, rel=1e-6)
    assert result.so2 == pytest.approx(0.6, abs=1e-7) and result.thb_um == pytest.approx(THB_UM, rel=1e-6)
    # The aqueous dye's water is part of the water fraction, not of the dye's column: counting
    # it twice would leave the water 2e-4 short.
    assert result.amounts["water"] == pytest.approx(WATER, abs=2e-6)
    assert result.condition_number < CONDITION_WARN and not result.warnings


@pytest.mark.parametrize("so2", [0.2, 0.8])
def test_fractions_recovered_with_one_percent_noise(stocks, so2):
    truth = truth_mua(so2)
    rng = np.random.default_rng(int(100 * so2))
    results = [_unmix(stocks, truth * (1 + 0.01 * rng.standard_normal(truth.size)), 0.01 * truth) for _ in range(200)]
    ext = np.array([r.stock_fractions["dye_ext660"] / F_EXT660 - 1 for r in results])
    nir = np.array([r.stock_fractions["dye_nir"] / F_NIR - 1 for r in results])
    blood = np.array([r.stock_fractions["blood_kb1"] / F_BLOOD - 1 for r in results])
    so2_error = np.array([r.so2 - so2 for r in results])
    # Stated tolerances (docs/contract.md; measured SDs: dye_ext660 1.7-2.0 %, dye_nir 1.1-1.15 %,
    # blood 1.35-1.4 %, sO2 0.011-0.012): 95 % of copies within 4 % (dye_ext660), 3 % (dye_nir,
    # blood dose) and 0.025 in sO2; every copy within 8 %, 5 %, 6 % and 0.04; the mean within 0.5 %.
    for errors, within95, every in ((ext, 0.04, 0.08), (nir, 0.03, 0.05), (blood, 0.03, 0.06)):
        assert np.quantile(np.abs(errors), 0.95) < within95 and np.max(np.abs(errors)) < every
        assert abs(np.mean(errors)) < 0.005
    assert np.quantile(np.abs(so2_error), 0.95) < 0.025 and np.max(np.abs(so2_error)) < 0.04
    assert all(r.condition_number < CONDITION_WARN for r in results)


def test_stock_fraction_sds_cover_the_truth(stocks):
    """The printed SDs of the stock fractions are claims: 3 × 200 noisy copies."""
    z = {"dye_ext660": [], "dye_nir": [], "blood_kb1": []}
    truths = {"dye_ext660": F_EXT660, "dye_nir": F_NIR, "blood_kb1": F_BLOOD}
    for so2, seed in ((0.3, 11), (0.5, 12), (0.7, 13)):
        truth = truth_mua(so2)
        rng = np.random.default_rng(seed)
        for _ in range(200):
            r = _unmix(stocks, truth * (1 + 0.01 * rng.standard_normal(truth.size)), 0.01 * truth)
            for key in z:
                z[key].append((r.stock_fractions[key] - truths[key]) / r.stock_fraction_sds[key])
    for key, values in z.items():
        values = np.abs(values)
        assert 0.62 <= np.mean(values < 1) <= 0.75, key  # normal: 0.683
        assert 0.93 <= np.mean(values < 2) <= 0.975, key  # normal: 0.954


def test_a_stock_that_is_nearly_a_mix_of_others_is_flagged(lab):
    # A "blend" stock whose spectrum is half the blue dye and half the NIR dye (plus a 1 %
    # ripple): with both dyes also asked, the wavelengths cannot tell the three apart.
    rows = ["# source: test data, invented (half dye_blue, half dye_nir)", "wavelength_nm,mua_per_mm"]
    for w in sorted(BLUE):
        rows.append(f"{w:g},{0.5 * BLUE[w][0] + 0.5 * NIR[w][0] * (1 + 0.01 * math.sin(w / 7)):.6g}")
    (lab / "spectra" / "dye_blend.csv").write_text("\n".join(rows) + "\n", encoding="utf-8")
    stocks_text = (lab / "demo-stocks.toml").read_text(encoding="utf-8")
    (lab / "blend-stocks.toml").write_text(
        stocks_text + '\n[stocks.dye_blend]\nkind = "absorber"\nname = "blend (test)"\n'
        'spectrum_csv = "spectra/dye_blend.csv"\nsolvent = "water"\npotency = 1.0\npotency_sd = 0.1\n',
        encoding="utf-8",
    )
    (lab / "blend.toml").write_text(
        RECIPE.replace('"demo-stocks.toml"', '"blend-stocks.toml"')
        .replace('"dye_ext660", "dye_nir"]', '"dye_blue", "dye_nir", "dye_blend"]'),
        encoding="utf-8",
    )
    recipe = load_recipe(lab / "blend.toml")
    shelf = {key: recipe.stock(key) for key in recipe.stock_keys}
    blue = np.array([BLUE[w][0] for w in WAVELENGTH])
    truth = haemoglobin_mua(0.5) + 1e-4 * blue + 1e-4 * nir_per_fraction() + WATER * water_absorption_per_mm(WAVELENGTH)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", PhantomlabWarning)
        result = unmix_spectrum(wavelength_nm=WAVELENGTH, mua_per_mm=truth, mua_sd_per_mm=0.01 * truth,
                                chromophores=("hbo2", "hb", "water", "dye_blue", "dye_nir", "dye_blend"), stocks=shelf)
    assert result.condition_number > CONDITION_WARN
    flagged = [w for w in result.warnings if "is nearly a mix of" in w]
    assert len(flagged) == 1 and "condition number" in flagged[0]
    closest = min(result.independence, key=result.independence.get)
    assert closest in ("dye_blue", "dye_nir", "dye_blend") and f"spectrum of {closest} is nearly a mix" in flagged[0]
    assert result.independence[closest] < 0.05 < min(result.independence[k] for k in ("hbo2", "hb", "water"))


# --- the command line ---------------------------------------------------------------------


def _optics_file(path, mua):
    lines = ["wavelength_nm,mua_per_mm,musp_per_mm,mua_sd_per_mm,musp_sd_per_mm"]
    lines += [f"{w:g},{m:.8g},1.0,{0.01 * m:.4g},0.01" for w, m in zip(WAVELENGTH, mua)]
    path.write_text("\n".join(lines) + "\n", encoding="utf-8")
    return path


def _run(capsys, *argv):
    status = main([str(a) for a in argv])
    captured = capsys.readouterr()
    return status, captured.out, captured.err


def test_command_adds_every_absorber_stock_of_the_recipe(lab, capsys, tmp_path):
    optics = _optics_file(tmp_path / "optics.csv", truth_mua(0.4, water_temperature_c=20.0))
    status, out, _ = _run(capsys, "unmix", optics, "--chromophores", "hbo2,hb,water", "--recipe",
                          lab / "blood-dyes.toml", "--json")
    payload = json.loads(out)
    assert payload["water_temperature_c"] == 20.0  # the recipe's default measuring temperature
    assert status == 0 and payload["chromophores"] == ["hbo2", "hb", "water", "dye_ext660", "dye_nir"]
    assert set(payload["stock_fractions"]) == {"dye_ext660", "dye_nir", "blood_kb1"}
    assert payload["stock_fractions"]["dye_ext660"] == pytest.approx(F_EXT660, rel=1e-4)  # file rounds to 8 digits
    assert payload["stock_fractions"]["blood_kb1"] == pytest.approx(F_BLOOD, rel=1e-4)
    assert payload["stock_fraction_sds"]["dye_nir"] > 0 and payload["recipe"].startswith("test: blood")
    status, out, _ = _run(capsys, "unmix", optics, "--chromophores", "hbo2,hb,water,dye_nir", "--recipe",
                          lab / "blood-dyes.toml")
    assert status == 0 and "dye_nir" in out and "dye_ext660" not in out and "from the total haemoglobin" in out


@pytest.mark.parametrize(
    "chromophores, with_recipe, message",
    [
        ("hbo2,hb,water,lipid20", True, "lipid20 is an emulsion stock, not an absorber"),
        ("hbo2,hb,water,blood_kb1", True, "blood_kb1 is a blood stock"),
        ("hbo2,hb,water,dye_blue", True, "unknown dye_blue; known: hbo2, hb, methb, cohb, water, lipid, or an absorber stock"),
        ("hbo2,hb,water,dye_nir", False, "unknown dye_nir; known: hbo2, hb, methb, cohb, water, lipid (a recipe's absorber stock: phantomlab unmix --recipe)"),
        ("hbo2,hb,bilirubin", False, "unknown bilirubin"),
        ("hbo2,hb,methb", False, "haemoglobin table gratzer-kollias holds hbo2, hb, not methb"),
    ],
)
def test_command_refusals_are_one_line(lab, capsys, tmp_path, chromophores, with_recipe, message):
    optics = _optics_file(tmp_path / "optics.csv", truth_mua(0.4))
    argv = ["unmix", optics, "--chromophores", chromophores]
    if with_recipe:
        argv += ["--recipe", lab / "blood-dyes.toml"]
    if "methb" in chromophores:
        argv += ["--source", "gratzer-kollias"]
    status, out, err = _run(capsys, *argv)
    assert status == 2 and out == "" and message in err and err.count("\n") == 1


def test_chromophore_list_has_a_limit():
    with pytest.raises(InputError, match="at most 12"):
        unmix_spectrum(wavelength_nm=WAVELENGTH, mua_per_mm=np.ones(WAVELENGTH.size),
                       chromophores=("hbo2", "hb") + tuple(f"s{i}" for i in range(11)))
