"""From a recipe to a plan: doses, pre-dilutions, predicted optics with SDs (layer 3).

:func:`solve` is the one entry the command line, the batch log and the page use: it builds
the stocks' intrinsic optics on the target grid (``phantomlab.optics.intrinsic_optics`` at
potency 1), solves the doses (:mod:`phantomlab.recipe.solver`), turns volume fractions into
amounts to pipette or weigh, plans pre-dilutions (:mod:`phantomlab.recipe.dilution`) and
propagates uncertainty (:mod:`phantomlab.recipe.uncertainty`).  :func:`predict` gives the
optics of any doses (what was really dispensed) with the same model.

A batch given by mass (silicone, resin) is solved in volume fractions too (the optics are
per volume): with volumes adding, the mix density is ρ = Σ f_j ρ_j over all components
(matrix included), the batch volume is M/ρ and each mass is f_j ρ_j M/ρ.
"""

from __future__ import annotations

import datetime as _dt
import math
import warnings
from typing import Any, Mapping

import numpy as np

from phantomlab.errors import InputError, PhantomlabWarning
from phantomlab.recipe.dilution import DilutionInfeasible, DilutionPlan, plan_dilution
from phantomlab.recipe.mixmodel import IntrinsicTable, mix_coefficients
from phantomlab.recipe.plan_result import UNUSED_FRACTION, Dose, MatrixAmounts, Plan, Prediction
from phantomlab.recipe.recipe_file import Recipe
from phantomlab.recipe.solver import BindingLimit, solve_fractions
from phantomlab.recipe.targets import Target
from phantomlab.recipe.uncertainty import dose_relative_sd, propagate_sd

__all__ = ["Dose", "MatrixAmounts", "Plan", "Prediction", "dilution_limits", "intrinsic_table", "is_dry_powder",
           "plan_for_fractions", "predict", "solve", "resolve_potencies", "resolve_spectral"]

#: Doses below this volume fraction count as "not used".
_UNUSED = UNUSED_FRACTION


# ---- building blocks ------------------------------------------------------------------------


def intrinsic_table(recipe: Recipe, wavelength_nm, *, so2: float | None = None) -> IntrinsicTable:
    """Intrinsic optics (potency 1) of the recipe's stocks and matrix on a wavelength grid.

    ``so2`` [fraction] is the oxygen saturation of a blood stock's haemoglobin; by default
    the sO₂ at which the recipe's target holds (``[oxygenation] so2``).

    Raises
    ------
    InputError
        From the optics layer, e.g. a wavelength outside a stock's measured spectrum.
    """
    from phantomlab.optics import intrinsic_optics  # layer 2
    from phantomlab.optics.dependent import ANGULAR_MODELS
    from phantomlab.optics.intrinsic import stock_angular_scattering

    grid = np.atleast_1d(np.asarray(wavelength_nm, dtype=float))
    matrix = recipe.matrix
    temperature = recipe.preparation.temperature_c
    matrix_optics = intrinsic_optics(matrix, wavelength_nm=grid, matrix=matrix, temperature_c=temperature,
                                     water_temperature_c=temperature)
    if so2 is None and getattr(recipe, "oxygenation", None) is not None:
        so2 = recipe.oxygenation.so2
    rows = [
        intrinsic_optics(recipe.stock(key), wavelength_nm=grid, matrix=matrix, potency=1.0,
                         temperature_c=temperature, so2=so2, water_temperature_c=temperature)
        for key in recipe.stock_keys
    ]
    stocks = [recipe.stock(key) for key in recipe.stock_keys]
    angular = None
    if recipe.dependent_scattering in ANGULAR_MODELS:
        angular = tuple(stock_angular_scattering(stock, wavelength_nm=grid, matrix=matrix, temperature_c=temperature)
                        for stock in stocks)
    return IntrinsicTable(
        wavelength_nm=grid,
        stock_keys=recipe.stock_keys,
        mua_per_mm=np.array([r.mua_per_mm for r in rows]),
        mus_per_mm=np.array([r.mus_per_mm for r in rows]),
        g=np.array([np.broadcast_to(r.g, grid.shape) for r in rows]),
        matrix_mua_per_mm=np.asarray(matrix_optics.mua_per_mm, dtype=float),
        solids_volume_fraction=np.array([s.solids_volume_fraction for s in stocks]),
        density_g_per_ml=np.array([s.density_g_per_ml for s in stocks]),
        matrix_density_g_per_ml=matrix.density_g_per_ml,
        mua_carrier_per_mm=np.array([r.mua_carrier_per_mm for r in rows]),
        packing=recipe.dependent_scattering,
        angular=angular,
    )


def resolve_potencies(recipe: Recipe, potencies: Mapping[str, tuple] | None):
    """Potency, SD and source of each stock: the override where given, else the shelf.

    An override may be ``(potency, sd)`` or ``(potency, sd, lot)``; with a lot that is not
    the shelf's lot, it is ignored (a new lot starts from the stock file's prior) and a
    warning says so.

    Returns
    -------
    values : ndarray (S,), sds : ndarray (S,), sources : list of str, notes : list of str
    """
    potencies = dict(potencies or {})
    unknown = sorted(set(potencies) - set(recipe.stock_keys) - {recipe.matrix_key})
    values, sds, sources, notes = [], [], [], []
    for key in recipe.stock_keys:
        stock = recipe.stock(key)
        value, sd, source = stock.potency, stock.potency_sd, "shelf"
        if key in potencies:
            entry = tuple(potencies[key])
            if len(entry) not in (2, 3, 4):
                raise InputError(f"potencies[{key!r}] must be (potency, sd), (potency, sd, lot) or "
                                 "(potency, sd, lot, spectral correction)")
            if len(entry) >= 3 and entry[2] not in (None, "", stock.lot):
                notes.append(f"{key}: calibrated potency is for lot {entry[2]!r}, the shelf holds "
                             f"lot {stock.lot!r}; using the stock file's prior")
            else:
                value, sd, source = float(entry[0]), float(entry[1]), "calibrated"
                if not (math.isfinite(value) and value > 0 and math.isfinite(sd) and sd >= 0):
                    raise InputError(f"potencies[{key!r}] = {entry!r}; potency must be > 0, sd >= 0")
        values.append(value)
        sds.append(sd)
        sources.append(source)
    return np.array(values), np.array(sds), sources, notes + (
        [f"{IGNORED_POTENCIES_NOTE}: {', '.join(unknown)}"] if unknown else []
    )


def resolve_spectral(recipe: Recipe, potencies: Mapping[str, tuple] | None) -> dict:
    """The spectral corrections of the calibrated potencies that :func:`resolve_potencies` uses.

    Returns
    -------
    dict of stock key to :class:`~phantomlab.recipe.spectral_potency.SpectralCorrection`
        Each at the potency it is used with (a correction of another lot is dropped with it).
    """
    from phantomlab.recipe.spectral_potency import spectral_of

    found = {}
    for key in recipe.stock_keys:
        entry = (potencies or {}).get(key)
        if entry is None:
            continue
        correction = spectral_of(entry)
        lot = tuple(entry)[2] if len(tuple(entry)) >= 3 else None
        if correction is None or lot not in (None, "", recipe.stock(key).lot):
            continue
        found[key] = correction.with_potency(float(tuple(entry)[0]), float(tuple(entry)[1]))
    return found


def _spectral_table(table: IntrinsicTable, corrections: dict) -> IntrinsicTable:
    from phantomlab.recipe.spectral_potency import corrected_table

    return corrected_table(table, corrections)


#: The start of the note that potencies were given for stocks the recipe does not use: for the
#: command line (a potencies file may hold the whole shelf), never for the bench.
IGNORED_POTENCIES_NOTE = "potencies given for stocks not in the recipe ignored"


def _batch_volume(recipe: Recipe, table: IntrinsicTable, fractions: np.ndarray) -> float:
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


def _doses(recipe, table, fractions, potencies, potency_sds, sources, volume_ml, notes, binding,
           shared=None):
    limits = recipe.limits
    matrix_density = table.matrix_density_g_per_ml
    doses = []
    for i, key in enumerate(table.stock_keys):
        stock = recipe.stock(key)
        f = float(fractions[i])
        v = f * volume_ml
        m = v * table.density_g_per_ml[i]
        used = f > _UNUSED
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


def _matrix_amounts(recipe, table, fractions, volume_ml, doses) -> MatrixAmounts:
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


def _residuals(target: Target, predicted: Prediction) -> dict[str, Any]:
    def relative(pred, want):
        out = np.full(want.shape, np.nan)
        has = np.isfinite(want)
        out[has] = pred[has] / want[has] - 1.0
        return out

    mua = relative(predicted.mua_per_mm, target.mua_per_mm)
    musp = relative(predicted.musp_per_mm, target.musp_per_mm)
    g = predicted.g - target.g
    return {
        "wavelength_nm": target.wavelength_nm,
        "mua_relative": mua,
        "musp_relative": musp,
        "g_absolute": g,
        "mua_met": bool(np.all(np.abs(mua[np.isfinite(mua)]) <= target.mua_tolerance * (1 + 1e-9))),
        "musp_met": bool(np.all(np.abs(musp[np.isfinite(musp)]) <= target.musp_tolerance * (1 + 1e-9))),
        "g_met": bool(np.all(np.abs(g[np.isfinite(g)]) <= target.g_tolerance * (1 + 1e-9))),
    }


def _miss_notes(target: Target, residuals: dict) -> list[str]:
    notes = []
    for name, key, tol, scale, unit in (
        ("mua", "mua_relative", target.mua_tolerance, 100.0, "%"),
        ("musp", "musp_relative", target.musp_tolerance, 100.0, "%"),
        ("g", "g_absolute", target.g_tolerance, 1.0, ""),
    ):
        values = residuals[key]
        finite = np.isfinite(values)
        if not np.any(finite):
            continue
        worst = int(np.nanargmax(np.where(finite, np.abs(values), -1.0)))
        if abs(values[worst]) > tol * (1 + 1e-9):
            fmt = "+.1f" if unit else "+.3f"
            notes.append(
                f"{name} not met within tolerance: at {target.wavelength_nm[worst]:g} nm "
                f"{scale * values[worst]:{fmt}}{unit} (tolerance ±{scale * tol:g}{unit})"
            )
    return notes


def _spread_notes(target: Target, predicted: Prediction, *, for_bench: bool = False) -> list[str]:
    """One note when the predicted SD alone is wider than the target's tolerance.

    ``for_bench``: the wording for the sheet and the page (no command names)."""
    parts = []
    for name, want, sd, tol in (("mua", target.mua_per_mm, predicted.mua_sd_per_mm, target.mua_tolerance),
                                ("musp", target.musp_per_mm, predicted.musp_sd_per_mm, target.musp_tolerance)):
        has = np.isfinite(want) & (want > 0)
        if not np.any(has):
            continue
        relative = np.where(has, sd / np.where(has, want, 1.0), -1.0)
        worst = int(np.argmax(relative))
        if relative[worst] > tol * (1 + 1e-9):
            parts.append(f"{name} up to {100 * relative[worst]:.2g} % (at {target.wavelength_nm[worst]:g} nm; "
                         f"tolerance ±{100 * tol:g} %)")
    if not parts:
        return []
    remedy = ("calibrate them with a calibration series" if for_bench
              else "calibrate them (plan --series)")
    return [f"predicted SD wider than the tolerance: {' and '.join(parts)}; the stock potencies are not "
            f"known well enough to land within it first time: {remedy} or titrate and re-measure"]


def dependent_scattering_notes(recipe: Recipe, table: IntrinsicTable, fractions: np.ndarray) -> list[str]:
    """Plain-language warnings where a batch's scatterers are too dense to add linearly.

    An emulsion stock above :data:`~phantomlab.optics.mixing.EMULSION_LINEAR_LIMIT` of the
    batch volume, or a particle volume fraction above
    :data:`~phantomlab.optics.mixing.INDEPENDENT_SCATTERING_LIMIT` (Aernouts et al. 2014,
    Opt. Express 22:6086).  Each says whether the prediction is corrected.
    """
    from phantomlab.optics.mixing import EMULSION_LINEAR_LIMIT, INDEPENDENT_SCATTERING_LIMIT  # layer 2

    from phantomlab.optics.dependent import ANGULAR_MODELS

    corrected = table.packing != "none"
    angular = [i for i, a in enumerate(table.angular or ()) if a is not None]
    if corrected and table.packing in ANGULAR_MODELS and angular:
        _, musp_factor = table.scattering_factors(fractions)
        low, high = float(np.min(musp_factor[angular])), float(np.max(musp_factor[angular]))
        others = [table.stock_keys[i] for i in range(len(table.stock_keys)) if i not in angular]
        tail = (f"the prediction includes the angular Percus–Yevick correction (factor {low:.3f}–{high:.3f} on the "
                f"μs′ of {', '.join(table.stock_keys[i] for i in angular)} across the wavelengths"
                + (f"; the small-particle factor {float(table.packing_factor(fractions)):.3f} on "
                   f"{', '.join(others)}, an upper estimate of the reduction)" if others else ")"))
    elif corrected:
        tail = (f"the prediction includes the Percus–Yevick packing correction (factor "
                f"{float(table.packing_factor(fractions)):.3f} on the scattering; an upper estimate of "
                "the reduction for particles comparable to the wavelength)")
    else:
        tail = ("the predicted scattering is too high; the recipe can switch on the "
                "dependent-scattering correction (Percus–Yevick packing factor)")
    notes = []
    for key, fraction in zip(table.stock_keys, fractions):
        if recipe.stock(key).kind == "emulsion" and fraction > EMULSION_LINEAR_LIMIT:
            notes.append(
                f"{key} makes up {100 * fraction:.1f} % of the batch volume, above the about "
                f"{100 * EMULSION_LINEAR_LIMIT:g} % where an emulsion's scattering stops growing in proportion "
                f"(dependent scattering, Aernouts et al. 2014); {tail}"
            )
    particles = float(fractions @ table.solids_volume_fraction)
    if particles > INDEPENDENT_SCATTERING_LIMIT:
        notes.append(
            f"the particles fill {100 * particles:.1f} % of the batch volume, above the "
            f"{100 * INDEPENDENT_SCATTERING_LIMIT:g} % where scattering stops adding up linearly "
            f"(dependent scattering); {tail}"
        )
    return notes


def _fixed_blood(recipe: Recipe, potencies) -> dict[int, float] | None:
    """The blood dose that ``[oxygenation] thb_um`` fixes (index in the recipe's stocks → f)."""
    oxygenation = getattr(recipe, "oxygenation", None)
    if oxygenation is None or oxygenation.thb_um is None:
        return None
    from phantomlab.recipe.oxygenation import blood_fraction

    index = recipe.stock_keys.index(oxygenation.blood_stock)
    return {index: blood_fraction(oxygenation, stock=recipe.stock(oxygenation.blood_stock),
                                  potency=float(potencies[index]))}


def _curve_grid(target: Target) -> np.ndarray | None:
    lo, hi = float(target.wavelength_nm.min()), float(target.wavelength_nm.max())
    if hi - lo < 1.0:
        return None
    if target.wavelength_nm.size >= 30:
        return target.wavelength_nm
    return np.union1d(np.linspace(lo, hi, 41), target.wavelength_nm)


def _prediction(table, fractions, potencies, potency_sds, dose_sds, matrix_rel_sd, spectral=None) -> Prediction:
    from phantomlab.recipe.spectral_potency import potency_sd_by_wavelength

    mix = mix_coefficients(table, volume_fractions=fractions, potencies=potencies)
    sd = propagate_sd(table, volume_fractions=fractions, potencies=potencies, potency_sd=potency_sds,
                      dose_rel_sd=dose_sds, matrix_rel_sd=matrix_rel_sd,
                      potency_sd_by_wavelength=potency_sd_by_wavelength(
                          table, potencies=potencies, potency_sd=potency_sds, corrections=spectral or {}))
    return Prediction(table.wavelength_nm, mix["mua_per_mm"], mix["mus_per_mm"], mix["musp_per_mm"],
                      mix["g"], sd["mua_sd_per_mm"], sd["musp_sd_per_mm"])


# ---- public API ------------------------------------------------------------------------------


def solve(recipe: Recipe, *, potencies: Mapping[str, tuple] | None = None,
          table: IntrinsicTable | None = None, curve: bool = True) -> Plan:
    """Doses that bring the recipe's stocks closest to its target, with their uncertainty.

    Parameters
    ----------
    recipe : Recipe
    potencies : mapping of stock key to (potency, sd) or (potency, sd, lot), optional
        Overrides the shelf's potency and potency_sd (calibrated values from the batch log).
    table : IntrinsicTable, optional
        Precomputed intrinsic optics on the target grid (benchmarks, tests).
    curve : bool
        Also predict a dense spectrum over the target band for the sheet's plot.

    Returns
    -------
    Plan
        Doses, pre-dilutions, matrix amounts, predicted μa, μs′, g with SDs at the target
        wavelengths, residuals, binding limits and warnings.  When the target is out of reach
        the plan is the closest feasible recipe and ``binding_limits`` says which limit binds
        and by how much.
    """
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always", PhantomlabWarning)
        plan = _solve(recipe, potencies=potencies, table=table, curve=curve)
    physics = []
    for item in caught:
        if issubclass(item.category, PhantomlabWarning):
            message = " ".join(str(item.message).split())
            if message not in physics:
                physics.append(message)
                warnings.warn(message, PhantomlabWarning, stacklevel=2)
        else:
            warnings.warn_explicit(item.message, item.category, item.filename, item.lineno)
    if physics:
        from dataclasses import replace

        plan = replace(plan, warnings=plan.warnings + tuple(m for m in physics if m not in plan.warnings),
                       sheet_notes=plan.sheet_notes + tuple(m for m in physics if m not in plan.sheet_notes))
    return plan


def _solve(recipe, *, potencies, table, curve) -> Plan:
    return _assemble(recipe, potencies=potencies, table=table, curve=curve, fractions=None)


def _assemble(recipe, *, potencies, table, curve, fractions, check_target=True, shared=None) -> Plan:
    target = recipe.target
    values, sds, sources, notes = resolve_potencies(recipe, potencies)
    spectral = resolve_spectral(recipe, potencies)
    if table is None:
        table = intrinsic_table(recipe, target.wavelength_nm)
    table = _spectral_table(table, spectral)
    if fractions is None:
        outcome = solve_fractions(table, target, potencies=values,
                                  max_solids_volume_fraction=recipe.limits.max_solids_volume_fraction,
                                  fixed_volume_fractions=_fixed_blood(recipe, values))
        fractions = outcome.volume_fractions
        binding = list(outcome.binding_limits)
    else:
        binding = []
    volume_ml = _batch_volume(recipe, table, fractions)
    doses = _doses(recipe, table, fractions, values, sds, sources, volume_ml, notes, binding, shared)
    matrix = _matrix_amounts(recipe, table, fractions, volume_ml, doses)
    dose_sds = np.array([d.relative_sd for d in doses])
    predicted = _prediction(table, fractions, values, sds, dose_sds, recipe.limits.matrix_rel_error, spectral)
    dense = None
    grid = _curve_grid(target) if curve else None
    if grid is not None:
        dense_table = table if grid is target.wavelength_nm else _spectral_table(intrinsic_table(recipe, grid),
                                                                                   spectral)
        dense = _prediction(dense_table, fractions, values, sds, dose_sds, recipe.limits.matrix_rel_error,
                            spectral)
    residuals = _residuals(target, predicted)
    messages = [b.message for b in binding]
    if binding:
        messages.append("closest feasible recipe given")
    bench = dependent_scattering_notes(recipe, table, fractions)
    if check_target:
        bench += _miss_notes(target, residuals)
        messages += bench + _spread_notes(target, predicted)
        bench += _spread_notes(target, predicted, for_bench=True)
    else:
        messages += bench
    messages += notes
    bench += [n for n in notes if not n.startswith(IGNORED_POTENCIES_NOTE)]
    today = _dt.date.today()
    for key in (recipe.matrix_key, *recipe.stock_keys):
        stock = recipe.stock(key)
        if stock.expiry is not None and stock.expiry < today:
            expired = f"{key}: lot {stock.lot or '(none)'} expired on {stock.expiry.isoformat()}"
            messages.append(expired)
            bench.append(expired)
    mass = volume_ml * (fractions @ table.density_g_per_ml
                        + (1 - fractions.sum()) * table.matrix_density_g_per_ml)
    return Plan(
        recipe=recipe, batch_volume_ml=volume_ml, batch_mass_g=float(mass), doses=doses, matrix=matrix,
        predicted=predicted, curve=dense, target=target, residuals=residuals,
        binding_limits=tuple(binding), warnings=tuple(dict.fromkeys(messages)),
        sheet_notes=tuple(dict.fromkeys(bench)),
    )


def plan_for_fractions(recipe: Recipe, volume_fractions: Mapping[str, float], *, potencies=None,
                       table: IntrinsicTable | None = None, curve: bool = False,
                       check_target: bool = True,
                       shared_dilutions: Mapping[str, DilutionPlan] | None = None) -> Plan:
    """A plan for given doses (no solving): amounts, pre-dilutions, prediction with SDs.

    Used for the levels of a calibration series and for re-planning fixed doses.

    Parameters
    ----------
    recipe : Recipe
    volume_fractions : mapping of stock key to volume fraction [fraction]
    potencies : mapping, optional
        As :func:`solve`.
    table : IntrinsicTable, optional
        Precomputed intrinsic optics on the target grid.
    curve : bool
        Also predict a dense spectrum for the sheet's plot.
    check_target : bool
        Warn where the doses miss the recipe's target (off for calibration-series levels).
    shared_dilutions : mapping of stock key to DilutionPlan, optional
        Deliver these stocks through the steps of an existing dilution (one working dilution
        for several batches, e.g. a calibration series) instead of planning their own; the
        amount dispensed is the dose divided by that dilution's overall factor.
    """
    unknown = sorted(set(volume_fractions) - set(recipe.stock_keys))
    if unknown:
        raise InputError(f"plan: {unknown[0]!r} is not a stock of this recipe; its stocks: "
                         f"{', '.join(recipe.stock_keys)}")
    fractions = np.array([float(volume_fractions.get(k, 0.0)) for k in recipe.stock_keys])
    if np.any(~np.isfinite(fractions)) or np.any(fractions < 0) or fractions.sum() > 1:
        raise InputError("plan: volume fractions must be finite, >= 0 and sum to at most 1")
    return _assemble(recipe, potencies=potencies, table=table, curve=curve, fractions=fractions,
                     check_target=check_target, shared=shared_dilutions)


def predict(recipe: Recipe, *, volume_fractions: Mapping[str, float], potencies=None,
            wavelength_nm=None, dose_relative_sd: Mapping[str, float] | None = None,
            table: IntrinsicTable | None = None) -> Prediction:
    """Optics of given doses (e.g. what was really dispensed), with SDs.

    Parameters
    ----------
    recipe : Recipe
    volume_fractions : mapping of stock key to volume fraction [fraction]
        Of the undiluted stock in the final mix; stocks left out count as 0.
    potencies : mapping, optional
        As :func:`solve`.
    wavelength_nm : array, optional [nm]
        Defaults to the target's grid.
    dose_relative_sd : mapping of stock key to relative SD, optional
        Dispensing uncertainty of each dose; by default 0 (the doses are taken as known, only
        potency SDs propagate).
    table : IntrinsicTable, optional
        Precomputed intrinsic optics on ``wavelength_nm``.

    Returns
    -------
    Prediction
    """
    unknown = sorted(set(volume_fractions) - set(recipe.stock_keys))
    if unknown:
        raise InputError(f"predict: {unknown[0]!r} is not a stock of this recipe; its stocks: "
                         f"{', '.join(recipe.stock_keys)}")
    fractions = np.array([float(volume_fractions.get(k, 0.0)) for k in recipe.stock_keys])
    if np.any(~np.isfinite(fractions)) or np.any(fractions < 0) or fractions.sum() > 1:
        raise InputError("predict: volume fractions must be finite, >= 0 and sum to at most 1")
    grid = recipe.target.wavelength_nm if wavelength_nm is None else np.atleast_1d(
        np.asarray(wavelength_nm, dtype=float))
    if table is None:
        table = intrinsic_table(recipe, grid)
    values, sds, _, _ = resolve_potencies(recipe, potencies)
    spectral = resolve_spectral(recipe, potencies)
    table = _spectral_table(table, spectral)
    rel = dict(dose_relative_sd or {})
    dose_sds = np.array([float(rel.get(k, 0.0)) for k in recipe.stock_keys])
    return _prediction(table, fractions, values, sds, dose_sds, 0.0, spectral)
