"""Design by sO₂: the [oxygenation] table, the blood dose it fixes, and the planned series
checked against a hand computation from the published tables."""

from __future__ import annotations

import copy
import math
import tomllib
from pathlib import Path

import numpy as np
import pytest

from phantomlab.errors import InputError
from phantomlab.materials import load_shelf
from phantomlab.materials.water import water_absorption_per_mm
from phantomlab.recipe import load_recipe, parse_recipe, solve
from phantomlab.recipe.oxygenation import so2_series
from phantomlab.recipe.sheet import render_sheet_csv, render_sheet_html

RECIPES = Path(__file__).resolve().parents[2] / "recipes"
SHELF = load_shelf(RECIPES / "demo-stocks.toml")

# Gratzer & Kollias (Prahl 1999 compilation): (nm, HbO2, Hb) in 1/(M cm) per mole of tetramer.
ROWS = [(660, 319.6, 3226.56), (700, 290, 1794.28), (760, 586, 1548.52), (800, 816, 761.72),
        (850, 1058, 691.32), (900, 1198, 761.84)]

BLOOD_ONLY = {
    "name": "blood in water (test)",
    "stocks_file": "demo-stocks.toml",
    "matrix": "water",
    "stocks": ["blood_kb1"],
    "batch_volume_ml": 1000,
    "target": {"wavelength_nm": [r[0] for r in ROWS], "musp_per_mm": [0.03] * len(ROWS)},
    "oxygenation": {"thb_um": 40, "so2_levels_percent": [0, 25, 50, 75, 100]},
}


def _recipe(definition):
    return parse_recipe(copy.deepcopy(definition), base_dir=RECIPES, shelf=SHELF)


@pytest.mark.filterwarnings("ignore::phantomlab.errors.PhantomlabWarning")
def test_planned_series_equals_a_hand_computation_from_the_tables():
    plan = solve(_recipe(BLOOD_ONLY))
    series = so2_series(plan, wavelength_nm=[r[0] for r in ROWS])
    c_g_per_l = 142.0  # blood_kb1: 14.2 g/dL (demo data)
    f = 40e-6 / (c_g_per_l / 64500.0)  # the blood dose thb_um fixes: 40 uM / stock concentration
    assert plan.dose("blood_kb1").volume_fraction == pytest.approx(f, rel=1e-12)
    assert [level.so2 for level in series.levels] == [0.0, 0.25, 0.5, 0.75, 1.0]
    for level in series.levels:
        s = level.so2
        for i, (lam, oxy, deoxy) in enumerate(ROWS):
            water = float(water_absorption_per_mm(lam, temperature_c=20.0))  # the default measuring temperature
            haemoglobin = math.log(10) / 10 * (c_g_per_l / 64500.0) * (s * oxy + (1 - s) * deoxy)
            by_hand = (1 - f) * water + f * (haemoglobin + 0.8 * water)  # blood brings 80 % water (its field)
            assert level.mua_per_mm[i] == pytest.approx(by_hand, rel=1e-9), (s, lam)
    assert series.thb_um == pytest.approx(40.0, rel=1e-12)
    assert list(series.isosbestic_nm) == pytest.approx([796.8], abs=0.05)  # Gratzer & Kollias, 796-798 nm


@pytest.mark.filterwarnings("ignore::phantomlab.errors.PhantomlabWarning")
def test_demo_recipe_plan_json_and_sheet_carry_the_series():
    plan = solve(load_recipe(RECIPES / "demo-oximeter-blood.toml"))
    payload = plan.to_json()["so2_series"]
    assert [lv["so2"] for lv in payload["levels"]] == [1.0, 0.75, 0.5, 0.25, 0.0]
    assert payload["thb_um"] == pytest.approx(35.0)
    html = render_sheet_html(plan)
    assert "μa at 0 %" in html and "isosbestic" in html and "yeast (deoxygenation)" in html
    assert "clinical waste" in html and "open surface" in html
    csv_text = render_sheet_csv(plan)
    assert "so2_series,mua at sO2 0 % at 660 nm" in csv_text


def test_solved_blood_without_thb_uses_the_design_so2():
    definition = copy.deepcopy(BLOOD_ONLY)
    definition["oxygenation"] = {"so2": 0.6}
    definition["target"] = {"wavelength_nm": [700, 800], "mua_per_mm": [0.01, 0.01]}
    plan = solve(_recipe(definition))
    assert plan.predicted.mua_per_mm == pytest.approx([0.01, 0.01], rel=0.1)
    assert _recipe(definition).oxygenation.levels == (0.6,)


@pytest.mark.parametrize(
    "oxygenation, message",
    [
        (None, "stock 'blood_kb1' is blood; add \\[oxygenation\\]"),
        ({"so2": 97}, "so2 = 97 is outside 0-1 \\(a fraction; for percent use so2_percent\\)"),
        ({"so2_percent": 120}, "so2_percent = 120 is outside 0-100"),
        ({"so2_levels": [1.0, -0.1]}, "so2_levels = -0.1 is outside 0-1"),
        ({"so2_levels_percent": [100, 101]}, "so2_levels_percent = 101 is outside 0-100"),
        ({"so2": 0.5, "so2_percent": 50}, "give so2 or so2_percent, not both"),
        ({"thb_um": 30}, "give so2 \\(where the target holds\\) or so2_levels"),
        ({"so2": 0.5, "thb_um": -1}, "thb_um must be a number in \\(0, 5000\\]"),
        ({"so2": 0.5, "deoxygenation": "argon"}, "deoxygenation 'argon'; accepted: yeast, nitrogen, none"),
        ({"so2": 0.5, "blood_stock": "lipid20"}, "blood_stock 'lipid20' is not a blood stock"),
        ({"so2": 0.5, "so2_lvls": [1]}, "unknown field 'so2_lvls'"),
    ],
)
def test_oxygenation_refusals(oxygenation, message):
    definition = copy.deepcopy(BLOOD_ONLY)
    if oxygenation is None:
        definition.pop("oxygenation")
    else:
        definition["oxygenation"] = oxygenation
    with pytest.raises(InputError, match=message) as info:
        _recipe(definition)
    assert "\n" not in str(info.value)


def test_oxygenation_without_blood_is_refused():
    definition = tomllib.loads((RECIPES / "demo-nir-liquid.toml").read_text(encoding="utf-8"))
    definition["oxygenation"] = {"so2": 1.0}
    with pytest.raises(InputError, match="needs a blood stock"):
        _recipe(definition)


def test_a_thb_the_stock_cannot_give_is_refused():
    definition = copy.deepcopy(BLOOD_ONLY)
    definition["oxygenation"] = {"so2": 1.0, "thb_um": 4000}
    with pytest.raises(InputError, match="needs more than the undiluted blood_kb1"):
        solve(_recipe(definition))


def test_fixed_dose_leaves_the_other_stocks_solved():
    plan = solve(load_recipe(RECIPES / "demo-oximeter-blood.toml"))
    assert plan.residuals["musp_met"]
    blood = plan.dose("blood_kb1").volume_fraction
    assert blood == pytest.approx(35e-6 / (142.0 / 64500.0), rel=1e-12)
    assert np.all(np.isfinite(plan.predicted.mua_per_mm))
