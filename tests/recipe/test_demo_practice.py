"""The demo plans as a technician would make them: practical pre-dilutions, the right diluent,
dry powders weighed, every amount within the recipe's limits.

The rules checked are the planner's own limits (``[limits]`` of each demo recipe) and rules
of thumb of the trade, marked where used.
"""

from pathlib import Path

import pytest

from phantomlab.recipe import load_recipe, parse_recipe, solve
from phantomlab.recipe.dilution import COMFORTABLE_MULTIPLE

RECIPES = Path(__file__).resolve().parents[2] / "recipes"
DEMOS = ["demo-nir-liquid", "demo-silicone", "demo-gel-g"]
pytestmark = pytest.mark.filterwarnings("ignore::phantomlab.errors.PhantomlabWarning")


@pytest.fixture(scope="module", params=DEMOS)
def demo_plan(request):
    return solve(load_recipe(RECIPES / f"{request.param}.toml"), curve=False)


def test_every_amount_and_dilution_within_the_recipe_limits(demo_plan):
    limits = demo_plan.recipe.limits
    for dose in (d for d in demo_plan.doses if d.used):
        minimum = limits.min_weigh_g if dose.by == "balance" else limits.min_dispense_ml
        assert dose.dispense_amount >= minimum * (1 - 1e-9)
        if dose.dilution is None:
            continue
        smallest_made = limits.min_dilution_g if dose.dilution.unit == "g" else limits.min_dilution_ml
        for step in dose.dilution.steps:
            assert step.source_amount >= minimum * (1 - 1e-9) and step.diluent_amount >= minimum * (1 - 1e-9)
            assert step.total_amount >= smallest_made * (1 - 1e-9)
        assert dose.dilution.delivered_amount == pytest.approx(dose.dispense_amount * dose.dilution.overall_factor)


def test_demo_liquid_dilutions_are_working_volumes():
    # 1 mL working dilutions at 1 in 10, pipetting at least 5x the 20 uL minimum
    # (COMFORTABLE_MULTIPLE, common practice, no source) — not 75 uL + 75 uL in a vial.
    plan = solve(load_recipe(RECIPES / "demo-nir-liquid.toml"), curve=False)
    for key in ("ink_black", "dye_nir"):
        dose = plan.dose(key)
        (step,) = dose.dilution.steps
        assert step.total_amount == pytest.approx(1.0) and 1 / step.factor == pytest.approx(10.0)
        assert dose.dispense_amount >= COMFORTABLE_MULTIPLE * plan.recipe.limits.min_dispense_ml
        assert dose.dilution.diluent == "water (matrix)"


def test_demo_silicone_uses_a_silicone_absorber_dispersed_in_base():
    plan = solve(load_recipe(RECIPES / "demo-silicone.toml"), curve=False)
    assert "ink_black" not in plan.recipe.stock_keys
    dose = plan.dose("carbon_black")
    assert dose.by == "balance" and dose.dilution is not None
    assert dose.dilution.diluent == "silicone base (part A)"
    (step,) = dose.dilution.steps
    assert step.total_amount >= 10.0 - 1e-9  # the recipe's min_dilution_g: a masterbatch of 10 g
    assert plan.recipe.stock("carbon_black").hazards == ("nano_powder",)
    # the masterbatch's base is taken off the base weighed for the batch
    base = plan.matrix.parts[0]
    assert base[0] == "silicone base (part A)"
    carried = dose.dilution.carried_diluent_amount
    ratio = plan.recipe.preparation["base_to_curing_agent"]
    assert base[1] == pytest.approx(plan.matrix.mass_g * ratio / (ratio + 1) - carried, rel=1e-12)


def test_a_dry_powder_absorber_is_weighed_even_in_a_liquid_recipe():
    base = load_recipe(RECIPES / "demo-nir-liquid.toml")
    definition = {**base.definition, "stocks": ["lipid20", "carbon_black"]}
    recipe = parse_recipe(definition, base_dir=RECIPES, shelf=base.shelf)
    plan = solve(recipe, curve=False)
    dose = plan.dose("carbon_black")
    assert dose.by == "balance" and dose.unit == "g"
    assert plan.dose("lipid20").by == "pipette"


@pytest.mark.parametrize("recipe_name, stock", [("demo-nir-liquid", "ink_black"), ("demo-silicone", "carbon_black")])
def test_series_levels_draw_from_one_working_dilution(recipe_name, stock):
    from phantomlab.recipe.calibration_series import plan_series
    from phantomlab.recipe.sheet import render_series_html

    series = plan_series(load_recipe(RECIPES / f"{recipe_name}.toml"), stock, levels=4)
    shared = series.shared_dilution
    assert shared is not None and shared.steps
    doses = [lv.plan.dose(stock) for lv in series.levels[1:]]
    limits = series.recipe.limits
    minimum = limits.min_weigh_g if shared.unit == "g" else limits.min_dispense_ml
    dead = limits.dead_volume_ml * (series.recipe.matrix.density_g_per_ml if shared.unit == "g" else 1.0)
    for dose in doses:
        assert dose.dilution.steps == shared.steps  # the same vessels for every level
        assert dose.dilution.delivered_amount == pytest.approx(dose.mass_g if shared.unit == "g" else dose.volume_ml,
                                                               rel=1e-12)
        assert dose.dispense_amount >= minimum * (1 - 1e-9)
    # the last dilution holds what every level draws from it plus its dead volume
    assert shared.steps[-1].total_amount >= sum(d.dispense_amount for d in doses) + dead - 1e-9
    html = render_series_html(series)
    with_dilutions = sum(1 for lv in series.levels if any(d.dilution for d in lv.plan.doses))
    assert html.count("One set of pre-dilutions for the whole series") == with_dilutions >= len(series.levels) - 1
    # a stock held at the recipe dose is pre-diluted once for all levels too
    for shared_plan in series.shared_dilutions:
        users = [lv.plan.dose(shared_plan.stock) for lv in series.levels if lv.plan.dose(shared_plan.stock).used]
        assert all(d.dilution.steps == shared_plan.steps for d in users)
        assert shared_plan.steps[-1].total_amount >= sum(d.dispense_amount for d in users) + dead - 1e-9
