"""Serial pre-dilution planner: property tests (hypothesis) and worked cases.

Properties checked on every generated case (the issue's rules, exact by construction):
every pipetted or weighed amount is at least the smallest dispensable amount; what ends in
the batch equals the dose; no more steps than allowed; each dilution holds what is drawn from
it plus the dead volume and fits the vessel; no step dilutes more than the factor limit; and
no plan with fewer steps exists (the lower bound ceil(log(min/dose) / log(F_max)) is met
whenever the vessel is large enough for the largest factor).
"""

import math

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from phantomlab.errors import InputError
from phantomlab.recipe.dilution import DilutionInfeasible, plan_dilution

doses = st.floats(min_value=1e-7, max_value=1.0, allow_nan=False)
minimums = st.floats(min_value=1e-3, max_value=0.1)
factors = st.sampled_from([10.0, 20.0, 50.0, 100.0, 250.0])
deads = st.floats(min_value=0.0, max_value=1.0)


def _check(plan, *, dose, min_amount, max_steps, dead, factor, vessel):
    tiny = 1e-9
    assert len(plan.steps) <= max_steps
    assert plan.delivered_amount == pytest.approx(dose, rel=1e-12)
    assert plan.dispense_amount >= min_amount * (1 - tiny)
    draws = [s.source_amount for s in plan.steps[1:]] + [plan.dispense_amount]
    for step, drawn in zip(plan.steps, draws):
        assert step.source_amount >= min_amount * (1 - tiny)
        assert step.diluent_amount >= min_amount * (1 - tiny)
        assert step.total_amount >= drawn + dead - tiny
        assert step.total_amount <= vessel * (1 + tiny)
        assert 1.0 / step.factor <= factor * (1 + tiny)


@settings(max_examples=150, deadline=None)
@given(dose=doses, min_amount=minimums, factor=factors, dead=deads,
       max_steps=st.integers(min_value=0, max_value=4))
def test_plans_respect_every_limit_and_are_exact(dose, min_amount, factor, dead, max_steps):
    vessel = 1e6
    try:
        plan = plan_dilution(stock="x", dose_amount=dose, unit="mL", min_amount=min_amount,
                             max_steps=max_steps, dead_amount=dead, max_step_factor=factor,
                             max_vessel_amount=vessel)
    except DilutionInfeasible as exc:
        fewest = math.ceil(math.log(min_amount / dose) / math.log(factor) - 1e-12)
        assert exc.needed_steps == fewest > max_steps
        return
    _check(plan, dose=dose, min_amount=min_amount, max_steps=max_steps, dead=dead, factor=factor,
           vessel=vessel)
    fewest = 0 if dose >= min_amount else math.ceil(math.log(min_amount / dose) / math.log(factor) - 1e-12)
    assert len(plan.steps) == fewest  # fewest steps possible


@settings(max_examples=100, deadline=None)
@given(dose=doses, min_amount=minimums, factor=factors, dead=deads,
       vessel=st.floats(min_value=0.5, max_value=100.0))
def test_small_vessels_still_respected(dose, min_amount, factor, dead, vessel):
    try:
        plan = plan_dilution(stock="x", dose_amount=dose, unit="g", min_amount=min_amount, max_steps=4,
                             dead_amount=dead, max_step_factor=factor, max_vessel_amount=vessel)
    except DilutionInfeasible:
        return
    _check(plan, dose=dose, min_amount=min_amount, max_steps=4, dead=dead, factor=factor, vessel=vessel)


def test_worked_case_one_step_round_amounts():
    # 2 uL of dye, 10 uL smallest pipetting, 0.1 mL dead volume: 1:10 gives 20 uL to dispense
    plan = plan_dilution(stock="dye", dose_amount=0.002, unit="mL", min_amount=0.010, max_steps=3,
                         dead_amount=0.1, max_step_factor=100, max_vessel_amount=50)
    (step,) = plan.steps
    assert 1 / step.factor == pytest.approx(5.0)  # gentlest 1-2-5 factor that reaches 10 uL
    assert plan.dispense_amount == pytest.approx(0.010)
    assert step.total_amount == pytest.approx(0.15)  # 10 uL drawn + 0.1 mL dead, rounded up to 0.15
    assert step.source_amount == pytest.approx(0.03) and step.diluent_amount == pytest.approx(0.12)
    assert plan.dispense_from == "dye-D1"


def test_no_dilution_when_dispensable():
    plan = plan_dilution(stock="dye", dose_amount=0.5, unit="mL", min_amount=0.01, max_steps=0)
    assert plan.steps == () and plan.dispense_amount == 0.5


def test_too_many_steps_names_the_count():
    with pytest.raises(DilutionInfeasible, match=r"dye: a dose of 0.0001 µL needs 3 pre-dilution steps; limit 2"):
        plan_dilution(stock="dye", dose_amount=1e-7, unit="mL", min_amount=0.01, max_steps=2,
                      max_step_factor=100, max_vessel_amount=1e6)


@pytest.mark.parametrize("kwargs, match", [
    ({"dose_amount": -1.0}, "dose_amount must be a finite number > 0"),
    ({"dose_amount": float("nan")}, "dose_amount must be a finite number > 0"),
    ({"unit": "L"}, "unit must be 'mL' or 'g'"),
    ({"max_step_factor": 1.5}, "max_step_factor must be >= 2"),
])
def test_bad_input(kwargs, match):
    args = dict(stock="x", dose_amount=0.001, unit="mL", min_amount=0.01, max_steps=2)
    args.update(kwargs)
    with pytest.raises(InputError, match=match):
        plan_dilution(**args)
