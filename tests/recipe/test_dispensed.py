"""What was dispensed, line by line as the sheet asks (:mod:`phantomlab.recipe.dispensed`).

The expected numbers are the bench arithmetic done by hand in each test: a step's dilution is
(taken + diluent) / taken, the stock is the amount of its pre-dilution / the dilution, a mass
of a stock is volume × its density, the diluent a pre-dilution carries is matrix, and the
batch volume is the sum of the volumes (volumes additive, as the recipe layer assumes).
The lines the form shows are held against the sheet's own amounts table
(:func:`phantomlab.recipe.procedure.amount_lines`, which the printed sheet renders).
"""

from __future__ import annotations

import warnings

import pytest

from phantomlab.errors import InputError, PhantomlabWarning
from phantomlab.jsonable import to_jsonable
from phantomlab.recipe import load_recipe, solve
from phantomlab.recipe.dispensed import bench_lines, parse_amounts_csv, undiluted_amounts
from phantomlab.recipe.procedure import amount_lines
from pathlib import Path

RECIPES = Path(__file__).resolve().parents[2] / "recipes"


def _planned(name):
    recipe = load_recipe(RECIPES / name)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", PhantomlabWarning)
        plan = solve(recipe)
    return recipe, plan, to_jsonable(plan.to_json())


@pytest.mark.parametrize("name", ["demo-nir-liquid.toml", "demo-silicone.toml", "demo-gel-g.toml"])
def test_the_lines_are_the_sheets_in_its_order_and_rounding(name):
    _recipe, plan, stored = _planned(name)
    lines = [line for line in bench_lines(stored) if line.kind != "predilution"]
    sheet = amount_lines(plan)
    assert [(ln.number, ln.label, ln.text, ln.unit) for ln in sheet] == \
        [(ln.number, ln.label, ln.amount_text, ln.unit) for ln in lines]
    steps = [line.name for line in bench_lines(stored) if line.kind == "predilution"]
    assert steps == [s.label for d in plan.doses if d.dilution for s in d.dilution.steps]


def test_a_liquid_sheet_with_pre_dilutions_as_made_and_a_dose_weighed():
    recipe, _plan, stored = _planned("demo-nir-liquid.toml")
    rows = parse_amounts_csv(
        "stock,volume_ml,mass_g,diluent_ml\nwater,476.0,,\nink_black-D1,0.101,,0.905\n"
        "dye_nir-D1,0.098,,0.902\ndye_nir,0.160,,\nink_black,0.180,,\nlipid20,,24.35,\n")
    amounts, fractions = undiluted_amounts(rows, recipe, stored)
    ink_n, dye_n = (0.101 + 0.905) / 0.101, (0.098 + 0.902) / 0.098
    ink, dye = 0.180 / ink_n, 0.160 / dye_n
    lipid = 24.35 / recipe.stock("lipid20").density_g_per_ml
    water = 476.0 + (0.180 - ink) + (0.160 - dye)  # the diluent carried in is matrix
    total = water + ink + dye + lipid
    rows = {a["stock"]: a for a in amounts}
    assert list(rows) == ["water", "dye_nir", "ink_black", "lipid20"]  # the matrix first, then as given
    assert rows["water"]["volume_ml"] == pytest.approx(water, rel=1e-12)
    assert rows["water"]["carried_diluent_volume_ml"] == pytest.approx(water - 476.0, rel=1e-12)
    assert fractions == pytest.approx({"ink_black": ink / total, "dye_nir": dye / total, "lipid20": lipid / total},
                                      rel=1e-12)
    assert rows["ink_black"]["dilution_factor"] == pytest.approx(ink_n, rel=1e-12)
    assert rows["ink_black"]["predilution"][0]["planned_share"] == pytest.approx(0.1, rel=1e-12)
    assert rows["lipid20"]["given"] == {"mass_g": 24.35}


def test_without_the_matrix_the_planned_volume_holds_and_the_planned_dilution_by_default():
    recipe, plan, stored = _planned("demo-nir-liquid.toml")
    rows = [{"stock": "ink_black", "volume_ml": 0.180, "dilution_factor": 10.0},
            {"stock": "dye_nir", "volume_ml": 0.160, "dilution_factor": 10.0},
            {"stock": "lipid20", "volume_ml": 24.0}]
    _amounts, fractions = undiluted_amounts(rows, recipe, stored)
    assert fractions["ink_black"] == pytest.approx(0.018 / plan.batch_volume_ml, rel=1e-12)
    assert fractions["lipid20"] == pytest.approx(24.0 / plan.batch_volume_ml, rel=1e-12)


def test_a_silicone_sheet_weighed_line_by_line():
    recipe, _plan, stored = _planned("demo-silicone.toml")
    rows = parse_amounts_csv(
        "stock,mass_g,diluent_g\ncarbon_black-D1,0.102,9.95\nsilicone:part_a,272.0,\nsilicone:part_b,27.3,\n"
        "carbon_black,0.125,\ntio2,0.330,\n")
    amounts, fractions = undiluted_amounts(rows, recipe, stored)
    density = recipe.matrix.density_g_per_ml
    n = (0.102 + 9.95) / 0.102
    carbon = 0.125 / n / recipe.stock("carbon_black").density_g_per_ml
    tio2 = 0.330 / recipe.stock("tio2").density_g_per_ml
    matrix = (272.0 + 27.3) / density + (0.125 - 0.125 / n) / density  # base + curing agent + carried base
    total = matrix + carbon + tio2
    assert fractions == pytest.approx({"carbon_black": carbon / total, "tio2": tio2 / total}, rel=1e-12)
    silicone = next(a for a in amounts if a["stock"] == "silicone")
    assert silicone["volume_ml"] == pytest.approx(matrix, rel=1e-12)
    assert [p["part"] for p in silicone["parts"]] == ["silicone:part_a", "silicone:part_b"]


def test_a_gel_sheet_counts_the_made_up_water_not_the_powder_in_it():
    recipe, _plan, stored = _planned("demo-gel-g.toml")
    rows = [{"stock": "gelatin10:powder", "mass_g": 17.2}, {"stock": "gelatin10:water", "volume_ml": 171.0},
            {"stock": "dye_blue", "volume_ml": 0.211}, {"stock": "ps1000", "volume_ml": 10.9},
            {"stock": "ps500", "volume_ml": 17.6}]
    _amounts, fractions = undiluted_amounts(rows, recipe, stored)
    total = 171.0 + 0.211 + 10.9 + 17.6
    assert fractions == pytest.approx({"dye_blue": 0.211 / total, "ps1000": 10.9 / total, "ps500": 17.6 / total},
                                      rel=1e-12)


@pytest.mark.parametrize("rows, said", [
    ([{"stock": "ink_black-D1", "volume_ml": 0.1, "diluent_ml": 0.9}, {"stock": "ink_black", "volume_ml": 0.18},
      {"stock": "dye_nir", "volume_ml": 0.16, "dilution_factor": 10.0}, {"stock": "lipid20", "volume_ml": 24.0},
      {"stock": "dye_nir-D1", "volume_ml": 0.1}],
     "give its actual taken as volume_ml and its actual diluent as diluent_ml"),
    ([{"stock": "ink_black-D1", "mass_g": 0.1, "diluent_g": 0.9}], "made by volume"),
    ([{"stock": "ink_black-D1", "volume_ml": 0.1, "diluent_ml": 0.9}, {"stock": "dye_nir", "volume_ml": 0.16},
      {"stock": "lipid20", "volume_ml": 24.0}], "not the amount of it that went into the batch"),
    ([{"stock": "ink_black", "mass_g": 0.18, "dilution_factor": 10.0}, {"stock": "dye_nir", "volume_ml": 0.16},
      {"stock": "lipid20", "volume_ml": 24.0}], "made by volume (mL); give it by volume too"),
    ([{"stock": "water", "volume_ml": 476.0}, {"stock": "water:part_a", "volume_ml": 1.0}],
     "is not a stock of this batch nor a line of its sheet"),
    ([{"stock": "lipid20", "volume_ml": 24.0, "diluent_ml": 1.0}], "a diluent is given only for a pre-dilution step"),
    ([{"stock": "ink_black-D1", "volume_ml": 0.0, "diluent_ml": 0.9}], "actual taken must be > 0"),
    ([{"stock": "lipid20", "volume_ml": 24.0}], "no amount for"),
])
def test_a_sheet_that_does_not_add_up_is_refused_in_one_line(rows, said):
    recipe, _plan, stored = _planned("demo-nir-liquid.toml")
    with pytest.raises(InputError, match=said.replace("(", r"\(").replace(")", r"\)")) as refused:
        undiluted_amounts(rows, recipe, stored)
    assert "\n" not in str(refused.value)


@pytest.mark.parametrize("rows, said", [
    ([{"stock": "silicone", "mass_g": 299.0}, {"stock": "silicone:part_a", "mass_g": 272.0}], "not both"),
    ([{"stock": "silicone:part_a", "mass_g": 272.0}], "matrix line silicone:part_b not given"),
    ([{"stock": "silicone:part_a", "volume_ml": 264.0}, {"stock": "silicone:part_b", "mass_g": 27.3}],
     "is weighed; give it as mass_g"),
])
def test_matrix_lines_that_do_not_make_the_matrix_are_refused(rows, said):
    recipe, _plan, stored = _planned("demo-silicone.toml")
    doses = [{"stock": "carbon_black", "mass_g": 0.125, "dilution_factor": 100.0}, {"stock": "tio2", "mass_g": 0.33}]
    with pytest.raises(InputError, match=said):
        undiluted_amounts(rows + doses, recipe, stored)


def test_the_amounts_csv_takes_the_pre_dilution_columns():
    rows = parse_amounts_csv("stock,volume_ml,mass_g,dilution_factor,diluent_ml,diluent_g\n"
                             "ink-D1,0.1,,,0.9,\nink,0.2,,,,\npowder-D1,,0.5,,,9.5\n")
    assert rows == [{"stock": "ink-D1", "volume_ml": 0.1, "diluent_ml": 0.9},
                    {"stock": "ink", "volume_ml": 0.2, "dilution_factor": 1.0},
                    {"stock": "powder-D1", "mass_g": 0.5, "diluent_g": 9.5}]
    with pytest.raises(InputError, match="diluent_g: must be a finite number >= 0"):
        parse_amounts_csv("stock,mass_g,diluent_g\np-D1,0.5,-1\n")
