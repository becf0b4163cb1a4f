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
from phantomlab.recipe.dilution import COMFORTABLE_MULTIPLE, DilutionInfeasible, plan_dilution

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
    # 2 uL of dye, 10 uL smallest pipetting, 0.1 mL dead volume, no smallest working dilution.
    # Candidates (worked by hand): 1 in 5 -> 30 + 120 uL, dispense 10 uL (smallest amount 1x min);
    # 1 in 10 -> 15 + 135 uL (10 uL drawn + 0.1 mL dead, rounded up to 0.15 mL), dispense 20 uL
    # (smallest 1.5x); 1 in 20 and more need 10 uL of stock (1x).  The largest smallest amount wins.
    plan = plan_dilution(stock="dye", dose_amount=0.002, unit="mL", min_amount=0.010, max_steps=3,
                         dead_amount=0.1, max_step_factor=100, max_vessel_amount=50)
    (step,) = plan.steps
    assert 1 / step.factor == pytest.approx(10.0)
    assert plan.dispense_amount == pytest.approx(0.020)
    assert step.total_amount == pytest.approx(0.15)
    assert step.source_amount == pytest.approx(0.015) and step.diluent_amount == pytest.approx(0.135)
    assert plan.dispense_from == "dye-D1"


def test_worked_case_with_a_working_dilution_of_1_ml():
    # The same dose with a 1 mL smallest working dilution (common practice, no source): every
    # candidate makes 1 mL.  1 in 10 -> 100 + 900 uL, dispense 20 uL (smallest 2x min);
    # 1 in 20 -> 50 + 950 uL, dispense 40 uL (4x); 1 in 50 -> 20 + 980 uL (2x); 1 in 5 ->
    # dispense 10 uL (1x).  1 in 20 has the largest smallest amount.
    plan = plan_dilution(stock="dye", dose_amount=0.002, unit="mL", min_amount=0.010, max_steps=3,
                         dead_amount=0.1, max_step_factor=100, max_vessel_amount=50, min_total_amount=1.0)
    (step,) = plan.steps
    assert 1 / step.factor == pytest.approx(20.0)
    assert step.source_amount == pytest.approx(0.050) and step.diluent_amount == pytest.approx(0.950)
    assert plan.dispense_amount == pytest.approx(0.040)
    assert plan.delivered_amount == pytest.approx(0.002, rel=1e-12)


def test_comfortable_amounts_are_preferred_to_the_gentlest_dilution():
    # 17.8 uL of ink, 20 uL smallest pipetting, 1 mL working dilution: 1 in 2 would pipette
    # 35.7 uL (under 5x min = 100 uL, COMFORTABLE_MULTIPLE); 1 in 10 gives 100 + 900 uL and
    # 178 uL into the batch, every amount at least 5x min; gentler than 1 in 20 (50 uL of stock).
    plan = plan_dilution(stock="ink", dose_amount=0.01783, unit="mL", min_amount=0.020, max_steps=3,
                         dead_amount=0.1, max_step_factor=100, max_vessel_amount=50, min_total_amount=1.0)
    (step,) = plan.steps
    assert COMFORTABLE_MULTIPLE == 5.0
    assert 1 / step.factor == pytest.approx(10.0)
    assert step.source_amount == pytest.approx(0.1) and step.diluent_amount == pytest.approx(0.9)
    assert plan.dispense_amount == pytest.approx(0.1783)


def test_working_dilution_larger_than_the_vessel_is_refused():
    with pytest.raises(InputError, match=r"smallest working dilution \(60.0 mL\) must be >= 0 and fit the largest vessel"):
        plan_dilution(stock="x", dose_amount=0.001, unit="mL", min_amount=0.01, max_steps=2,
                      max_vessel_amount=50.0, min_total_amount=60.0)


@settings(max_examples=60, deadline=None)
@given(dose=doses, min_amount=minimums, factor=factors, dead=deads,
       working=st.floats(min_value=0.0, max_value=20.0))
def test_working_dilution_is_respected(dose, min_amount, factor, dead, working):
    try:
        plan = plan_dilution(stock="x", dose_amount=dose, unit="mL", min_amount=min_amount, max_steps=4,
                             dead_amount=dead, max_step_factor=factor, max_vessel_amount=50.0,
                             min_total_amount=working)
    except DilutionInfeasible:
        return
    _check(plan, dose=dose, min_amount=min_amount, max_steps=4, dead=dead, factor=factor, vessel=50.0)
    assert all(s.total_amount >= working * (1 - 1e-9) for s in plan.steps)


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


@settings(max_examples=60, deadline=None)
@given(dose=doses, min_amount=minimums, factor=factors, dead=deads,
       multiple=st.floats(min_value=1.0, max_value=30.0))
def test_last_dilution_holds_every_draw_of_a_shared_dilution(dose, min_amount, factor, dead, multiple):
    try:
        plan = plan_dilution(stock="x", dose_amount=dose, unit="mL", min_amount=min_amount, max_steps=4,
                             dead_amount=dead, max_step_factor=factor, max_vessel_amount=1e6,
                             draw_multiple=multiple)
    except DilutionInfeasible:
        return
    _check(plan, dose=dose, min_amount=min_amount, max_steps=4, dead=dead, factor=factor, vessel=1e6)
    if plan.steps:
        assert plan.steps[-1].total_amount >= multiple * plan.dispense_amount + dead - 1e-9


def test_draw_multiple_below_one_refused():
    with pytest.raises(InputError, match="draw_multiple must be a number >= 1"):
        plan_dilution(stock="x", dose_amount=0.001, unit="mL", min_amount=0.01, max_steps=2, draw_multiple=0.5)
