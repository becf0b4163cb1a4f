"""Serial pre-dilution of doses too small to dispense (layer 3).

A dose of ``D`` (mL of undiluted stock, or g when the batch is made by mass) below the lab's
smallest dispensable amount is delivered through ``n`` dilution steps: step ``k`` takes
``a_k`` of the previous liquid (the stock for k = 1) and adds ``b_k`` of diluent, so the
liquid it makes holds the stock at ``Π a_k / (a_k + b_k)``; the batch then receives
``v = D · Π (a_k + b_k) / a_k`` of the last dilution.  That is exact by construction: what
ends in the batch is ``v · Π a_k / (a_k + b_k) = D``.

Every pipetted or weighed amount (``a_k``, ``b_k``, ``v``) is at least the smallest
dispensable amount; each dilution made holds what is drawn from it plus the dead volume lost
in vessels and tubing, and at least the smallest working dilution the lab makes (a dilution
of a few hundred µL is hard to mix and loses a noticeable share to the vessel walls); no step
dilutes more than the lab's largest factor per step, and no dilution is larger than the
largest vessel.  Step factors are taken from 1-2-5 steps (1 in 2, 1 in 5, 1 in 10, …) plus
the largest factor allowed, so a technician pipettes round amounts; the final amount into the
batch carries the exact figure.  The fewest steps are used: ``n`` is the smallest count for
which such a plan exists (with ample vessels this is ``ceil(log(min / D) / log(F_max))``).
Among plans with that many steps the one whose smallest amount is largest (up to
:data:`COMFORTABLE_MULTIPLE` times the smallest dispensable amount) wins, then the gentlest
overall dilution, then the least made: amounts near the lower end of a pipette's or a
balance's range carry its largest relative error.
"""

from __future__ import annotations

import itertools
import math
from dataclasses import dataclass

import numpy as np

from phantomlab.errors import InputError

__all__ = ["COMFORTABLE_MULTIPLE", "DilutionInfeasible", "DilutionPlan", "DilutionStep", "plan_dilution"]

#: Preferred amounts for prepared dilutions (mantissas of a decade).
_NICE = (1.0, 1.5, 2.0, 2.5, 3.0, 4.0, 5.0, 6.0, 8.0, 10.0)
_FACTORS = (2.0, 5.0, 10.0, 20.0, 50.0, 100.0, 200.0, 500.0, 1000.0)
_SEARCH_LIMIT_STEPS = 3  # extra counts tried past the limit, to say how many would do
#: An amount this many times the smallest dispensable one is comfortably inside the range of
#: the pipette or balance; plans are ranked by how close their smallest amount comes to it.
COMFORTABLE_MULTIPLE = 5.0  # common practice, no source


@dataclass(frozen=True)
class DilutionStep:
    """One pre-dilution: ``source_amount`` of ``source`` plus ``diluent_amount`` of diluent.

    Amounts are in the plan's unit (mL, or g for a batch made by mass).
    """

    label: str
    source: str
    source_amount: float
    diluent_amount: float

    @property
    def total_amount(self) -> float:
        return self.source_amount + self.diluent_amount

    @property
    def factor(self) -> float:
        """Fraction of the source in this dilution, a / (a + b)."""
        return self.source_amount / (self.source_amount + self.diluent_amount)


@dataclass(frozen=True)
class DilutionPlan:
    """How one dose reaches the batch: the steps (maybe none) and the amount dispensed."""

    stock: str
    unit: str
    dose_amount: float
    steps: tuple
    dispense_amount: float
    diluent: str = "diluent"

    @property
    def overall_factor(self) -> float:
        return float(np.prod([s.factor for s in self.steps])) if self.steps else 1.0

    @property
    def delivered_amount(self) -> float:
        """Undiluted stock that ends in the batch [unit]: equals ``dose_amount``."""
        return self.dispense_amount * self.overall_factor

    @property
    def carried_diluent_amount(self) -> float:
        """Diluent that reaches the batch with the last dilution [unit]."""
        return self.dispense_amount - self.delivered_amount

    @property
    def dispense_from(self) -> str:
        return self.steps[-1].label if self.steps else f"{self.stock} stock"


class DilutionInfeasible(Exception):
    """No plan within the limits; ``needed_steps`` is the count that would do (or None)."""

    def __init__(self, message: str, needed_steps: int | None) -> None:
        super().__init__(message)
        self.needed_steps = needed_steps


def _round_up_nice(value: float) -> float:
    if value <= 0:
        return value
    decade = 10.0 ** math.floor(math.log10(value))
    for mantissa in _NICE:
        candidate = mantissa * decade
        if candidate >= value * (1 - 1e-12):
            return candidate
    return 10.0 * decade


def _build(stock, dose, factors, *, min_amount, dead_amount, max_vessel_amount, diluent, unit,
           min_total_amount=0.0, draw_multiple=1.0):
    dispense = dose * float(np.prod(factors))
    if dispense < min_amount * (1 - 1e-12):
        return None
    draws = dispense * draw_multiple
    prepared = []
    for factor in reversed(factors):
        need = max(draws + dead_amount, min_amount * factor, min_total_amount)
        amount = _round_up_nice(need)
        if amount > max_vessel_amount:
            amount = need
        if amount > max_vessel_amount * (1 + 1e-12):
            return None
        prepared.append((amount, factor))
        draws = amount / factor
    prepared.reverse()
    steps = []
    source = f"{stock} stock"
    for number, (amount, factor) in enumerate(prepared, start=1):
        a = amount / factor
        b = amount - a
        if a < min_amount * (1 - 1e-12) or b < min_amount * (1 - 1e-12):
            return None
        label = f"{stock}-D{number}"
        steps.append(DilutionStep(label=label, source=source, source_amount=a, diluent_amount=b))
        source = label
    # exact by construction: the dispensed amount is computed from the realised factors.
    overall = float(np.prod([s.factor for s in steps]))
    return DilutionPlan(stock=stock, unit=unit, dose_amount=dose, steps=tuple(steps),
                        dispense_amount=dose / overall, diluent=diluent)


def plan_dilution(
    *,
    stock: str,
    dose_amount: float,
    unit: str,
    min_amount: float,
    max_steps: int,
    dead_amount: float = 0.0,
    max_step_factor: float = 100.0,
    max_vessel_amount: float = 50.0,
    diluent: str = "diluent",
    min_total_amount: float = 0.0,
    draw_multiple: float = 1.0,
) -> DilutionPlan:
    """Plan the fewest serial pre-dilutions that let a dose be dispensed.

    Parameters
    ----------
    stock : str
        Stock key (used in the step labels, ``KEY-D1``, ``KEY-D2``…).
    dose_amount : float [mL or g]
        Undiluted stock that must end in the batch (> 0).
    unit : str
        ``"mL"`` or ``"g"``; every amount of the plan is in it.
    min_amount : float [unit]
        Smallest dispensable amount (pipette or balance).
    max_steps : int
        Most pre-dilution steps allowed.
    dead_amount : float [unit]
        Lost in each dilution's vessel and tubing: each dilution holds what is drawn plus this.
    max_step_factor : float
        Largest dilution factor (a + b) / a of one step (≥ 2).
    max_vessel_amount : float [unit]
        Largest dilution that can be made in one vessel.
    diluent : str
        What dilutes (named on the sheet).
    min_total_amount : float [unit]
        Smallest working dilution worth making (each dilution holds at least this much);
        at most ``max_vessel_amount``.
    draw_multiple : float
        The last dilution supplies this many times the dispensed amount (>= 1): several
        batches drawn from one working dilution, e.g. the levels of a calibration series,
        whose smallest dose is ``dose_amount``.

    Returns
    -------
    DilutionPlan
        No steps when the dose is dispensable as it is.

    Raises
    ------
    InputError
        For non-positive or non-finite amounts, or a smallest working dilution larger than
        the largest vessel.
    DilutionInfeasible
        When no plan of at most ``max_steps`` steps fits the limits.
    """
    for name, value in (("dose_amount", dose_amount), ("min_amount", min_amount)):
        if not (isinstance(value, (int, float, np.floating)) and math.isfinite(value) and value > 0):
            raise InputError(f"dilution: {name} must be a finite number > 0, got {value!r}")
    if unit not in ("mL", "g"):
        raise InputError(f"dilution: unit must be 'mL' or 'g', got {unit!r}")
    if not max_step_factor >= 2:
        raise InputError(f"dilution: max_step_factor must be >= 2, got {max_step_factor!r}")
    if dead_amount < 0 or not max_vessel_amount > 0 or int(max_steps) != max_steps or max_steps < 0:
        raise InputError("dilution: dead amount >= 0, vessel > 0 and whole max_steps >= 0 are needed")
    if not (math.isfinite(min_total_amount) and 0 <= min_total_amount <= max_vessel_amount * (1 + 1e-12)):
        raise InputError(f"dilution: the smallest working dilution ({min_total_amount!r} {unit}) must be "
                         f">= 0 and fit the largest vessel ({max_vessel_amount!r} {unit})")
    if dose_amount >= min_amount * (1 - 1e-12):
        return DilutionPlan(stock=stock, unit=unit, dose_amount=float(dose_amount), steps=(),
                            dispense_amount=float(dose_amount), diluent=diluent)
    factors = sorted({f for f in _FACTORS if f <= max_step_factor} | {float(max_step_factor)})
    if not (math.isfinite(draw_multiple) and draw_multiple >= 1):
        raise InputError(f"dilution: draw_multiple must be a number >= 1, got {draw_multiple!r}")
    kwargs = dict(min_amount=min_amount, dead_amount=dead_amount, max_vessel_amount=max_vessel_amount,
                  diluent=diluent, unit=unit, min_total_amount=float(min_total_amount),
                  draw_multiple=float(draw_multiple))
    fewest = max(1, math.ceil(math.log(min_amount / dose_amount) / math.log(factors[-1]) - 1e-12))
    for count in range(fewest, max(int(max_steps), fewest) + _SEARCH_LIMIT_STEPS):
        best = None
        for combo in itertools.combinations_with_replacement(factors, count):
            if dose_amount * float(np.prod(combo)) < min_amount * (1 - 1e-12):
                continue
            for ordered in {tuple(sorted(combo, reverse=True)), tuple(sorted(combo))}:
                plan = _build(stock, float(dose_amount), list(ordered), **kwargs)
                if plan is not None and (best is None or _rank(plan, min_amount) < _rank(best, min_amount)):
                    best = plan
        if best is not None:
            if count > max_steps:
                raise DilutionInfeasible(
                    f"{stock}: a dose of {_show(dose_amount, unit)} needs {count} pre-dilution "
                    f"steps; limit {int(max_steps)}", count)
            return best
    raise DilutionInfeasible(
        f"{stock}: a dose of {_show(dose_amount, unit)} cannot be pre-diluted within a "
        f"{_show(max_vessel_amount, unit)} vessel and 1:{max_step_factor:g} per step", None)


def _rank(plan: DilutionPlan, min_amount: float) -> tuple:
    # the largest smallest amount first (up to a comfortable multiple of the minimum), then the
    # gentlest overall dilution (least diluent carried into the batch), then the least made.
    amounts = [a for s in plan.steps for a in (s.source_amount, s.diluent_amount)] + [plan.dispense_amount]
    weakest = min(min(amounts) / min_amount, COMFORTABLE_MULTIPLE)
    return (-round(weakest, 6), round(plan.dispense_amount / plan.dose_amount, 9),
            sum(s.total_amount for s in plan.steps))


def _show(amount: float, unit: str) -> str:
    if unit == "mL":
        return f"{amount * 1000:.3g} µL" if amount < 1 else f"{amount:.4g} mL"
    return f"{amount * 1000:.3g} mg" if amount < 1 else f"{amount:.4g} g"
