"""From a recipe to a plan: doses, pre-dilutions, predicted optics with SDs (layer 3).

:func:`solve` is the one entry the command line, the batch log and the page use: it builds
the stocks' intrinsic optics on the target grid (``phantomlab.optics.intrinsic_optics`` at
potency 1), solves the doses (:mod:`phantomlab.recipe.solver`), turns volume fractions into
amounts to pipette or weigh with their pre-dilutions (:mod:`phantomlab.recipe.dose_amounts`),
propagates uncertainty (:mod:`phantomlab.recipe.uncertainty`) and adds the notes on what the
plan misses (:mod:`phantomlab.recipe.plan_notes`).  :func:`predict` gives the optics of any
doses (what was really dispensed) with the same model.

A batch given by mass (silicone, resin) is solved in volume fractions too (the optics are
per volume): with volumes adding, the mix density is ρ = Σ f_j ρ_j over all components
(matrix included), the batch volume is M/ρ and each mass is f_j ρ_j M/ρ.
"""

from __future__ import annotations

import datetime as _dt
import math
import warnings
from typing import Mapping

import numpy as np

from phantomlab.errors import InputError, PhantomlabWarning
from phantomlab.recipe.dilution import DilutionPlan
from phantomlab.recipe.dose_amounts import batch_volume, doses_for, matrix_amounts_for
from phantomlab.recipe.mixmodel import IntrinsicTable, mix_coefficients
from phantomlab.recipe.plan_notes import dependent_scattering_notes, miss_notes, spread_notes, target_residuals
from phantomlab.recipe.plan_result import Dose, MatrixAmounts, Plan, Prediction
from phantomlab.recipe.recipe_file import Recipe
from phantomlab.recipe.solver import solve_fractions
from phantomlab.recipe.targets import Target
from phantomlab.recipe.uncertainty import propagate_sd

__all__ = ["Dose", "MatrixAmounts", "Plan", "Prediction", "intrinsic_table", "plan_for_fractions", "predict",
           "solve", "resolve_potencies", "resolve_spectral"]


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
    volume_ml = batch_volume(recipe, table, fractions)
    doses = doses_for(recipe, table, fractions, values, sds, sources, volume_ml, notes, binding, shared)
    matrix = matrix_amounts_for(recipe, table, fractions, volume_ml, doses)
    dose_sds = np.array([d.relative_sd for d in doses])
    predicted = _prediction(table, fractions, values, sds, dose_sds, recipe.limits.matrix_rel_error, spectral)
    dense = None
    grid = _curve_grid(target) if curve else None
    if grid is not None:
        dense_table = table if grid is target.wavelength_nm else _spectral_table(intrinsic_table(recipe, grid),
                                                                                   spectral)
        dense = _prediction(dense_table, fractions, values, sds, dose_sds, recipe.limits.matrix_rel_error,
                            spectral)
    residuals = target_residuals(target, predicted)
    messages = [b.message for b in binding]
    if binding:
        messages.append("closest feasible recipe given")
    bench = dependent_scattering_notes(recipe, table, fractions)
    if check_target:
        bench += miss_notes(target, residuals)
        messages += bench + spread_notes(target, predicted)
        bench += spread_notes(target, predicted, for_bench=True)
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
