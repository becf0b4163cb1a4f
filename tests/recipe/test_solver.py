"""Dose solver on synthetic intrinsic spectra (tests/recipe/synthetic.py: invented inputs).

Checks are exact properties of least squares: doses used to compute a target forward are
solved back; a broken limit is named with the figure the target needs; the closest feasible
recipe sits on the limit and is at least as good as any other feasible recipe tried.
"""

import re

import numpy as np
import pytest

from phantomlab.errors import PhantomlabWarning
from phantomlab.recipe import solve
from phantomlab.recipe.mixmodel import IntrinsicTable, mix_coefficients
from phantomlab.recipe.solver import solve_fractions, target_rows
from phantomlab.recipe.targets import parse_target

from recipe_synthetic import WAVELENGTH_NM, forward_target, synthetic_recipe, synthetic_table

TRUE_FRACTIONS = np.array([0.02, 0.01, 0.001, 0.0005])


def _target(table, fractions, **kw):
    return parse_target(forward_target(table, fractions, **kw), base_dir=".")


def test_round_trip_within_0p1_percent():
    table = synthetic_table()
    outcome = solve_fractions(table, _target(table, TRUE_FRACTIONS), potencies=np.ones(4),
                              max_solids_volume_fraction=0.05)
    np.testing.assert_allclose(outcome.volume_fractions, TRUE_FRACTIONS, rtol=1e-3)
    assert outcome.binding_limits == ()


def test_round_trip_through_solve_gives_doses_in_ml():
    table = synthetic_table()
    plan = solve(synthetic_recipe(forward_target(table, TRUE_FRACTIONS)), table=table, curve=False)
    volumes = [d.volume_ml for d in plan.doses]
    np.testing.assert_allclose(volumes, TRUE_FRACTIONS * 500.0, rtol=1e-3)
    assert plan.matrix.volume_ml == pytest.approx(500.0 * (1 - TRUE_FRACTIONS.sum()), rel=1e-9)
    assert plan.residuals["mua_met"] and plan.residuals["musp_met"]


def test_round_trip_with_potency_override():
    # a stock calibrated at potency 0.8 needs 1/0.8 of its nominal dose
    table = synthetic_table()
    recipe = synthetic_recipe(forward_target(table, TRUE_FRACTIONS))
    plan = solve(recipe, table=table, potencies={"abs1": (0.8, 0.02)}, curve=False)
    assert plan.dose("abs1").volume_fraction == pytest.approx(TRUE_FRACTIONS[2] / 0.8, rel=1e-3)
    assert plan.dose("abs1").potency_source == "calibrated"
    assert plan.dose("sca").potency_source == "shelf"


def test_other_lot_calibration_is_not_used():
    table = synthetic_table()
    recipe = synthetic_recipe(forward_target(table, TRUE_FRACTIONS))
    plan = solve(recipe, table=table, potencies={"abs1": (0.8, 0.02, "some-other-lot")}, curve=False)
    assert plan.dose("abs1").volume_fraction == pytest.approx(TRUE_FRACTIONS[2], rel=1e-3)
    assert any("prior" in w for w in plan.warnings)


def test_g_target_blends_two_sphere_stocks():
    # g of the mix is the mus-weighted mean of the stocks' g (0.8 and 0.6 here)
    table = synthetic_table()
    fractions = np.array([0.01, 0.02, 0.001, 0.0])
    target = _target(table, fractions, with_g=True)
    assert 0.6 < np.nanmin(target.g) and np.nanmax(target.g) < 0.8
    outcome = solve_fractions(table, target, potencies=np.ones(4), max_solids_volume_fraction=0.05)
    np.testing.assert_allclose(outcome.volume_fractions[:3], fractions[:3], rtol=1e-3)
    mix = mix_coefficients(table, volume_fractions=outcome.volume_fractions, potencies=np.ones(4))
    np.testing.assert_allclose(mix["g"], target.g, atol=1e-4)


def test_g_row_is_zero_exactly_when_g_is_met():
    table = synthetic_table()
    fractions = np.array([0.01, 0.02, 0.0, 0.0])
    target = _target(table, fractions, with_g=True)
    A, b = target_rows(table, target, potencies=np.ones(4))
    residual = A @ fractions - b
    np.testing.assert_allclose(residual, 0.0, atol=1e-9)


def test_solids_limit_names_wavelength_and_figures_and_gives_closest_recipe():
    table = synthetic_table()
    target = _target(table, TRUE_FRACTIONS)
    needed = float(table.solids_volume_fraction @ TRUE_FRACTIONS)  # 0.000714
    limit = 0.0005
    outcome = solve_fractions(table, target, potencies=np.ones(4), max_solids_volume_fraction=limit)
    (binding,) = [b for b in outcome.binding_limits if b.limit == "max_solids_volume_fraction"]
    assert re.fullmatch(r"musp at \d+ nm needs [0-9.]+ % v/v solids; limit 0.05 %", binding.message)
    assert binding.needed >= needed * (1 - 1e-6)
    used = float(table.solids_volume_fraction @ outcome.volume_fractions)
    assert used == pytest.approx(limit, rel=1e-6)
    # the closest feasible recipe beats other feasible candidates: the ideal scaled onto the
    # limit, and random feasible points on the limit
    A, b = target_rows(table, target, potencies=np.ones(4))
    cost = lambda x: float(np.sum((A @ x - b) ** 2))  # noqa: E731
    best = cost(outcome.volume_fractions)
    assert best <= cost(TRUE_FRACTIONS * limit / needed) + 1e-12
    rng = np.random.default_rng(1)
    for _ in range(200):
        x = outcome.volume_fractions * rng.uniform(0.8, 1.2, 4)
        x *= min(1.0, limit / float(table.solids_volume_fraction @ x))
        assert best <= cost(x) + 1e-9


def test_infeasible_plan_still_gives_doses_and_warns():
    table = synthetic_table()
    recipe = synthetic_recipe(forward_target(table, TRUE_FRACTIONS),
                              limits={"max_solids_volume_fraction": 0.0005})
    plan = solve(recipe, table=table, curve=False)
    assert any(re.match(r"musp at \d+ nm needs", w) for w in plan.warnings)
    assert "closest feasible recipe given" in plan.warnings
    assert plan.dose("sca").volume_ml + plan.dose("sca2").volume_ml > 0
    assert plan.dose("abs1").volume_ml > 0
    assert not plan.residuals["musp_met"]


def test_matrix_absorption_floor_is_named():
    full = synthetic_table()
    table = IntrinsicTable(  # the two absorbers only: nothing can lower the matrix's absorption
        wavelength_nm=full.wavelength_nm, stock_keys=full.stock_keys[2:], mua_per_mm=full.mua_per_mm[2:],
        mus_per_mm=full.mus_per_mm[2:], g=full.g[2:], matrix_mua_per_mm=full.matrix_mua_per_mm,
        solids_volume_fraction=full.solids_volume_fraction[2:], density_g_per_ml=[1.0, 1.0])
    target = {"wavelength_nm": WAVELENGTH_NM.tolist(), "mua_per_mm": [0.001] * WAVELENGTH_NM.size}
    outcome = solve_fractions(table, parse_target(target, base_dir="."), potencies=np.ones(2))
    (binding,) = outcome.binding_limits
    assert binding.limit == "matrix_absorption"
    assert re.search(r"mua at 900 nm: the matrix alone absorbs 0.005 /mm, above the target 0.001 /mm",
                     binding.message)


def test_batch_volume_limit_when_stocks_too_weak():
    table = synthetic_table([650.0])
    target = {"wavelength_nm": [650.0], "mua_per_mm": [30.0]}  # abs1 alone gives 5.2 /mm
    with pytest.warns(PhantomlabWarning, match="check the unit"):
        parsed = parse_target(target, base_dir=".")
    outcome = solve_fractions(table, parsed, potencies=np.ones(4))
    assert any(b.limit == "batch_volume" for b in outcome.binding_limits)
    assert outcome.volume_fractions.sum() <= 1 + 1e-9


def test_nonnegative_doses_when_target_wants_less_of_a_stock():
    table = synthetic_table()
    fractions = np.array([0.02, 0.0, 0.001, 0.0])
    outcome = solve_fractions(table, _target(table, fractions), potencies=np.ones(4))
    assert np.all(outcome.volume_fractions >= 0)
    np.testing.assert_allclose(outcome.volume_fractions, fractions, atol=1e-7)


def test_by_mass_batch_converts_with_densities():
    table = synthetic_table()
    dense = IntrinsicTable(**{**table.__dict__, "density_g_per_ml": np.array([1.0, 1.0, 2.0, 1.0]),
                              "matrix_density_g_per_ml": 1.03})
    recipe = synthetic_recipe(forward_target(dense, TRUE_FRACTIONS), batch=("batch_mass_g", 200.0),
                              preparation={"kind": "silicone", "base_to_curing_agent": 10})
    plan = solve(recipe, table=dense, curve=False)
    total = sum(d.mass_g for d in plan.doses) + plan.matrix.mass_g
    assert total == pytest.approx(200.0, rel=1e-9)
    assert plan.dose("abs1").mass_g == pytest.approx(2.0 * plan.dose("abs1").volume_ml, rel=1e-12)
    base, agent = plan.matrix.parts
    assert base[1] + plan.matrix.carried_diluent_mass_g == pytest.approx(10 * agent[1], rel=1e-9)
    assert all(d.by == "balance" for d in plan.doses if d.used)


def test_predilution_keeps_the_batch_volume_and_exact_dose():
    table = synthetic_table()
    fractions = np.array([0.02, 0.01, 0.001, 2e-6])  # abs2: 1 uL in 500 mL, below 10 uL
    plan = solve(synthetic_recipe(forward_target(table, fractions)), table=table, curve=False)
    dose = plan.dose("abs2")
    assert dose.dilution is not None and dose.dilution.delivered_amount == pytest.approx(dose.volume_ml, rel=1e-12)
    dispensed = sum(d.dispense_amount for d in plan.doses if d.used)
    water = plan.matrix.parts[0][1]
    assert water + dispensed == pytest.approx(500.0, rel=1e-12)


def test_too_many_dilution_steps_is_a_binding_limit():
    table = synthetic_table()
    fractions = np.array([0.02, 0.01, 0.001, 2e-9])  # abs2: 1 nL in 500 mL
    recipe = synthetic_recipe(forward_target(table, fractions), limits={"max_dilution_steps": 1})
    plan = solve(recipe, table=table, curve=False)
    (binding,) = [b for b in plan.binding_limits if b.limit == "max_dilution_steps"]
    assert re.fullmatch(r"abs2: a dose of [0-9.]+ µL needs 2 pre-dilution steps; limit 1", binding.message)
    assert any("cannot be dispensed as it stands" in w for w in plan.warnings)
