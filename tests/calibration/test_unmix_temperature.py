"""Unmixing a warm phantom: the water column absorbs at the phantom's temperature.

Blood phantoms are measured warm (37 °C); water's NIR bands grow by about 0.5 % per °C near 740
and 970 nm (IOCCG 2018 ∂a_w/∂T, shipped and checked row by row in
tests/materials/test_water_absorption.py).  The synthetic spectra here are made by the separate
computation of test_unmix.py (haemoglobin from the printed Gratzer & Kollias rows typed there),
with warm water as a given input: unmixed with the water at the phantom's temperature, the
truth comes back within the SDs; unmixed with the water as tabulated (22 °C), the water fraction
absorbs the difference and is off by several SDs — the temperature matters at these SDs.
"""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pytest

from phantomlab.calibration.unmix import unmix_spectrum
from phantomlab.cli import main
from phantomlab.materials.water import water_absorption_per_mm
from test_unmix import NIR_ROWS, synthetic_mua

ROOT = Path(__file__).resolve().parents[2]
MEASUREMENTS = ROOT / "recipes" / "measurements"
WARM_C = 37.0
THB_UM, SO2, WATER = 25.0, 0.7, 0.98


def _warm_spectrum():
    wavelength, cold = synthetic_mua(NIR_ROWS, so2=SO2, thb_um=THB_UM, water_fraction=0.0)
    warm_water = water_absorption_per_mm(wavelength, temperature_c=WARM_C)  # the given input
    return wavelength, cold + WATER * warm_water


@pytest.mark.filterwarnings("ignore::phantomlab.errors.PhantomlabWarning")
def test_warm_water_unmixed_at_its_temperature_recovers_the_truth_and_at_table_temperature_does_not():
    wavelength, truth = _warm_spectrum()
    sd = 0.002 * truth  # a careful measurement: 0.2 % per wavelength
    warm = unmix_spectrum(wavelength_nm=wavelength, mua_per_mm=truth, mua_sd_per_mm=sd,
                          chromophores=("hbo2", "hb", "water"), water_temperature_c=WARM_C)
    assert warm.water_temperature_c == WARM_C and warm.to_json()["water_temperature_c"] == WARM_C
    assert abs(warm.amounts["water"] - WATER) < 1e-6 * WATER
    assert abs(warm.so2 - SO2) < 1e-6 and abs(warm.thb_um / THB_UM - 1) < 1e-6
    cold = unmix_spectrum(wavelength_nm=wavelength, mua_per_mm=truth, mua_sd_per_mm=sd,
                          chromophores=("hbo2", "hb", "water"))
    assert cold.water_temperature_c is None
    # the water fraction absorbs the warm bands: several SDs high, and the fit says it misfits
    assert (cold.amounts["water"] - WATER) / cold.amount_sds["water"] > 3
    assert cold.chi2_red > 5


@pytest.mark.parametrize("command", [["unmix", "--chromophores", "hbo2,hb,water"],
                                     ["oxygenation", "add", "2026-001", "--chromophores", "hbo2,hb,water"]])
@pytest.mark.parametrize("value", ["80", "-5", "nan"])
def test_a_temperature_outside_liquid_water_at_the_bench_is_refused_in_one_line(capsys, tmp_path, command, value):
    wavelength, truth = _warm_spectrum()
    optics = tmp_path / "warm.csv"
    optics.write_text("wavelength_nm,mua_per_mm,musp_per_mm\n" + "".join(f"{w:g},{m:.6g},1.0\n"
                                                                        for w, m in zip(wavelength, truth)))
    argv = [*command[:-2], str(optics), *command[-2:]] if command[0] == "unmix" else \
        [*command[:3], str(optics), *command[3:], "--db", f"sqlite:///{tmp_path / 'none.sqlite'}"]
    status = main([*argv, "--temperature-c", value])
    err = capsys.readouterr().err
    assert status != 0 and "--temperature-c" in err and "accepted 0 to 60" in err, err
    assert len(err.strip().splitlines()) == 1
    assert not (tmp_path / "none.sqlite").exists()  # nothing written


@pytest.mark.filterwarnings("ignore::phantomlab.errors.PhantomlabWarning")
def test_a_series_recorded_with_a_warm_batch_unmixes_its_water_at_the_recipe_temperature(tmp_path, capsys):
    """demo-oximeter-blood.toml says measure_temperature_c = 37; its demo series was made with water at 37 °C."""
    db = f"sqlite:///{tmp_path / 'lab.sqlite'}"
    assert main(["batch", "add", str(ROOT / "recipes" / "demo-oximeter-blood.toml"), "--db", db, "--json"]) == 0
    code = json.loads(capsys.readouterr().out)["batch_id"]
    runs = {}
    for label, extra in (("recipe", []), ("table", ["--temperature-c", "22"])):
        assert main(["oxygenation", "add", code, str(MEASUREMENTS / "demo-oximeter-series.csv"),
                     "--chromophores", "hbo2,hb,water", "--name", label, "--db", db, "--json", *extra]) == 0
        runs[label] = json.loads(capsys.readouterr().out)
    assert runs["recipe"]["water_temperature_c"] == 37.0
    assert all(p["water_temperature_c"] == 37.0 for p in runs["recipe"]["points"])
    chi2 = {label: np.median([p["chi2_red"] for p in run["points"]]) for label, run in runs.items()}
    # the series' 1 % noise: chi2_red near 1 with the right water, larger with water at 22 °C
    assert 0.4 < chi2["recipe"] < 1.8 and chi2["table"] > chi2["recipe"]
    assert main(["oxygenation", "show", code, "--db", db, "--json"]) == 0
    shown = json.loads(capsys.readouterr().out)["series"]
    assert [s["water_temperature_c"] for s in shown] == [37.0, 22.0]
