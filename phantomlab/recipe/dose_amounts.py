"""From volume fractions to amounts to dispense: doses, pre-dilutions, matrix parts (layer 3).

What a plan lists at the bench, for fractions the solver (:mod:`phantomlab.recipe.solver`)
or the caller chose: the batch volume (by mass: M/ρ with ρ = Σ f_j ρ_j, volumes adding),
each dose pipetted or weighed (:func:`is_dry_powder`) with its ± tolerance
(:func:`dispense_tolerance`), relative SD (:mod:`phantomlab.recipe.uncertainty`) and
pre-dilution (:func:`phantomlab.recipe.dilution.plan_dilution` within
:func:`dilution_limits`), and the matrix parts less the diluent the pre-dilutions carry.
:mod:`phantomlab.recipe.plan` assembles them into a :class:`~phantomlab.recipe.plan_result.Plan`.
"""

from __future__ import annotations

import math
from typing import Any

import numpy as np

from phantomlab.errors import InputError
from phantomlab.recipe.dilution import DilutionInfeasible, DilutionPlan, plan_dilution
from phantomlab.recipe.mixmodel import IntrinsicTable
from phantomlab.recipe.plan_result import UNUSED_FRACTION, Dose, MatrixAmounts
from phantomlab.recipe.recipe_file import Recipe
from phantomlab.recipe.solver import BindingLimit
from phantomlab.recipe.uncertainty import dose_relative_sd

__all__ = ["batch_volume", "dilution_limits", "dispense_tolerance", "doses_for", "is_dry_powder",
           "matrix_amounts_for"]


def batch_volume(recipe: Recipe, table: IntrinsicTable, fractions: np.ndarray) -> float:
    if not recipe.by_mass:
        return float(recipe.batch_volume_ml)
    density = fractions @ table.density_g_per_ml + (1 - fractions.sum()) * table.matrix_density_g_per_ml
    return float(recipe.batch_mass_g / density)


def _diluent_name(recipe: Recipe) -> str:
    kind = recipe.preparation.kind
    if kind == "silicone":
        return "silicone base (part A)"
    if kind == "resin":
        return "resin (part A)"
    if kind in ("gelatin", "agar"):
        return "water"
    return f"{recipe.matrix_key} (matrix)"


def is_dry_powder(stock) -> bool:
    """A powder stock, or any stock that carries a powder hazard key: it is weighed, not pipetted."""
    return stock.kind == "powder" or bool({"powder", "nano_powder"} & set(stock.hazards))


def dispense_tolerance(amount: float, by: str, limits) -> float:
    """± tolerance of a dispensed amount: k = 2 pipette error, or at least the balance resolution."""
    if by == "pipette":
        return 2.0 * limits.pipette_rel_error * amount
    return max(2.0 * limits.balance_resolution_g / math.sqrt(6.0), limits.balance_resolution_g)


def dilution_limits(recipe: Recipe, unit: str, *, matrix_density_g_per_ml: float | None = None) -> dict[str, Any]:
    """The recipe's limits as keyword arguments of :func:`plan_dilution` for amounts in ``unit``.

    Volumes of the limits become masses with the matrix density [g/mL] (default the recipe's
    matrix stock) when the amounts are weighed.
    """
    limits = recipe.limits
    density = recipe.matrix.density_g_per_ml if matrix_density_g_per_ml is None else matrix_density_g_per_ml
    scale = density if unit == "g" else 1.0
    return dict(
        unit=unit, min_amount=limits.min_weigh_g if unit == "g" else limits.min_dispense_ml,
        max_steps=limits.max_dilution_steps, dead_amount=limits.dead_volume_ml * scale,
        max_step_factor=limits.max_dilution_factor_per_step,
        max_vessel_amount=limits.max_dilution_vessel_ml * scale, diluent=_diluent_name(recipe),
        min_total_amount=min(limits.min_dilution_g if unit == "g" else limits.min_dilution_ml,
                             limits.max_dilution_vessel_ml * scale),
    )


def doses_for(recipe, table, fractions, potencies, potency_sds, sources, volume_ml, notes, binding,
           shared=None):
    limits = recipe.limits
    matrix_density = table.matrix_density_g_per_ml
    doses = []
    for i, key in enumerate(table.stock_keys):
        stock = recipe.stock(key)
        f = float(fractions[i])
        v = f * volume_ml
        m = v * table.density_g_per_ml[i]
        used = f > UNUSED_FRACTION
        if not used:
            doses.append(Dose(key, stock.kind, stock.lot, stock.expiry, 0.0, 0.0, 0.0, "", None,
                              0.0, 0.0, 0.0, float(potencies[i]), float(potency_sds[i]), sources[i]))
            continue
        by = "balance" if (recipe.by_mass or is_dry_powder(stock)) else "pipette"
        amount, unit = (m, "g") if by == "balance" else (v, "mL")
        try:
            if shared and key in shared:
                dilution = _reuse(shared[key], key, amount, unit)
            else:
                dilution = plan_dilution(stock=key, dose_amount=amount, **dilution_limits(
                    recipe, unit, matrix_density_g_per_ml=matrix_density))
        except DilutionInfeasible as exc:
            binding.append(BindingLimit("max_dilution_steps", float(exc.needed_steps or math.inf),
                                        float(limits.max_dilution_steps), str(exc)))
            notes.append(f"{exc}; the dose is listed undiluted and cannot be dispensed as it stands")
            dilution = DilutionPlan(stock=key, unit=unit, dose_amount=amount, steps=(),
                                    dispense_amount=amount, diluent=_diluent_name(recipe))
        rel_sd = dose_relative_sd(dispense_amount=dilution.dispense_amount, steps=dilution.steps, by=by,
                                  pipette_rel_error=limits.pipette_rel_error,
                                  balance_resolution_g=limits.balance_resolution_g)
        doses.append(Dose(
            stock=key, kind=stock.kind, lot=stock.lot, expiry=stock.expiry, volume_fraction=f,
            volume_ml=v, mass_g=m, by=by, dilution=dilution if dilution.steps else None,
            dispense_amount=dilution.dispense_amount,
            tolerance=dispense_tolerance(dilution.dispense_amount, by, limits),
            relative_sd=rel_sd, potency=float(potencies[i]), potency_sd=float(potency_sds[i]),
            potency_source=sources[i],
        ))
    return tuple(doses)


def _reuse(shared: DilutionPlan, key: str, amount: float, unit: str) -> DilutionPlan:
    """The dose ``amount`` delivered from the steps of a dilution made for several batches."""
    if shared.unit != unit:
        raise InputError(f"plan: the shared dilution of {key!r} is in {shared.unit}, the dose in {unit}")
    if not shared.steps:
        return DilutionPlan(stock=key, unit=unit, dose_amount=amount, steps=(), dispense_amount=amount,
                            diluent=shared.diluent)
    return DilutionPlan(stock=key, unit=unit, dose_amount=amount, steps=shared.steps,
                        dispense_amount=amount / shared.overall_factor, diluent=shared.diluent)


def matrix_amounts_for(recipe, table, fractions, volume_ml, doses) -> MatrixAmounts:
    limits = recipe.limits
    f_matrix = float(1.0 - fractions.sum())
    volume = f_matrix * volume_ml
    density = table.matrix_density_g_per_ml
    mass = volume * density
    carried_v = carried_m = 0.0
    for dose in doses:
        if dose.dilution is None:
            continue
        carried = dose.dilution.carried_diluent_amount
        if dose.dilution.unit == "g":
            carried_m += carried
            carried_v += carried / density
        else:
            carried_v += carried
            carried_m += carried * density
    prep = recipe.preparation
    weigh = lambda amount: (amount, "g", max(2 * limits.balance_resolution_g / math.sqrt(6), limits.balance_resolution_g))  # noqa: E731
    measure = lambda amount: (amount, "mL", 2 * limits.matrix_rel_error * amount)  # noqa: E731
    if prep.kind == "silicone":
        ratio = prep["base_to_curing_agent"]
        parts = (
            ("silicone base (part A)", *weigh(mass * ratio / (ratio + 1) - carried_m)),
            ("curing agent (part B)", *weigh(mass / (ratio + 1))),
        )
    elif prep.kind == "resin":
        hardener = prep["hardener_parts_per_100_resin"]
        parts = (
            ("resin (part A)", *weigh(mass * 100 / (100 + hardener) - carried_m)),
            ("hardener (part B)", *weigh(mass * hardener / (100 + hardener))),
        )
    elif prep.kind in ("gelatin", "agar"):
        powder = prep["gel_percent_w_v"] / 100.0 * volume
        parts = (
            (f"{prep.kind} powder", *weigh(powder)),
            ("water: make the gel up to", *measure(volume - carried_v)),
        )
    elif recipe.by_mass:
        parts = ((f"{recipe.matrix_key} (matrix)", *weigh(mass - carried_m)),)
    else:
        parts = ((f"{recipe.matrix_key} (matrix)", *measure(volume - carried_v)),)
    for label, amount, _, _ in parts:
        if amount <= 0:
            raise InputError(
                f"plan: the matrix part {label!r} comes out at {amount:.3g}; the pre-dilutions bring "
                "in more diluent than the batch holds (lower dead_volume_ml or allow a larger batch)"
            )
    return MatrixAmounts(f_matrix, volume, mass, carried_v, carried_m, parts)
