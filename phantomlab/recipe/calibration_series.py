"""Calibration series for a new stock lot: small batches spanning the stock's working range.

Labs characterise a new bottle with 3–5 concentrations and a linear fit (FIELD.md: μa =
μa,base + ε c, μs′ = μs′,base + σ c).  The series here holds every other stock at the
recipe's solved dose (the base, of known optics, measured as its own level 0) and gives the
stock under test at evenly spaced multiples of its solved dose, from ``low`` to ``high``
(defaults 0.25 and 2).  Even spacing makes the straight-line fit well conditioned; the base
level anchors the intercept, so cross-talk (an ink's scattering, a scatterer's absorption)
shows as a slope in the other coefficient.  Each level is a small batch with its own doses and
predicted optics (at the stock file's prior potency, or the calibrated one).  A stock that
needs pre-diluting is delivered to every level from ONE working dilution, planned for its
smallest dose and large enough for all levels (a technician makes it once; the levels differ
only in the amount dispensed, so a dilution error scales every level alike and shows as a
potency, not as scatter about the line).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, replace
from typing import Any

import numpy as np

from phantomlab.errors import InputError
from phantomlab.recipe.dilution import DilutionInfeasible, DilutionPlan, plan_dilution
from phantomlab.recipe.dose_amounts import dilution_limits
from phantomlab.recipe.plan import Plan, intrinsic_table, plan_for_fractions, solve
from phantomlab.recipe.recipe_file import Recipe

__all__ = ["CalibrationSeries", "SeriesLevel", "plan_series"]

DEFAULT_LOW, DEFAULT_HIGH, DEFAULT_LEVELS = 0.25, 2.0, 4
DEFAULT_SERIES_VOLUME_ML, DEFAULT_SERIES_MASS_G = 50.0, 50.0


@dataclass(frozen=True)
class SeriesLevel:
    """One small batch of the series: ``multiple`` × the recipe's dose of the stock under test."""

    level: int
    multiple: float
    plan: Plan


@dataclass(frozen=True)
class CalibrationSeries:
    """The levels of a calibration series (level 0 is the base without the stock under test)."""

    recipe: Recipe
    stock: str
    recipe_plan: Plan
    levels: tuple
    readout_index: int = 0
    shared_dilutions: tuple = ()

    @property
    def shared_dilution(self) -> DilutionPlan | None:
        """The shared working dilution of the stock under test, if it needs one."""
        return next((d for d in self.shared_dilutions if d.stock == self.stock), None)

    @property
    def readout_wavelength_nm(self) -> float:
        """Target wavelength where the stock under test changes the optics most [nm]."""
        return float(self.recipe.target.wavelength_nm[self.readout_index])

    def to_json(self) -> dict[str, Any]:
        return {
            "recipe": self.recipe.name,
            "series_stock": self.stock,
            "lot": self.recipe.stock(self.stock).lot,
            "batch_volume_ml": self.levels[0].plan.batch_volume_ml,
            "batch_mass_g": self.recipe.batch_mass_g,
            "recipe_volume_fraction": self.recipe_plan.dose(self.stock).volume_fraction,
            "levels": [
                {
                    "level": lv.level,
                    "multiple_of_recipe_dose": lv.multiple,
                    "volume_fraction": lv.plan.dose(self.stock).volume_fraction,
                    "doses": [d.to_json() for d in lv.plan.doses],
                    "matrix": lv.plan.matrix.to_json(),
                    "predicted": lv.plan.predicted.to_json(),
                }
                for lv in self.levels
            ],
            "warnings": list(dict.fromkeys(w for lv in self.levels for w in lv.plan.warnings)),
            "readout_wavelength_nm": self.readout_wavelength_nm,
            "fit_model": "mua = mua_base + epsilon * volume_fraction; musp = musp_base + sigma * volume_fraction",
        }


def plan_series(recipe: Recipe, stock: str, *, levels: int | None = None, low: float | None = None,
                high: float | None = None, batch_volume_ml: float | None = None,
                batch_mass_g: float | None = None, potencies=None) -> CalibrationSeries:
    """Plan a calibration series of one stock around the recipe's working point.

    Parameters
    ----------
    recipe : Recipe
    stock : str
        Key of the stock under test (one of the recipe's stocks).
    levels : int, optional
        Concentrations of the stock, 3 to 5 (default the recipe's ``[series] levels``, else 4);
        the base (level 0) comes on top.
    low, high : float, optional
        Smallest and largest multiple of the recipe's dose (defaults 0.25 and 2).
    batch_volume_ml, batch_mass_g : float, optional
        Size of each small batch (defaults from ``[series]``, else 50 mL or 50 g).
    potencies : mapping, optional
        As :func:`phantomlab.recipe.solve`.

    Returns
    -------
    CalibrationSeries

    Raises
    ------
    InputError
        Unknown stock, a stock the recipe does not dose, levels outside 3–5, a bad range.
    """
    if stock not in recipe.stock_keys:
        raise InputError(f"series: {stock!r} is not a stock of this recipe; its stocks: "
                         f"{', '.join(recipe.stock_keys)}")
    defaults = recipe.series
    levels = int(levels if levels is not None else defaults.get("levels", DEFAULT_LEVELS))
    low = float(low if low is not None else defaults.get("low", DEFAULT_LOW))
    high = float(high if high is not None else defaults.get("high", DEFAULT_HIGH))
    if not 3 <= levels <= 5:
        raise InputError(f"series: {levels} levels; give 3 to 5 concentrations")
    if not (0 < low < high < math.inf):
        raise InputError(f"series: range {low:g}-{high:g} × the recipe dose; need 0 < low < high, finite")
    if batch_mass_g is not None and not recipe.by_mass or batch_volume_ml is not None and recipe.by_mass:
        sized = "mass: give the batch mass" if recipe.by_mass else "volume: give the batch volume"
        raise InputError(f"series: this recipe is sized by {sized} of each small batch")
    plan = solve(recipe, potencies=potencies, curve=False)
    dose = plan.dose(stock).volume_fraction
    if dose <= 0:
        raise InputError(f"series: the recipe gives {stock!r} no dose; the series spans multiples of its dose")
    if recipe.by_mass:
        size = float(batch_mass_g or defaults.get("batch_mass_g", DEFAULT_SERIES_MASS_G))
        small = replace(recipe, batch_mass_g=size, batch_volume_ml=None)
    else:
        size = float(batch_volume_ml or defaults.get("batch_volume_ml", DEFAULT_SERIES_VOLUME_ML))
        small = replace(recipe, batch_volume_ml=size, batch_mass_g=None)
    if not 0 < size < math.inf:
        raise InputError("series: the batch size must be a finite number > 0")
    table = intrinsic_table(recipe, recipe.target.wavelength_nm)
    base = {d.stock: d.volume_fraction for d in plan.doses if d.stock != stock}
    out = []
    multiples = np.concatenate([[0.0], np.linspace(low, high, levels)])
    first = [plan_for_fractions(small, {**base, stock: float(multiple * dose)}, potencies=potencies,
                                table=table, check_target=False) for multiple in multiples]
    shared = {}
    for key in recipe.stock_keys:
        used = [p.dose(key) for p in first if p.dose(key).used]
        plan_shared = _shared_dilution(small, key, used) if used else None
        if plan_shared is not None:
            shared[key] = plan_shared
    for number, (multiple, level_plan) in enumerate(zip(multiples, first)):
        if shared:
            level_plan = plan_for_fractions(small, {**base, stock: float(multiple * dose)}, potencies=potencies,
                                            table=table, check_target=False, shared_dilutions=shared)
        out.append(SeriesLevel(level=number, multiple=float(multiple), plan=level_plan))
    solids = recipe.limits.max_solids_volume_fraction
    if solids is not None:
        phi = np.array([recipe.stock(k).solids_volume_fraction for k in recipe.stock_keys])
        top = out[-1].plan
        used = float(phi @ np.array([top.dose(k).volume_fraction for k in recipe.stock_keys]))
        if used > solids:
            raise InputError(f"series: the top level needs {100 * used:.2f} % v/v solids; limit "
                             f"{100 * solids:g} % (lower --high)")
    row = table.index_of(stock)
    signal = table.mua_per_mm[row] if recipe.stock(stock).kind == "absorber" else table.musp_per_mm[row]
    return CalibrationSeries(recipe=recipe, stock=stock, recipe_plan=plan, levels=tuple(out),
                             readout_index=int(np.argmax(signal)), shared_dilutions=tuple(shared.values()))


def _shared_dilution(recipe: Recipe, stock: str, doses) -> DilutionPlan | None:
    """One working dilution that delivers every level's dose of ``stock`` (None if none is needed).

    Planned for the smallest dose, with the last dilution holding what all levels draw from it;
    if no such plan fits the limits, each level keeps its own (None).
    """
    if not any(d.dilution for d in doses):
        return None
    unit = doses[0].unit
    amounts = [d.mass_g if unit == "g" else d.volume_ml for d in doses]
    smallest = min(amounts)
    try:
        return plan_dilution(stock=stock, dose_amount=smallest, draw_multiple=sum(amounts) / smallest,
                             **dilution_limits(recipe, unit))
    except DilutionInfeasible:
        return None
