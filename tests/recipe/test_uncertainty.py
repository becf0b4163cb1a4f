"""Linear uncertainty propagation against sampled (Monte Carlo) propagation.

JCGM 101:2008 (GUM Supplement 1) propagates distributions by sampling; the linear law of
JCGM 100:2008 eq. 10 must agree with it within 10 % for the small relative errors of a
mixing sheet.  Seeds are fixed; 40 000 samples give the sampled SD to about 0.4 % (one
standard error ≈ SD/√(2N)), far inside the 10 % tolerance, so a wrong derivative fails.
"""

import math

import numpy as np
import pytest

from phantomlab.recipe import predict, solve
from phantomlab.recipe.dilution import DilutionStep
from phantomlab.recipe.mixmodel import mix_coefficients
from phantomlab.recipe.uncertainty import amount_relative_sd, dose_relative_sd, propagate_sd

from recipe_synthetic import forward_target, synthetic_recipe, synthetic_table

N = 40_000
FRACTIONS = np.array([0.02, 0.01, 0.001, 0.0005])


def _sampled(table, fractions, potencies, potency_sd, dose_sd, matrix_sd, seed=7):
    rng = np.random.default_rng(seed)
    p = potencies + potency_sd * rng.standard_normal((N, 4))
    delivered = fractions * (1 + dose_sd * rng.standard_normal((N, 4)))
    matrix = (1 - fractions.sum()) * (1 + matrix_sd * rng.standard_normal((N, 1)))
    f = delivered / (delivered.sum(axis=1, keepdims=True) + matrix)
    mix = mix_coefficients(table, volume_fractions=f, potencies=p)
    return mix["mua_per_mm"].std(axis=0), mix["musp_per_mm"].std(axis=0)


def test_linear_sd_matches_sampled_within_10_percent():
    table = synthetic_table()
    potencies = np.ones(4)
    potency_sd = np.array([0.05, 0.05, 0.10, 0.15])
    dose_sd = np.array([0.01, 0.02, 0.03, 0.05])
    linear = propagate_sd(table, volume_fractions=FRACTIONS, potencies=potencies, potency_sd=potency_sd,
                          dose_rel_sd=dose_sd, matrix_rel_sd=0.01)
    mua_sd, musp_sd = _sampled(table, FRACTIONS, potencies, potency_sd, dose_sd, 0.01)
    np.testing.assert_allclose(linear["mua_sd_per_mm"], mua_sd, rtol=0.10)
    np.testing.assert_allclose(linear["musp_sd_per_mm"], musp_sd, rtol=0.10)


def test_dispensing_only_sd_matches_sampled():
    # potencies exact: only the amounts vary (the displacement terms are what is tested)
    table = synthetic_table()
    dose_sd = np.array([0.05, 0.05, 0.05, 0.05])
    linear = propagate_sd(table, volume_fractions=FRACTIONS, potencies=np.ones(4), potency_sd=np.zeros(4),
                          dose_rel_sd=dose_sd, matrix_rel_sd=0.02)
    mua_sd, musp_sd = _sampled(table, FRACTIONS, np.ones(4), np.zeros(4), dose_sd, 0.02, seed=11)
    np.testing.assert_allclose(linear["mua_sd_per_mm"], mua_sd, rtol=0.10)
    np.testing.assert_allclose(linear["musp_sd_per_mm"], musp_sd, rtol=0.10)


def test_balance_two_readings_sd_matches_sampled_rounding():
    # JCGM 100:2008 4.3.7: rounding to resolution d is uniform, SD d/sqrt(12); tare + gross -> d/sqrt(6).
    # For one exact mass the two roundings are correlated (variance u(1-u) d^2, u its fractional
    # part in units of d); over masses the fractional part is uniform and the mean is d^2/6.
    d, mass = 0.001, 0.0234
    rng = np.random.default_rng(3)
    tare = rng.uniform(0, 10, N)
    true = mass + rng.uniform(-d / 2, d / 2, N)
    reading = lambda x: np.round(x / d) * d  # noqa: E731
    error = (reading(tare + true) - reading(tare)) - true
    assert amount_relative_sd(mass, by="balance", pipette_rel_error=0.0, balance_resolution_g=d) == \
        pytest.approx(error.std() / mass, rel=0.05)


def test_dilution_chain_sd_matches_sampled():
    steps = (DilutionStep("x-D1", "x stock", 0.02, 1.98), DilutionStep("x-D2", "x-D1", 0.05, 0.45))
    rel = 0.02
    linear = dose_relative_sd(dispense_amount=0.03, steps=steps, by="pipette", pipette_rel_error=rel,
                              balance_resolution_g=0.001)
    rng = np.random.default_rng(5)
    e = 1 + rel * rng.standard_normal((N, 5))
    delivered = 0.03 * e[:, 0]
    for k, s in enumerate(steps):
        a, b = s.source_amount * e[:, 1 + 2 * k], s.diluent_amount * e[:, 2 + 2 * k]
        delivered = delivered * a / (a + b)
    nominal = 0.03 * np.prod([s.factor for s in steps])
    assert linear == pytest.approx((delivered / nominal).std(), rel=0.05)
    assert linear > rel  # dilution adds error


def test_plan_sd_includes_potency_and_dispensing():
    table = synthetic_table()
    recipe = synthetic_recipe(forward_target(table, FRACTIONS))
    plan = solve(recipe, table=table, curve=False)
    only_potency = predict(recipe, volume_fractions=plan.volume_fractions, table=table)
    assert np.all(plan.predicted.mua_sd_per_mm >= only_potency.mua_sd_per_mm)
    assert np.all(plan.predicted.musp_sd_per_mm > 0)
    np.testing.assert_allclose(only_potency.mua_per_mm, plan.predicted.mua_per_mm, rtol=1e-12)


def test_predict_refuses_unknown_stock_and_bad_fractions():
    from phantomlab.errors import InputError

    table = synthetic_table()
    recipe = synthetic_recipe(forward_target(table, FRACTIONS))
    with pytest.raises(InputError, match="'nope' is not a stock of this recipe"):
        predict(recipe, volume_fractions={"nope": 0.1}, table=table)
    with pytest.raises(InputError, match="finite, >= 0"):
        predict(recipe, volume_fractions={"sca": math.nan}, table=table)
    with pytest.raises(InputError, match="finite, >= 0"):
        predict(recipe, volume_fractions={"sca": -0.1}, table=table)
